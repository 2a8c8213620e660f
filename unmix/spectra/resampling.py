"""Resampling spectra to sensor bands by integrating over the bands' spectral responses.

Resampling (:func:`resample`, :func:`resample_spectra`) computes for each band

    R_band = integral(S(l) * rho(l) dl) / integral(S(l) dl)

with S the band's relative spectral response and rho the spectrum, linearly interpolated between the
library's wavelengths. Both integrals are trapezoidal sums over one grid per band:

* a **tabulated** band (every built-in sensor, any response file): the table's own wavelengths within
  the band's support. When the library is as coarse as the table or coarser (median steps inside the
  band) this is exactly the direct integration of the table with the spectrum interpolated onto it,
  ``trapezoid(S * rho_interp, table_wl) / trapezoid(S, table_wl)``; a library finer than the table adds
  its own wavelengths, so that no detail of the spectrum between the table's samples is skipped;
* a **Gaussian** band (a sensor defined by centre and width): its support sampled every
  min(0.1 nm, FWHM / 400) plus every library wavelength inside it.

The whole operation is one weight matrix (n_bands, n_wl) whose rows sum to 1, so a flat spectrum keeps
its value. A band whose response has more than ``outside_tolerance`` (default 1 %) of its area outside
the library's wavelength range raises :class:`unmix.errors.BandMismatchError`; below that, the part
inside the range is renormalised.

A resampled library records its sensor id and a digest of each band's response
(``metadata["band_responses"]``, :attr:`unmix.sensors.Band.fingerprint`); :func:`on_bands` accepts it
for a stack whose sensor has the same id or the same responses.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from ..errors import BandMismatchError, InputError, ShapeError
from ..sensors import Band, Sensor, get_sensor
from .library import SpectralLibrary

__all__ = ["band_weights", "on_bands", "resample", "resample_spectra"]


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
    inside = lib_wl[(lib_wl > lo) & (lib_wl < hi)]
    if band.tabulated:
        t = np.asarray(band.response_wavelengths_nm)
        t = t[(t >= lo) & (t <= hi)]
        if inside.size < 2 or np.median(np.diff(inside)) >= np.median(np.diff(t)):
            # library as coarse as the table or coarser: the table's grid (plus the library's ends, if
            # the band runs past them, so that the part inside the library's range is integrated whole)
            ends = lib_wl[[0, -1]]
            inside = ends[(ends > lo) & (ends < hi)]
        return np.unique(np.concatenate([t, inside]))
    step = min(0.1, band.fwhm_nm / 400.0)  # trapezoid error ~ (step/sigma)^2/12 < 3e-6 relative
    n = max(int(np.ceil((hi - lo) / step)) + 1, 3)
    return np.unique(np.concatenate([np.linspace(lo, hi, n), inside]))


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
        bands, ``metadata["sensor"]`` the sensor id and ``metadata["band_responses"]`` the digest of each
        band's response.

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
    md["band_responses"] = {b.name: b.fingerprint for b in bands}
    return SpectralLibrary(
        np.array([b.centre_nm for b in bands]),
        values,
        library.names,
        library.classes,
        tuple(b.name for b in bands),
        md,
    )


def _check_same_responses(library: SpectralLibrary, sensor: Sensor, bands: list[str], where: str) -> None:
    """Refuse a resampled library whose bands are not the stack sensor's bands.

    Accepted: the same responses (digests recorded at resampling equal the sensor's, whatever the
    ids), or the same sensor id when the library records no digests (libraries written before they
    were recorded, or by hand). Refused: another sensor id without equal digests, or the same id with
    different digests (resampled with other responses under the same name).
    """
    recorded = library.metadata.get("band_responses")
    lib_id = str(library.sensor) if library.sensor else None
    if isinstance(recorded, dict) and all(b in recorded for b in bands):
        ours = {b: sensor.band(b).fingerprint for b in bands if b in sensor.band_names}
        differ = [b for b in bands if recorded[b] != ours.get(b)]
        if not differ:
            return
        if lib_id == sensor.id:
            raise BandMismatchError(
                f"{where} was resampled to {lib_id} with other responses for band {', '.join(differ)} than the "
                f"stack's sensor {sensor.id} has now; resample the full-resolution library again"
            )
    elif lib_id is None or lib_id == sensor.id:
        return
    raise BandMismatchError(
        f"{where} is resampled to {lib_id or 'unnamed'} bands but the stack's sensor is {sensor.id}; use a library "
        f"resampled to {sensor.id} (or with the same --response file) or the full-resolution library"
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
        A resampled library of another sensor (other id and other responses, or the same id with other
        responses), or one lacking a band of the stack.

    Examples
    --------
    >>> lib = SpectralLibrary(np.array([480.0, 560.0, 660.0]), np.array([[0.1, 0.2, 0.3]]), ("a",),
    ...                       band_names=("B2", "B3", "B4"), metadata={"sensor": "landsat-8-oli"})
    >>> on_bands(lib, "landsat-8-oli", ["B4", "B2"]).spectra.tolist()
    [[0.3, 0.1]]
    """
    sensor = get_sensor(sensor)
    bands = [str(b) for b in band_names]
    if not library.resampled:
        return resample(library, sensor, bands)
    _check_same_responses(library, sensor, bands, where)
    missing = [b for b in bands if b not in library.band_names]
    if missing:
        raise BandMismatchError(
            f"{where} has no band {', '.join(missing)} (it has {', '.join(library.band_names)}); resample the "
            "full-resolution library to the stack's bands or fix --band-names"
        )
    rows = [library.band_names.index(b) for b in bands]
    return SpectralLibrary(library.wavelengths[rows], library.spectra[:, rows], library.names, library.classes,
                           tuple(bands), dict(library.metadata))
