"""Spectral libraries, resampling to sensor bands, spectral angle and NDVI.

A :class:`SpectralLibrary` holds reflectance spectra (0..1) either on a wavelength grid [nm]
("full-resolution") or per sensor band ("resampled": ``band_names`` set, ``wavelengths`` are the band
centres). Reading and writing library files lives in :mod:`unmix.io.library`.

Resampling (:func:`resample`, :func:`resample_spectra`) computes for each band

    R_band = integral(S(l) * rho(l) dl) / integral(S(l) dl)

with S the band's relative spectral response and rho the spectrum, linearly interpolated between the
library's wavelengths. The integrals are trapezoidal sums on a fine common grid: the band's support
(where S > 0) sampled every min(0.1 nm, FWHM / 400), plus every library wavelength inside it, clipped to
the library's range. The whole operation is one weight matrix (n_bands, n_wl) whose rows sum to 1, so a
flat spectrum keeps its value. A band whose response has more than ``outside_tolerance`` (default 1 %)
of its area outside the library's wavelength range raises :class:`unmix.errors.BandMismatchError`;
below that, the part inside the range is renormalised.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np

from .errors import BandMismatchError, InputError, ShapeError, UnknownNameError
from .sensors import Band, Sensor, get_sensor

__all__ = [
    "SpectralLibrary",
    "band_weights",
    "on_bands",
    "resample",
    "resample_spectra",
    "spectral_angle",
    "ndvi",
]


def _ro(a: np.ndarray) -> np.ndarray:
    a = np.array(a, dtype=np.float64, copy=True)
    a.setflags(write=False)
    return a


@dataclass(frozen=True, eq=False)
class SpectralLibrary:
    """Reflectance spectra with names, class labels and metadata.

    Parameters
    ----------
    wavelengths : (n_wl,) ndarray of float64
        Wavelengths [nm], strictly increasing for a full-resolution library; band centres [nm] for a
        resampled one (then in the chosen band order).
    spectra : (n_spectra, n_wl) ndarray of float64
        Reflectance 0..1.
    names : tuple of str
        Unique, non-empty spectrum names.
    classes : tuple of (str or None), optional
        Class label per spectrum (endmember bundle), None where unknown. Default: all None.
    band_names : tuple of str, optional
        Band names of a resampled library; None for a full-resolution one.
    metadata : dict, optional
        Free metadata, copied (JSON-serialisable values keep the library writable) (``source``, ``invented``, ``description``, ``sensor``, ...).

    Examples
    --------
    >>> lib = SpectralLibrary(np.array([500.0, 600.0]), np.array([[0.1, 0.2], [0.3, 0.3]]),
    ...                       ("a", "b"), ("soil", "soil"))
    >>> len(lib), lib.by_class()["soil"].shape
    (2, (2, 2))
    """

    wavelengths: np.ndarray
    spectra: np.ndarray
    names: tuple[str, ...]
    classes: tuple[str | None, ...] | None = None
    band_names: tuple[str, ...] | None = None
    metadata: Mapping = field(default_factory=dict)

    def __post_init__(self):
        wl = _ro(self.wavelengths)
        sp = _ro(self.spectra)
        if wl.ndim != 1 or wl.size < 1:
            raise ShapeError(f"wavelengths must be a 1-D array with at least one value, got shape {wl.shape}")
        if sp.ndim == 1:
            sp = _ro(sp[None, :])
        if sp.ndim != 2 or sp.shape[1] != wl.size:
            raise ShapeError(
                f"spectra must have shape (n_spectra, n_wl={wl.size}), got {sp.shape}; one row per spectrum"
            )
        names = tuple(str(n) for n in self.names)
        if len(names) != sp.shape[0]:
            raise ShapeError(f"{len(names)} names given for {sp.shape[0]} spectra")
        if any(not n.strip() for n in names):
            raise InputError("spectrum names must be non-empty")
        dup = sorted({n for n in names if names.count(n) > 1})
        if dup:
            raise InputError(f"spectrum names must be unique; repeated: {', '.join(dup)}")
        classes = (None,) * len(names) if self.classes is None else tuple(self.classes)
        if len(classes) != len(names):
            raise ShapeError(f"{len(classes)} class labels given for {len(names)} spectra")
        classes = tuple(None if c is None or str(c) == "" else str(c) for c in classes)
        bn = None if self.band_names is None else tuple(str(b) for b in self.band_names)
        if bn is not None:
            if len(bn) != wl.size:
                raise ShapeError(f"{len(bn)} band names given for {wl.size} bands")
            dupb = sorted({b for b in bn if bn.count(b) > 1})
            if dupb:
                raise InputError(f"band names must be unique; repeated: {', '.join(dupb)}")
        elif wl.size > 1 and np.any(np.diff(wl) <= 0):
            raise InputError("wavelengths of a full-resolution library must increase strictly")
        if not np.all(np.isfinite(wl)):
            raise InputError("wavelengths must be finite")
        object.__setattr__(self, "wavelengths", wl)
        object.__setattr__(self, "spectra", sp)
        object.__setattr__(self, "names", names)
        object.__setattr__(self, "classes", classes)
        object.__setattr__(self, "band_names", bn)
        object.__setattr__(self, "metadata", dict(self.metadata))  # a copy: the caller's dict stays separate

    def __len__(self) -> int:
        return len(self.names)

    @property
    def resampled(self) -> bool:
        """True when the library holds values per sensor band."""
        return self.band_names is not None

    @property
    def sensor(self) -> str | None:
        """Sensor id of a resampled library (``metadata["sensor"]``), else None."""
        s = self.metadata.get("sensor")
        return None if s is None else str(s)

    def _missing(self, names) -> list[str]:
        return [n for n in names if n not in self.names]

    def spectrum(self, name: str) -> np.ndarray:
        """The spectrum called ``name``, shape (n_wl,)."""
        return self.select([name]).spectra[0]

    def select(self, names: Sequence[str]) -> SpectralLibrary:
        """A library holding only ``names``, in the order given.

        Raises :class:`unmix.errors.UnknownNameError` listing the available names if one is unknown.
        """
        if isinstance(names, str):
            names = [names]
        names = list(names)
        missing = self._missing(names)
        if missing:
            raise UnknownNameError(
                f"spectrum {', '.join(map(repr, missing))} not in the library; available: {', '.join(self.names)}"
            )
        idx = [self.names.index(n) for n in names]
        return SpectralLibrary(
            self.wavelengths,
            self.spectra[idx],
            tuple(names),
            tuple(self.classes[i] for i in idx),
            self.band_names,
            dict(self.metadata),
        )

    def by_class(self) -> dict[str, np.ndarray]:
        """Spectra grouped by class label: ``{class: (n_members, n_wl) array}``.

        A spectrum without a class label forms its own group under its name. Classes appear in order of
        first occurrence.
        """
        out: dict[str, list[int]] = {}
        for i, (n, c) in enumerate(zip(self.names, self.classes)):
            out.setdefault(n if c is None else c, []).append(i)
        return {k: self.spectra[v] for k, v in out.items()}

    def with_metadata(self, **updates) -> SpectralLibrary:
        """A copy whose metadata is updated with ``updates``."""
        md = dict(self.metadata)
        md.update(updates)
        return SpectralLibrary(self.wavelengths, self.spectra, self.names, self.classes, self.band_names, md)


def _trapz_weights(x: np.ndarray) -> np.ndarray:
    w = np.empty_like(x)
    if x.size == 1:
        w[:] = 0.0
        return w
    d = np.diff(x)
    w[0] = d[0] / 2
    w[-1] = d[-1] / 2
    w[1:-1] = (d[:-1] + d[1:]) / 2
    return w


def _band_grid(band: Band, lib_wl: np.ndarray) -> np.ndarray:
    lo, hi = band.support()
    step = min(0.1, band.fwhm_nm / 400.0)  # trapezoid error ~ (step/sigma)^2/12 < 3e-6 relative
    n = max(int(np.ceil((hi - lo) / step)) + 1, 3)
    parts = [np.linspace(lo, hi, n), lib_wl[(lib_wl > lo) & (lib_wl < hi)]]
    if band.tabulated:
        t = np.asarray(band.response_wavelengths_nm)
        parts.append(t[(t >= lo) & (t <= hi)])
    return np.unique(np.concatenate(parts))


def band_weights(
    wavelengths,
    sensor: str | Sensor,
    band_names: Sequence[str] | None = None,
    *,
    outside_tolerance: float = 0.01,
) -> np.ndarray:
    """Weight matrix that resamples spectra on ``wavelengths`` to sensor bands.

    Parameters
    ----------
    wavelengths : (n_wl,) array_like
        Strictly increasing wavelengths of the spectra [nm], at least two.
    sensor : str or Sensor
        Sensor id (see :func:`unmix.sensors.list_sensors`) or a :class:`~unmix.sensors.Sensor`.
    band_names : sequence of str, optional
        Bands to produce, in this order (default: all bands of the sensor).
    outside_tolerance : float
        Largest share of a band's response area allowed outside the wavelength range (default 0.01).

    Returns
    -------
    (n_bands, n_wl) ndarray of float64
        ``resampled = spectra @ W.T``; each row sums to 1.

    Examples
    --------
    >>> wl = np.arange(400.0, 2501.0, 10.0)
    >>> W = band_weights(wl, "landsat-8-oli", ["B4", "B5"])
    >>> W.shape, bool(np.allclose(W.sum(axis=1), 1.0))
    ((2, 211), True)
    """
    s = get_sensor(sensor)
    bands = s.select(band_names)
    wl = np.asarray(wavelengths, dtype=np.float64)
    if wl.ndim != 1 or wl.size < 2:
        raise ShapeError(f"wavelengths must be 1-D with at least two values to resample, got shape {wl.shape}")
    if np.any(np.diff(wl) <= 0) or not np.all(np.isfinite(wl)):
        raise InputError("wavelengths must be finite and strictly increasing to resample")
    W = np.zeros((len(bands), wl.size))
    for k, band in enumerate(bands):
        g = _band_grid(band, wl)
        r = band.response(g)
        total = np.dot(_trapz_weights(g), r)
        gin = g[(g >= wl[0]) & (g <= wl[-1])]
        win = _trapz_weights(gin) * band.response(gin) if gin.size else np.zeros(0)
        inside = win.sum()
        if total <= 0 or inside < (1.0 - outside_tolerance) * total:
            lo, hi = band.support()
            share = 1.0 - (inside / total if total > 0 else 0.0)
            raise BandMismatchError(
                f"band {band.name} of {s.id} (response {lo:.0f}-{hi:.0f} nm, centre {band.centre_nm:g} nm) "
                f"lies {share:.0%} outside the library's wavelength range {wl[0]:g}-{wl[-1]:g} nm; "
                "use a library that covers it or leave the band out with band_names"
            )
        j = np.clip(np.searchsorted(wl, gin, side="right") - 1, 0, wl.size - 2)
        t = (gin - wl[j]) / (wl[j + 1] - wl[j])
        np.add.at(W[k], j, win * (1.0 - t))
        np.add.at(W[k], j + 1, win * t)
        W[k] /= inside
    return W


def resample_spectra(
    spectra,
    wavelengths,
    sensor: str | Sensor,
    band_names: Sequence[str] | None = None,
    *,
    outside_tolerance: float = 0.01,
) -> np.ndarray:
    """Resample spectra (core dimension last) to sensor bands by their spectral responses.

    Parameters
    ----------
    spectra : (..., n_wl) array_like
        Reflectance on ``wavelengths``; NaN marks no data and makes every band that uses it NaN.
    wavelengths : (n_wl,) array_like
        Strictly increasing wavelengths [nm].
    sensor : str or Sensor
        Sensor id or object.
    band_names : sequence of str, optional
        Bands to produce, in this order (default all).
    outside_tolerance : float
        See :func:`band_weights`.

    Returns
    -------
    (..., n_bands) ndarray
        Band-averaged reflectance; float32 in gives float32 out, otherwise float64.

    Examples
    --------
    >>> wl = np.arange(400.0, 2501.0, 10.0)
    >>> resample_spectra(np.full(wl.shape, 0.3, np.float32), wl, "sentinel-2a-msi", ["B4"]).round(6)
    array([0.3], dtype=float32)
    """
    x = np.asarray(spectra)
    out_dtype = np.float32 if x.dtype == np.float32 else np.float64
    x = x.astype(np.float64, copy=False)
    W = band_weights(wavelengths, sensor, band_names, outside_tolerance=outside_tolerance)
    if x.shape[-1:] != (W.shape[1],):
        raise ShapeError(f"spectra must end in n_wl={W.shape[1]} (one value per wavelength), got shape {x.shape}")
    nan = np.isnan(x)
    y = np.where(nan, 0.0, x) @ W.T
    if nan.any():
        y[(nan.astype(np.float64) @ (W.T != 0)) > 0] = np.nan
    return y.astype(out_dtype, copy=False)


def resample(
    library: SpectralLibrary,
    sensor: str | Sensor,
    band_names: Sequence[str] | None = None,
    *,
    outside_tolerance: float = 0.01,
) -> SpectralLibrary:
    """Resample a full-resolution library to sensor bands (see the module docstring for the method).

    Parameters
    ----------
    library : SpectralLibrary
        Full-resolution library (``band_names`` is None).
    sensor : str or Sensor
        Sensor id or object.
    band_names : sequence of str, optional
        Bands to produce, in this order (default: all bands of the sensor).
    outside_tolerance : float
        Largest share of a band's response area allowed outside the library's range (default 0.01).

    Returns
    -------
    SpectralLibrary
        Same names, classes and metadata; ``wavelengths`` are the band centres [nm], ``band_names`` the
        bands, and ``metadata["sensor"]`` the sensor id.

    Raises
    ------
    BandMismatchError
        A band lies outside the library's wavelength range, or the library is already resampled.

    Examples
    --------
    >>> wl = np.arange(400.0, 2501.0, 10.0)
    >>> lib = SpectralLibrary(wl, np.linspace(0.1, 0.5, wl.size)[None, :], ("ramp",))
    >>> r = resample(lib, "landsat-8-oli", ["B4", "B5"])
    >>> r.band_names, r.sensor
    (('B4', 'B5'), 'landsat-8-oli')
    """
    if library.resampled:
        raise BandMismatchError(
            f"the library is already resampled (to {library.sensor or 'bands'} {', '.join(library.band_names)}); "
            "resample the full-resolution library instead"
        )
    s = get_sensor(sensor)
    bands = s.select(band_names)
    values = resample_spectra(
        library.spectra, library.wavelengths, s, [b.name for b in bands], outside_tolerance=outside_tolerance
    )
    md = dict(library.metadata)
    md.pop("units", None)
    md["sensor"] = s.id
    return SpectralLibrary(
        np.array([b.centre_nm for b in bands]),
        values,
        library.names,
        library.classes,
        tuple(b.name for b in bands),
        md,
    )


def on_bands(library: SpectralLibrary, sensor, band_names, *, where: str = "the library") -> SpectralLibrary:
    """The library on a stack's bands: resampled when it is full-resolution, else its bands picked by name.

    Parameters
    ----------
    library : SpectralLibrary
        Full-resolution, or already resampled to ``sensor`` (``band_names`` set).
    sensor : str or Sensor
        Sensor of the stack.
    band_names : sequence of str
        The stack's band names, in the stack's order.
    where : str
        How error messages name the library (for example ``"--library lib.csv"``).

    Raises
    ------
    BandMismatchError
        A resampled library of another sensor, or one lacking a band of the stack.

    Examples
    --------
    >>> lib = SpectralLibrary(np.array([480.0, 560.0, 660.0]), np.array([[0.1, 0.2, 0.3]]), ("a",),
    ...                       band_names=("B2", "B3", "B4"), metadata={"sensor": "landsat-8-oli"})
    >>> on_bands(lib, "landsat-8-oli", ["B4", "B2"]).spectra.tolist()
    [[0.3, 0.1]]
    """
    from .sensors import get_sensor

    sensor = get_sensor(sensor)
    bands = [str(b) for b in band_names]
    if not library.resampled:
        return resample(library, sensor, bands)
    if library.sensor and str(library.sensor) != sensor.id:
        raise BandMismatchError(
            f"{where} is resampled to {library.sensor} bands but the stack's sensor is {sensor.id}; use a library "
            f"resampled to {sensor.id} or the full-resolution library"
        )
    missing = [b for b in bands if b not in library.band_names]
    if missing:
        raise BandMismatchError(
            f"{where} has no band {', '.join(missing)} (it has {', '.join(library.band_names)}); resample the "
            "full-resolution library to the stack's bands or fix --band-names"
        )
    rows = [library.band_names.index(b) for b in bands]
    return SpectralLibrary(library.wavelengths[rows], library.spectra[:, rows], library.names, library.classes,
                           tuple(bands), dict(library.metadata))


def spectral_angle(a, b) -> np.ndarray:
    """Spectral angle between spectra, core dimension last, broadcasting over leading dimensions.

    angle = arccos(a.b / (|a| |b|)), computed in the numerically stable form
    2 atan2(|u - v|, |u + v|) with u = a/|a|, v = b/|b|.

    Parameters
    ----------
    a, b : (..., n_bands) array_like
        Spectra; leading dimensions broadcast against each other.

    Returns
    -------
    (...) ndarray
        Angle [rad], 0..pi. NaN where either spectrum has NaN or zero length. float32 if both inputs
        are float32, else float64.

    References
    ----------
    Kruse, F. A., Lefkoff, A. B., Boardman, J. W., Heidebrecht, K. B., Shapiro, A. T., Barloon, P. J.,
    and Goetz, A. F. H. (1993). The spectral image processing system (SIPS) -- interactive visualization
    and analysis of imaging spectrometer data. Remote Sensing of Environment 44(2-3), 145-163.
    https://doi.org/10.1016/0034-4257(93)90013-N

    Kahan, W. (2006). How futile are mindless assessments of roundoff in floating-point computation?
    (section 12, the stable angle formula).

    Examples
    --------
    >>> float(spectral_angle([1.0, 0.0], [0.0, 2.0])) == np.pi / 2
    True
    >>> float(spectral_angle([0.1, 0.2, 0.3], [0.2, 0.4, 0.6]))
    0.0
    """
    a = np.asarray(a)
    b = np.asarray(b)
    out_dtype = np.float32 if (a.dtype == np.float32 and b.dtype == np.float32) else np.float64
    a = a.astype(np.float64, copy=False)
    b = b.astype(np.float64, copy=False)
    if a.ndim == 0 or b.ndim == 0 or a.shape[-1] != b.shape[-1]:
        raise ShapeError(
            f"spectra must share their last (band) dimension, got shapes {a.shape} and {b.shape}"
        )
    with np.errstate(invalid="ignore", divide="ignore"):
        u = a / np.linalg.norm(a, axis=-1, keepdims=True)
        v = b / np.linalg.norm(b, axis=-1, keepdims=True)
        ang = 2.0 * np.arctan2(np.linalg.norm(u - v, axis=-1), np.linalg.norm(u + v, axis=-1))
    return np.asarray(ang, dtype=out_dtype)


def ndvi(
    values,
    band_names: Sequence[str] | None = None,
    *,
    red: str | None = None,
    nir: str | None = None,
    sensor: str | Sensor | None = None,
) -> np.ndarray:
    """Normalised difference vegetation index (NIR - red) / (NIR + red) from named bands.

    Parameters
    ----------
    values : (..., n_bands) array_like or SpectralLibrary
        Band reflectance (core dimension last), or a library. A resampled library brings its own band
        names and sensor; a full-resolution library is first resampled to the red and NIR bands of
        ``sensor``.
    band_names : sequence of str, optional
        Names of the ``n_bands`` bands of an array (ignored for a library).
    red, nir : str, optional
        Names of the red and near-infrared bands. Default: the sensor's (``Sensor.red``/``Sensor.nir``:
        TM/ETM+ B3/B4, OLI B4/B5, MSI B4/B8).
    sensor : str or Sensor, optional
        Supplies the default red/NIR names (and the responses for a full-resolution library).

    Returns
    -------
    (...) ndarray
        NDVI, -1..1; NaN where red + NIR is 0 or a value is NaN. float32 in gives float32 out.

    References
    ----------
    Rouse, J. W., Haas, R. H., Schell, J. A., and Deering, D. W. (1974). Monitoring vegetation systems
    in the Great Plains with ERTS. Third ERTS Symposium, NASA SP-351, 309-317.
    Tucker, C. J. (1979). Red and photographic infrared linear combinations for monitoring vegetation.
    Remote Sensing of Environment 8(2), 127-150. https://doi.org/10.1016/0034-4257(79)90013-0

    Examples
    --------
    >>> float(ndvi([0.05, 0.45], ["B4", "B5"], sensor="landsat-8-oli"))
    0.8
    """
    if isinstance(values, SpectralLibrary):
        lib = values
        if sensor is None:
            sensor = lib.sensor
        if not lib.resampled:
            if sensor is None:
                raise BandMismatchError(
                    "NDVI of a full-resolution library needs a sensor to resample to (sensor=...)"
                )
            s = get_sensor(sensor)
            red = red or s.red
            nir = nir or s.nir
            if red is None or nir is None:
                raise InputError(f"sensor {s.id} has no default red/NIR bands; pass red= and nir=")
            lib = resample(lib, s, [red, nir])
        x = lib.spectra
        band_names = lib.band_names
    else:
        x = np.asarray(values)
    if band_names is None:
        raise InputError("ndvi needs band_names for an array (one name per value along the last axis)")
    band_names = list(band_names)
    if red is None or nir is None:
        if sensor is None:
            raise InputError("ndvi needs the red and NIR band names: pass red= and nir=, or sensor=")
        s = get_sensor(sensor)
        red = red or s.red
        nir = nir or s.nir
        if red is None or nir is None:
            raise InputError(f"sensor {s.id} has no default red/NIR bands; pass red= and nir=")
    if x.shape[-1:] != (len(band_names),):
        raise ShapeError(f"{len(band_names)} band names for values of shape {x.shape} (bands last)")
    for role, name in (("red", red), ("NIR", nir)):
        if name not in band_names:
            raise UnknownNameError(
                f"{role} band {name!r} not among the bands {', '.join(band_names)}; pass {role.lower()}= explicitly"
            )
    out_dtype = np.float32 if x.dtype == np.float32 else np.float64
    r = x[..., band_names.index(red)].astype(np.float64)
    n = x[..., band_names.index(nir)].astype(np.float64)
    with np.errstate(invalid="ignore", divide="ignore"):
        v = (n - r) / (n + r)
    v = np.where((n + r) == 0, np.nan, v)
    return np.asarray(v, dtype=out_dtype)
