"""Spectral response models of sensor bands: Gaussian and tabulated.

A :class:`Band` has a relative spectral response that is either a Gaussian built from its centre and
full width at half maximum (FWHM) (:func:`gaussian_response`) or a tabulated curve (wavelength,
relative response), which :func:`tabulated_sensor` turns into a :class:`Sensor`. A :class:`Sensor` is a
named, ordered tuple of bands; the built-in ones are in :mod:`unmix.sensors.catalogue`.
"""

from __future__ import annotations

import hashlib
from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np

from ..errors import InputError, LibraryFormatError, UnknownNameError

__all__ = ["Band", "Sensor", "gaussian_response", "half_maximum_points", "tabulated_sensor", "FWHM_TO_SIGMA"]

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
        Band centre [nm]; for a tabulated band the response-weighted mean wavelength (centroid).
    fwhm_nm : float
        Full width at half maximum [nm]; for a tabulated band the width between the outermost crossings
        of 0.5 (see :func:`half_maximum_points`).
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

    def half_maximum_nm(self) -> tuple[float, float]:
        """Lower and upper wavelength [nm] where the response crosses half its maximum.

        A tabulated band: the outermost crossings, linearly interpolated (:func:`half_maximum_points`);
        a Gaussian band: ``centre -/+ fwhm / 2``.
        """
        if self.tabulated:
            return half_maximum_points(self.response_wavelengths_nm, self.response_values)
        return self.centre_nm - self.fwhm_nm / 2, self.centre_nm + self.fwhm_nm / 2

    @property
    def fingerprint(self) -> str:
        """Short digest of the response (name, model and numbers): equal digests mean the same band.

        Recorded in the sidecar of a resampled library so that a library resampled with one set of
        responses is recognised (or refused) for a stack described by another.
        """
        h = hashlib.sha256(self.name.encode())
        if self.tabulated:
            h.update(b"table")
            h.update(np.asarray(self.response_wavelengths_nm, dtype="<f8").tobytes())
            h.update(np.asarray(self.response_values, dtype="<f8").tobytes())
        else:
            h.update(b"gaussian")
            h.update(np.asarray([self.centre_nm, self.fwhm_nm], dtype="<f8").tobytes())
        return h.hexdigest()[:16]

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


def _own_stretch(wl: np.ndarray, row: np.ndarray) -> slice:
    """The rows of a (shared) response table that belong to one band.

    From the first to the last non-zero sample, extended on each side by the neighbouring zero sample
    when it lies no farther away than the band's widest sampling step: that zero closes the band's own
    curve. A larger gap means the band's own table ended at its last non-zero sample (in a table shared by
    several bands the next row belongs to another band's grid), and the response is zero beyond it
    instead of ramping down across the gap.
    """
    nz = np.flatnonzero(row > 0)
    i0, i1 = int(nz[0]), int(nz[-1])
    step = float(np.max(np.diff(wl[i0:i1 + 1]))) if i1 > i0 else np.inf
    if i0 > 0 and wl[i0] - wl[i0 - 1] <= step:
        i0 -= 1
    if i1 < wl.size - 1 and wl[i1 + 1] - wl[i1] <= step:
        i1 += 1
    return slice(i0, i1 + 1)


def half_maximum_points(wavelengths_nm, response) -> tuple[float, float]:
    """Wavelengths [nm] of the outermost crossings of half the maximum of a tabulated response.

    The response is taken as linear between the table's samples; the first and last samples at or above
    half maximum are followed outwards to the neighbouring sample below it and the crossing is linearly
    interpolated. A response still above half maximum at the end of the table gives that end.

    Parameters
    ----------
    wavelengths_nm : (n,) array_like
        Strictly increasing wavelengths [nm].
    response : (n,) array_like
        Relative response, >= 0 and not all zero (any scale).

    Returns
    -------
    (float, float)
        Lower and upper half-maximum wavelength [nm]; their difference is the band's full width at half
        maximum, their mid-point the centre as NASA's OLI band summary defines it.

    Examples
    --------
    >>> half_maximum_points([600.0, 640.0, 660.0, 680.0, 720.0], [0, 1, 1, 1, 0])
    (620.0, 700.0)
    """
    wl = np.asarray(wavelengths_nm, dtype=np.float64)
    r = np.asarray(response, dtype=np.float64)
    half = 0.5 * r.max()
    above = np.flatnonzero(r >= half)
    i0, i1 = above[0], above[-1]
    lo = wl[i0] if i0 == 0 else np.interp(half, [r[i0 - 1], r[i0]], [wl[i0 - 1], wl[i0]])
    hi = wl[i1] if i1 == wl.size - 1 else np.interp(half, [r[i1 + 1], r[i1]], [wl[i1 + 1], wl[i1]])
    return float(lo), float(hi)


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
        Bands carry their own stretch of the table (its non-zero samples, plus the neighbouring zero on
        each side when no farther than the band's widest sampling step; zero response beyond);
        ``centre_nm`` is the response-weighted mean wavelength (trapezoidal sums on the table's grid)
        and ``fwhm_nm`` the width between the outermost half-maximum crossings
        (:func:`half_maximum_points`).

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
        keep = _own_stretch(wl, row)
        bwl, row = wl[keep], row[keep]
        centre = float(np.trapezoid(row * bwl, bwl) / np.trapezoid(row, bwl))
        lo, hi = half_maximum_points(bwl, row)
        fwhm = hi - lo if hi > lo else float(np.min(np.diff(bwl)))
        bands.append(Band(name, centre, fwhm, tuple(bwl.tolist()), tuple(row.tolist())))
    return Sensor(sensor_id, title or sensor_id, tuple(bands), source, red=red, nir=nir)
