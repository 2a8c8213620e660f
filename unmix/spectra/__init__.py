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

from .library import SpectralLibrary
from .resampling import band_weights, on_bands, resample, resample_spectra
from .similarity import spectral_angle
from .vegetation_index import ndvi

__all__ = [
    "SpectralLibrary",
    "band_weights",
    "on_bands",
    "resample",
    "resample_spectra",
    "spectral_angle",
    "ndvi",
]
