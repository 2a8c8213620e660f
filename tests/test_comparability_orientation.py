"""The sign-free gradient field (compiled kernel) against the same field built from scipy and numpy.

Reference: ``scipy.ndimage.gaussian_filter`` (sigma 1, truncate 3, mode 'nearest'; float32 in and out), central
differences, division by the band's noise, and the double-angle form g^2 / |g| of Granlund (1978,
doi:10.1016/0146-664X(78)90047-3), summed over bands; written here with numpy, independent of the kernel.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import ndimage

from unmix.comparability import band_noise, inside_mask, orientation_field


def _reference_field(planes, valid, noise, sigma=1.0):
    """The field with scipy's Gaussian filter and numpy arithmetic in double precision."""
    rows, cols = planes.shape[1:]
    total = np.zeros((rows, cols), np.complex128)
    for plane, scale in zip(planes, noise):
        if not scale > 0:
            continue
        filled = np.where(valid, plane, plane[valid].mean()).astype(np.float32)
        smooth = ndimage.gaussian_filter(filled, sigma, truncate=3.0, mode="nearest").astype(np.float64)
        g = np.zeros((rows, cols), np.complex128)
        g[1:-1, 1:-1] = ((smooth[1:-1, 2:] - smooth[1:-1, :-2]) + 1j * (smooth[2:, 1:-1] - smooth[:-2, 1:-1])) / (2 * scale)
        mag = np.abs(g)
        total += np.where(mag > 0, g * g / np.where(mag > 0, mag, 1.0), 0.0)
    total[~inside_mask(valid, sigma)] = 0.0
    return total


@pytest.mark.parametrize("layout", ["band-first", "band-last"])
@pytest.mark.parametrize("gaps", [False, True])
def test_field_equals_scipy_gaussian_reference(layout, gaps):
    rng = np.random.default_rng(3)
    smooth = ndimage.gaussian_filter(rng.standard_normal((6, 96, 112)), (0, 2, 2))
    data = (smooth + rng.normal(0, 0.05, smooth.shape)).astype(np.float32)
    if layout == "band-last":  # as the stack reader delivers blocks: (band, y, x) view of a (y, x, band) buffer
        data = np.ascontiguousarray(data.transpose(1, 2, 0)).transpose(2, 0, 1)
    valid = np.ones(data.shape[1:], bool)
    if gaps:
        valid[rng.random(valid.shape) < 0.02] = False
        valid[40:50, 10:30] = False
        data[:, ~valid] = np.nan
    noise = band_noise(np.where(valid, data, 0.0), valid)
    noise[2] = 0.0  # a band without a noise scale (flat band) is skipped by both
    got = orientation_field(data, valid, noise=noise)
    want = _reference_field(data, valid, noise)
    # single-precision planes: agreement to float32 rounding of fields of order 1-10 (common practice)
    np.testing.assert_allclose(got.real, want.real, rtol=0, atol=2e-4 * np.abs(want).max())
    np.testing.assert_allclose(got.imag, want.imag, rtol=0, atol=2e-4 * np.abs(want).max())
    assert np.abs(want).max() > 1.0  # the comparison is not between two empty fields


def test_one_band_image_and_default_noise():
    rng = np.random.default_rng(5)
    img = ndimage.gaussian_filter(rng.standard_normal((64, 64)), 1.5) + rng.normal(0, 0.01, (64, 64))
    valid = np.ones(img.shape, bool)
    got = orientation_field(img, valid)
    want = _reference_field(img[None].astype(np.float32), valid, band_noise(img.astype(np.float32), valid))
    np.testing.assert_allclose(got, want, rtol=0, atol=2e-4 * np.abs(want).max())


def test_huge_values_carry_no_made_up_orientation():
    # an undeclared fill value (1e30) inside a block: every pixel of the field stays finite
    img = np.ones((32, 32), np.float32)
    img[10, 10] = 1e30
    field = orientation_field(img, np.ones(img.shape, bool), noise=np.array([1e-3]))
    assert np.isfinite(field.real).all() and np.isfinite(field.imag).all()
