"""Phase-correlation shifts over blocks and sub-pixel resampling (unmix.comparability.registration)."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import ndimage

from unmix.comparability import block_shift, block_shifts, block_windows, combine_block_shifts, shift_image


def _scene(size=512, seed=0):
    # a textured surface: smoothed white noise (correlation length of a few pixels)
    return ndimage.gaussian_filter(np.random.default_rng(seed).random((size, size)), 1.5)


@pytest.mark.parametrize("method", ["spline", "fourier"])
def test_known_shift_recovered_within_005_pixel(method):
    scene = _scene()
    if method == "spline":  # scipy.ndimage.shift, cubic spline: an independent resampler
        moved = ndimage.shift(scene, (0.3, -1.2), order=3, mode="nearest")
    else:  # scipy.ndimage.fourier_shift: the exact band-limited translation
        moved = np.fft.ifft2(ndimage.fourier_shift(np.fft.fft2(scene), (0.3, -1.2))).real
    est = block_shifts(scene, moved, block_windows(scene.shape, 9, 128), upsample=100)
    # features moved by (+0.3, -1.2): the aligning shift is its negative (this package's convention);
    # the target of 0.05 px (Guizar-Sicairos et al. 2008 reach 1/upsample on noiseless data)
    assert est.reason == ""
    assert est.n_blocks == 9
    assert abs(est.dy - (-0.3)) < 0.05
    assert abs(est.dx - 1.2) < 0.05
    assert est.sd < 0.05


def test_sign_convention_shift_image_aligns_moving_to_reference():
    scene = _scene(256, seed=3)
    moved = ndimage.shift(scene, (-0.7, 0.4), order=3, mode="nearest")
    est = block_shifts(scene, moved, block_windows(scene.shape, 4, 96), upsample=50)
    back = shift_image(moved, est.dy, est.dx)
    inner = (slice(8, -8), slice(8, -8))
    # the aligned image matches the reference far better than the moved one (scipy.ndimage.shift made it)
    assert np.nanmax(np.abs(back - scene)[inner]) < 0.1 * np.max(np.abs(moved - scene)[inner])


def test_integer_shift_order1_equals_array_slicing():
    img = np.random.default_rng(1).random((3, 20, 30)).astype(np.float32)
    out = shift_image(img, 2, -3, order=1)
    assert out.dtype == np.float32
    # an integer translation is plain index arithmetic (numpy slicing): out[y, x] = img[y - 2, x + 3]
    np.testing.assert_allclose(out[:, 2:, :-3], img[:, :-2, 3:], rtol=0, atol=1e-6)
    assert np.isnan(out[:, :2]).all() and np.isnan(out[:, :, -3:]).all()  # came from outside the image


def test_nan_neighbourhood_stays_nan():
    img = _scene(64)
    img[30, 30] = np.nan
    lin = shift_image(img, 0.5, 0.5, order=1)
    # linear interpolation at a half-pixel shift reads the 2 x 2 pixels up-left: (29..30, 29..30) -> (30..31)
    assert np.isnan(lin[30:32, 30:32]).all()
    assert np.isfinite(lin[33:, 33:]).all() and np.isfinite(lin[1:28, 1:28]).all()
    cub = shift_image(img, 0.5, 0.5, order=3)
    assert np.isnan(cub[30:32, 30:32]).all()  # and a one-pixel wider margin for the cubic spline
    assert np.isnan(cub).sum() > np.isnan(lin).sum()


def test_too_few_valid_pixels_gives_a_reason_not_a_shift():
    scene = _scene(128)
    moving = scene.copy()
    moving[:, :90] = np.nan  # 30 % valid
    res = block_shift(scene, moving, min_valid=0.5)
    assert np.isnan(res.dy) and "too few valid pixels" in res.reason
    est = block_shifts(scene, moving, [(slice(0, 128), slice(0, 128))] * 3)
    assert np.isnan(est.dy) and est.n_blocks == 0 and "0 of 3 blocks" in est.reason


def test_nan_filled_block_still_measured():
    scene = _scene(256)
    moved = ndimage.shift(scene, (1.0, 0.5), order=3, mode="nearest")
    moved[100:110, 100:140] = np.nan  # a small cloud
    res = block_shift(scene, moved, upsample=20)
    assert res.reason == ""
    assert abs(res.dy + 1.0) < 0.1 and abs(res.dx + 0.5) < 0.1  # generated shift (scipy.ndimage.shift)


def test_spread_between_blocks_is_robust_sd():
    from unmix.comparability import BlockShift
    found = [BlockShift(0.1 * k, 0.0, 0.0) for k in range(5)] + [BlockShift(np.nan, np.nan, np.nan, "cloud")]
    est = combine_block_shifts(found)
    # median 0.2; median absolute deviation of (0, .1, .2, .3, .4) is 0.1; x 1.4826 (normal consistency)
    assert est.dy == pytest.approx(0.2)
    assert est.sd == pytest.approx(0.14826)
    assert est.n_blocks == 5


def test_block_windows_spread_and_inside():
    wins = block_windows((1000, 700), 9, 128)
    assert len(wins) == 9
    for wy, wx in wins:
        assert 0 <= wy.start and wy.stop <= 1000 and 0 <= wx.start and wx.stop <= 700
        assert wy.stop - wy.start == 128 and wx.stop - wx.start == 128
    assert block_windows((50, 60), 9, 128) == [(slice(0, 50), slice(0, 60))]


def test_kernel_package_imports_no_upper_layer():
    import subprocess
    import sys

    code = ("import sys, unmix.comparability; "
            "print(sorted(m for m in ('xarray', 'dask', 'rasterio', 'click', 'matplotlib') if m in sys.modules))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "[]"  # the layering rule of DEVELOPERS.md


def test_block_of_noise_alone_is_not_measured():
    rng = np.random.default_rng(4)
    a, b = rng.normal(size=(128, 128)), rng.normal(size=(128, 128))  # two unrelated noise fields
    res = block_shift(a, b)
    # no common structure: the correlation peak does not stand out (peak-to-next ratio near 1; Bolme et
    # al. 2010's peak-to-sidelobe reasoning), so no shift is stated
    assert np.isnan(res.dy) and "weak correlation peak" in res.reason
    assert res.peak_ratio < 1.3


def test_contrast_inversion_still_matches():
    scene = _scene(256, seed=5)
    # a field cleared, or a band where the cover's contrast runs the other way: levels inverted, edges kept
    # (the double-angle form of the gradient ignores the sign; Granlund 1978)
    moved = 1.0 - ndimage.shift(scene, (0.6, -0.4), order=3, mode="nearest")
    est = block_shifts(scene, moved, block_windows(scene.shape, 4, 128), upsample=50)
    assert est.reason == ""
    assert abs(est.dy + 0.6) < 0.05 and abs(est.dx - 0.4) < 0.05  # generated shift (scipy.ndimage.shift)


def test_bands_are_summed_and_a_flat_band_does_not_hurt():
    rng = np.random.default_rng(6)
    scene = np.stack([_scene(128, seed=7), 0.3 + rng.normal(0, 1e-3, (128, 128))])  # one textured, one flat
    moved = np.stack([ndimage.shift(scene[0], (-0.8, 0.3), order=3, mode="nearest"),
                      0.3 + rng.normal(0, 1e-3, (128, 128))])
    res = block_shift(scene, moved, upsample=50)
    # each band enters in its own noise units (Immerkaer 1996): the flat band adds noise, not bias
    assert res.reason == ""
    assert abs(res.dy - 0.8) < 0.05 and abs(res.dx + 0.3) < 0.05  # generated shift (scipy.ndimage.shift)


def test_blocks_that_disagree_give_a_reason():
    from unmix.comparability import BlockShift
    found = [BlockShift(0.0, 0.0, 0.0), BlockShift(1.0, 0.0, 0.0), BlockShift(-1.0, 0.5, 0.0)]
    est = combine_block_shifts(found)
    # median absolute deviation of (0, 1, -1) is 1, x 1.4826 = 1.48 px: far above the 0.2 px warning level
    assert np.isnan(est.dy) and "disagree" in est.reason
    assert est.sd == pytest.approx(1.4826)


def test_small_scene_gets_fewer_larger_blocks():
    wins = block_windows((160, 160), 9, 48)
    # blocks are raised to 64 px (MIN_BLOCK) and only 2 x 2 fit, rather than nine blocks of 48 px
    assert len(wins) == 4
    assert all(wy.stop - wy.start == 64 and wx.stop - wx.start == 64 for wy, wx in wins)
    assert block_windows((160, 160), 9, 256) == [(slice(0, 160), slice(0, 160))]  # one block, the whole scene


@pytest.mark.parametrize("upsample", [1, 20, 100])
def test_upsampled_peak_matches_scikit_image(upsample):
    from skimage.registration import phase_cross_correlation

    from unmix.comparability import block_field, field_shift

    scene = _scene(192, seed=8)
    moved = ndimage.shift(scene, (2.37, -0.61), order=3, mode="nearest")
    ref, mov = block_field(scene), block_field(moved)
    res = field_shift(ref, mov, upsample=upsample)
    # scikit-image's implementation of Guizar-Sicairos et al. (2008) on the same two spectra
    shift, error, _ = phase_cross_correlation(ref.spectrum, mov.spectrum, upsample_factor=upsample,
                                              space="fourier", normalization=None)
    # (scikit-image keeps the single precision of the spectra: equal to float32 rounding)
    assert (res.dy, res.dx) == pytest.approx((float(shift[0]), float(shift[1])), abs=1e-6)
    if upsample > 1:
        assert res.error == pytest.approx(float(error), abs=1e-4)
