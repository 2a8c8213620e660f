"""Spectral response models of sensor bands: Gaussian and tabulated.

A :class:`Band` has a relative spectral response that is either a Gaussian built from its centre and
full width at half maximum (FWHM) (:func:`gaussian_response`) or a tabulated curve (wavelength,
relative response), which :func:`tabulated_sensor` turns into a :class:`Sensor`. A :class:`Sensor` is a
named, ordered tuple of bands; the built-in ones are in :mod:`unmix.sensors.catalogue`.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np

from ..errors import InputError, LibraryFormatError, UnknownNameError

__all__ = ["Band", "Sensor", "gaussian_response", "tabulated_sensor", "FWHM_TO_SIGMA"]

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
