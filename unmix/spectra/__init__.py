"""Spectral libraries, resampling to sensor bands, spectral angle and NDVI.

A :class:`SpectralLibrary` holds reflectance spectra (0..1) either on a wavelength grid [nm]
("full-resolution") or per sensor band ("resampled": ``band_names`` set, ``wavelengths`` are the band
centres). Reading and writing library files lives in :mod:`unmix.io.library`.

Resampling (:func:`resample`, :func:`resample_spectra`) integrates each spectrum over each band's
relative spectral response; the method and its tolerances are described in
:mod:`unmix.spectra.resampling`.
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
