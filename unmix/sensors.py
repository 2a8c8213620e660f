"""Band tables of multispectral sensors and their spectral response functions.

A :class:`Sensor` is a named tuple of :class:`Band` objects. A band's relative spectral response is
either a Gaussian built from its centre and full width at half maximum (FWHM), or a tabulated curve
(wavelength, relative response) read from a file by :func:`unmix.io.library.read_response` and turned
into a sensor by :func:`tabulated_sensor`.

Built-in sensors (ids for :func:`get_sensor`):

=====================  =============================================================================
id                     bands
=====================  =============================================================================
``landsat-5-tm``       Landsat 4-5 TM reflective bands B1-B5, B7 (thermal B6 left out)
``landsat-7-etm``      Landsat 7 ETM+ reflective bands B1-B5, B7 (thermal B6, panchromatic B8 left out)
``landsat-8-oli``      Landsat 8 OLI B1-B7 and cirrus B9 (panchromatic B8 and the TIRS bands left out)
``landsat-9-oli``      Landsat 9 OLI-2, same nominal bands as OLI
``sentinel-2a-msi``    Sentinel-2A MSI, all 13 bands B1-B12 with B8A
``sentinel-2b-msi``    Sentinel-2B MSI, all 13 bands B1-B12 with B8A
=====================  =============================================================================

The Landsat tables are published as band edges (lower and upper wavelength); they are turned into a
Gaussian with centre = mid-point and FWHM = edge width. The Sentinel-2 tables are published as centre
and bandwidth. A Gaussian is an approximation of the real, flatter-topped responses; for exact work
load the agency's tabulated responses with :func:`unmix.io.library.read_response` and
:func:`tabulated_sensor`.

Each sensor also names the red and near-infrared bands used by default for NDVI
(:attr:`Sensor.red`, :attr:`Sensor.nir`): TM/ETM+ B3/B4, OLI B4/B5, MSI B4/B8.
"""

from __future__ import annotations

from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field

import numpy as np

from .errors import InputError, LibraryFormatError, UnknownNameError

__all__ = [
    "Band",
    "Sensor",
    "gaussian_response",
    "get_sensor",
    "list_sensors",
    "tabulated_sensor",
    "FWHM_TO_SIGMA",
]

#: sigma of a Gaussian = FWHM * FWHM_TO_SIGMA  (FWHM = 2 sqrt(2 ln 2) sigma)
FWHM_TO_SIGMA = 1.0 / (2.0 * np.sqrt(2.0 * np.log(2.0)))

# A Gaussian band is treated as zero beyond this many FWHM from its centre (= 4.7 sigma; the response
# there is below 1e-5 of its peak and the area beyond is below 3e-6 of the total).
_GAUSS_HALF_SUPPORT_FWHM = 2.0


def gaussian_response(wavelengths, centre_nm: float, fwhm_nm: float) -> np.ndarray:
    """Relative spectral response of a Gaussian band, peak 1.

    Parameters
    ----------
    wavelengths : (...) array_like
        Wavelengths [nm].
    centre_nm : float
        Band centre [nm].
    fwhm_nm : float
        Full width at half maximum [nm], > 0.

    Returns
    -------
    (...) ndarray of float64
        Relative response 0..1; exactly 0 farther than 2 FWHM from the centre.

    Examples
    --------
    >>> float(gaussian_response(660.0, 660.0, 30.0))
    1.0
    >>> round(float(gaussian_response(675.0, 660.0, 30.0)), 6)
    0.5
    """
    if not fwhm_nm > 0:
        raise InputError(f"fwhm_nm must be > 0 [nm], got {fwhm_nm!r}")
    wl = np.asarray(wavelengths, dtype=np.float64)
    sigma = fwhm_nm * FWHM_TO_SIGMA
    r = np.exp(-0.5 * ((wl - centre_nm) / sigma) ** 2)
    return np.where(np.abs(wl - centre_nm) <= _GAUSS_HALF_SUPPORT_FWHM * fwhm_nm, r, 0.0)


@dataclass(frozen=True)
class Band:
    """One spectral band.

    Parameters
    ----------
    name : str
        Band name as the agency writes it (``"B4"``, ``"B8A"``).
    centre_nm : float
        Band centre [nm]; for a tabulated band the response-weighted centroid.
    fwhm_nm : float
        Full width at half maximum [nm]; for a tabulated band the width where the response crosses 0.5.
    response_wavelengths_nm : tuple of float, optional
        Wavelengths [nm] of a tabulated response (strictly increasing). None for a Gaussian band.
    response_values : tuple of float, optional
        Relative response 0..1 at ``response_wavelengths_nm``; zero outside the table.
    """

    name: str
    centre_nm: float
    fwhm_nm: float
    response_wavelengths_nm: tuple[float, ...] | None = None
    response_values: tuple[float, ...] | None = None

    def __post_init__(self):
        if not self.name or not isinstance(self.name, str):
            raise InputError(f"band name must be a non-empty string, got {self.name!r}")
        if not (np.isfinite(self.centre_nm) and self.centre_nm > 0):
            raise InputError(f"band {self.name}: centre_nm must be a positive number [nm], got {self.centre_nm!r}")
        if not (np.isfinite(self.fwhm_nm) and self.fwhm_nm > 0):
            raise InputError(f"band {self.name}: fwhm_nm must be a positive number [nm], got {self.fwhm_nm!r}")
        if (self.response_wavelengths_nm is None) != (self.response_values is None):
            raise InputError(f"band {self.name}: give both response_wavelengths_nm and response_values, or neither")
        if self.response_wavelengths_nm is not None:
            wl = np.asarray(self.response_wavelengths_nm, dtype=float)
            r = np.asarray(self.response_values, dtype=float)
            if wl.shape != r.shape or wl.ndim != 1 or wl.size < 2:
                raise InputError(f"band {self.name}: tabulated response needs two equal-length 1-D tables (>= 2 rows)")
            if np.any(np.diff(wl) <= 0):
                raise InputError(f"band {self.name}: response wavelengths must increase strictly")
            if not np.all(np.isfinite(r)) or np.any(r < 0) or not np.any(r > 0):
                raise InputError(f"band {self.name}: response values must be finite, >= 0 and not all zero")

    @property
    def tabulated(self) -> bool:
        """True when the response comes from a table, False for a Gaussian."""
        return self.response_wavelengths_nm is not None

    def response(self, wavelengths) -> np.ndarray:
        """Relative spectral response at ``wavelengths`` [nm] (float64, same shape; 0 outside the band)."""
        wl = np.asarray(wavelengths, dtype=np.float64)
        if self.tabulated:
            return np.interp(wl, self.response_wavelengths_nm, self.response_values, left=0.0, right=0.0)
        return gaussian_response(wl, self.centre_nm, self.fwhm_nm)

    def support(self) -> tuple[float, float]:
        """Wavelength interval [nm] outside which the response is zero."""
        if self.tabulated:
            wl = np.asarray(self.response_wavelengths_nm)
            nz = np.flatnonzero(np.asarray(self.response_values) > 0)
            lo = wl[max(nz[0] - 1, 0)]
            hi = wl[min(nz[-1] + 1, wl.size - 1)]
            return float(lo), float(hi)
        h = _GAUSS_HALF_SUPPORT_FWHM * self.fwhm_nm
        return self.centre_nm - h, self.centre_nm + h


@dataclass(frozen=True)
class Sensor:
    """A multispectral sensor: an ordered tuple of bands and the published source of their values.

    Parameters
    ----------
    id : str
        Short id used on the command line (``"landsat-8-oli"``).
    title : str
        Human-readable name.
    bands : tuple of Band
        Bands in the agency's order.
    source : str
        Where the band values come from (document, version; "from memory" where not checked).
    red, nir : str or None
        Names of the red and near-infrared bands used by default for NDVI.
    """

    id: str
    title: str
    bands: tuple[Band, ...]
    source: str
    red: str | None = None
    nir: str | None = None
    _index: dict = field(init=False, repr=False, compare=False)

    def __post_init__(self):
        names = [b.name for b in self.bands]
        if not names:
            raise InputError(f"sensor {self.id}: needs at least one band")
        dup = sorted({n for n in names if names.count(n) > 1})
        if dup:
            raise InputError(f"sensor {self.id}: band names must be unique, repeated: {', '.join(dup)}")
        for role, name in (("red", self.red), ("nir", self.nir)):
            if name is not None and name not in names:
                raise InputError(f"sensor {self.id}: {role} band {name!r} is not one of {', '.join(names)}")
        object.__setattr__(self, "_index", {n: i for i, n in enumerate(names)})

    @property
    def band_names(self) -> tuple[str, ...]:
        """Band names in the sensor's order."""
        return tuple(b.name for b in self.bands)

    def band(self, name: str | Band) -> Band:
        """The band called ``name`` (unknown name -> :class:`UnknownNameError` listing the bands)."""
        if isinstance(name, Band):
            return name
        try:
            return self.bands[self._index[name]]
        except KeyError:
            raise UnknownNameError(
                f"sensor {self.id} has no band {name!r}; its bands are: {', '.join(self.band_names)}"
            ) from None

    def select(self, band_names: Sequence[str] | None) -> tuple[Band, ...]:
        """Bands called ``band_names`` in the order given (all bands when None)."""
        if band_names is None:
            return self.bands
        if isinstance(band_names, str):
            band_names = [band_names]
        names = list(band_names)
        dup = sorted({n for n in names if names.count(n) > 1})
        if dup:
            raise InputError(f"band names given twice for sensor {self.id}: {', '.join(dup)}")
        if not names:
            raise InputError(f"empty band selection for sensor {self.id}; give at least one of {', '.join(self.band_names)}")
        return tuple(self.band(n) for n in names)

    def response(self, band: str | Band, wavelengths) -> np.ndarray:
        """Relative spectral response of ``band`` (name or Band) at ``wavelengths`` [nm]."""
        return self.band(band).response(wavelengths)


def _from_edges_um(table: Iterable[tuple[str, float, float]]) -> tuple[Band, ...]:
    """Bands from (name, lower edge, upper edge) in micrometres: centre = mid-point, FWHM = width."""
    return tuple(
        Band(name, round((lo + hi) / 2 * 1000.0, 6), round((hi - lo) * 1000.0, 6)) for name, lo, hi in table
    )


def _from_centre_width_nm(table: Iterable[tuple[str, float, float]]) -> tuple[Band, ...]:
    return tuple(Band(name, c, w) for name, c, w in table)


# Landsat 4-5 TM, reflective bands. Source: USGS Landsat 4-5 TM band designations (Landsat 4-7 Data
# Users Handbook), band edges in micrometres; from memory.
_TM_EDGES = [
    ("B1", 0.45, 0.52),
    ("B2", 0.52, 0.60),
    ("B3", 0.63, 0.69),
    ("B4", 0.76, 0.90),
    ("B5", 1.55, 1.75),
    ("B7", 2.08, 2.35),
]

# Landsat 7 ETM+, reflective bands. Source: USGS Landsat 7 Data Users Handbook, band edges in
# micrometres; from memory.
_ETM_EDGES = [
    ("B1", 0.45, 0.52),
    ("B2", 0.52, 0.60),
    ("B3", 0.63, 0.69),
    ("B4", 0.77, 0.90),
    ("B5", 1.55, 1.75),
    ("B7", 2.09, 2.35),
]

# Landsat 8 OLI and Landsat 9 OLI-2 (same nominal bands). Source: USGS Landsat 8 Data Users Handbook,
# band edges in micrometres, B1-B7 as in CHECKS.md (from memory, cross-checked with secondary copies);
# cirrus B9 1.360-1.390 from memory.
_OLI_EDGES = [
    ("B1", 0.433, 0.453),
    ("B2", 0.450, 0.515),
    ("B3", 0.525, 0.600),
    ("B4", 0.630, 0.680),
    ("B5", 0.845, 0.885),
    ("B6", 1.560, 1.660),
    ("B7", 2.100, 2.300),
    ("B9", 1.360, 1.390),
]

# Sentinel-2A MSI. Source: ESA Sentinel-2 spectral response functions, document
# COPE-GSEG-EOPG-TN-15-0007, central wavelength / bandwidth [nm] as in CHECKS.md. Pinned to those values
# (the document's issue 3.0 as far as we know; ESA has revised them slightly in later issues).
_S2A_CENTRE_WIDTH = [
    ("B1", 442.7, 21.0),
    ("B2", 492.4, 66.0),
    ("B3", 559.8, 36.0),
    ("B4", 664.6, 31.0),
    ("B5", 704.1, 15.0),
    ("B6", 740.5, 15.0),
    ("B7", 782.8, 20.0),
    ("B8", 832.8, 106.0),
    ("B8A", 864.7, 21.0),
    ("B9", 945.1, 20.0),
    ("B10", 1373.5, 31.0),
    ("B11", 1613.7, 91.0),
    ("B12", 2202.4, 175.0),
]

# Sentinel-2B MSI. Source: same ESA document, Sentinel-2B columns (issue 3.0); from memory.
_S2B_CENTRE_WIDTH = [
    ("B1", 442.2, 21.0),
    ("B2", 492.1, 66.0),
    ("B3", 559.0, 36.0),
    ("B4", 664.9, 31.0),
    ("B5", 703.8, 16.0),
    ("B6", 739.1, 15.0),
    ("B7", 779.7, 20.0),
    ("B8", 832.9, 106.0),
    ("B8A", 864.0, 22.0),
    ("B9", 943.2, 21.0),
    ("B10", 1376.9, 30.0),
    ("B11", 1610.4, 94.0),
    ("B12", 2185.7, 185.0),
]

_GAUSS_NOTE = " Responses modelled as Gaussians (centre = mid-point of the edges, FWHM = edge width)."

_BUILTIN: dict[str, Sensor] = {
    s.id: s
    for s in (
        Sensor(
            "landsat-5-tm",
            "Landsat 4-5 Thematic Mapper (reflective bands)",
            _from_edges_um(_TM_EDGES),
            "USGS Landsat 4-7 Data Users Handbook, TM band edges (from memory); thermal B6 not included."
            + _GAUSS_NOTE,
            red="B3",
            nir="B4",
        ),
        Sensor(
            "landsat-7-etm",
            "Landsat 7 Enhanced Thematic Mapper Plus (reflective bands)",
            _from_edges_um(_ETM_EDGES),
            "USGS Landsat 7 Data Users Handbook, ETM+ band edges (from memory); thermal B6 and "
            "panchromatic B8 not included." + _GAUSS_NOTE,
            red="B3",
            nir="B4",
        ),
        Sensor(
            "landsat-8-oli",
            "Landsat 8 Operational Land Imager (reflective bands)",
            _from_edges_um(_OLI_EDGES),
            "USGS Landsat 8 Data Users Handbook, OLI band edges (from memory, cross-checked with secondary "
            "copies); panchromatic B8 and the thermal TIRS bands not included." + _GAUSS_NOTE,
            red="B4",
            nir="B5",
        ),
        Sensor(
            "landsat-9-oli",
            "Landsat 9 Operational Land Imager 2 (reflective bands)",
            _from_edges_um(_OLI_EDGES),
            "USGS Landsat 9 Data Users Handbook: OLI-2 has the nominal band edges of Landsat 8 OLI (from "
            "memory); panchromatic B8 and the thermal TIRS-2 bands not included." + _GAUSS_NOTE,
            red="B4",
            nir="B5",
        ),
        Sensor(
            "sentinel-2a-msi",
            "Sentinel-2A MultiSpectral Instrument",
            _from_centre_width_nm(_S2A_CENTRE_WIDTH),
            "ESA document COPE-GSEG-EOPG-TN-15-0007 (Sentinel-2 spectral response functions), Sentinel-2A "
            "central wavelength and bandwidth, values pinned as of issue 3.0. Responses modelled as "
            "Gaussians (FWHM = bandwidth).",
            red="B4",
            nir="B8",
        ),
        Sensor(
            "sentinel-2b-msi",
            "Sentinel-2B MultiSpectral Instrument",
            _from_centre_width_nm(_S2B_CENTRE_WIDTH),
            "ESA document COPE-GSEG-EOPG-TN-15-0007 (Sentinel-2 spectral response functions), Sentinel-2B "
            "central wavelength and bandwidth as of issue 3.0 (from memory). Responses modelled as "
            "Gaussians (FWHM = bandwidth).",
            red="B4",
            nir="B8",
        ),
    )
}


def list_sensors() -> tuple[str, ...]:
    """Ids of the built-in sensors, in a fixed order.

    Examples
    --------
    >>> "landsat-8-oli" in list_sensors()
    True
    """
    return tuple(_BUILTIN)


def get_sensor(sensor_id: str | Sensor) -> Sensor:
    """The built-in sensor with id ``sensor_id`` (a :class:`Sensor` is passed through).

    Ids are matched case-insensitively; an unknown id raises :class:`unmix.errors.UnknownNameError`
    listing the known ids.

    Examples
    --------
    >>> get_sensor("sentinel-2a-msi").band("B8A").centre_nm
    864.7
    """
    if isinstance(sensor_id, Sensor):
        return sensor_id
    key = str(sensor_id).strip().lower()
    if key in _BUILTIN:
        return _BUILTIN[key]
    raise UnknownNameError(
        f"unknown sensor {sensor_id!r}; known sensors are: {', '.join(_BUILTIN)} "
        "(or build one from a response table with tabulated_sensor)"
    )


def tabulated_sensor(
    sensor_id: str,
    wavelengths_nm,
    responses,
    band_names: Sequence[str],
    *,
    title: str | None = None,
    source: str = "tabulated spectral response",
    red: str | None = None,
    nir: str | None = None,
) -> Sensor:
    """A sensor whose bands have tabulated spectral responses.

    Parameters
    ----------
    sensor_id : str
        Id for the new sensor.
    wavelengths_nm : (n_wl,) array_like
        Strictly increasing wavelengths of the table [nm].
    responses : (n_bands, n_wl) array_like
        Relative response 0..1 of each band (any positive scale; each band is divided by its maximum).
    band_names : sequence of str, length n_bands
        Band names.
    title, source : str, optional
        Description and provenance of the table.
    red, nir : str, optional
        Default NDVI bands.

    Returns
    -------
    Sensor
        Bands carry their table; ``centre_nm`` is the response-weighted centroid and ``fwhm_nm`` the
        width between the outermost half-maximum crossings.

    Examples
    --------
    >>> wl = [600.0, 640.0, 660.0, 680.0, 720.0]
    >>> s = tabulated_sensor("toy", wl, [[0, 1, 1, 1, 0]], ["R"])
    >>> s.band("R").centre_nm
    660.0
    """
    wl = np.asarray(wavelengths_nm, dtype=np.float64)
    r = np.atleast_2d(np.asarray(responses, dtype=np.float64))
    names = list(band_names)
    if wl.ndim != 1 or r.shape != (len(names), wl.size):
        raise LibraryFormatError(
            f"sensor {sensor_id}: responses must have shape (n_bands={len(names)}, n_wl={wl.size}), got {r.shape}"
        )
    bands = []
    for name, row in zip(names, r):
        if not np.all(np.isfinite(row)) or np.any(row < 0) or not np.any(row > 0):
            raise LibraryFormatError(
                f"sensor {sensor_id}, band {name}: response must be finite, >= 0 and not all zero"
            )
        row = row / row.max()
        centre = float(np.trapezoid(row * wl, wl) / np.trapezoid(row, wl))
        above = np.flatnonzero(row >= 0.5)
        i0, i1 = above[0], above[-1]
        lo = wl[i0] if i0 == 0 else np.interp(0.5, [row[i0 - 1], row[i0]], [wl[i0 - 1], wl[i0]])
        hi = wl[i1] if i1 == wl.size - 1 else np.interp(0.5, [row[i1 + 1], row[i1]], [wl[i1 + 1], wl[i1]])
        fwhm = float(hi - lo) if hi > lo else float(np.min(np.diff(wl)))
        bands.append(Band(name, centre, fwhm, tuple(wl.tolist()), tuple(row.tolist())))
    return Sensor(sensor_id, title or sensor_id, tuple(bands), source, red=red, nir=nir)
