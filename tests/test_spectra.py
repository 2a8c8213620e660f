"""Tests for unmix.spectra: resampling, spectral angle, NDVI, the library object, shipped spectra."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import integrate

from unmix.errors import BandMismatchError, InputError, UnknownNameError
from unmix.io.library import read_shipped_library
from unmix.sensors import get_sensor, list_sensors, tabulated_sensor
from unmix.spectra import SpectralLibrary, band_weights, ndvi, resample, resample_spectra, spectral_angle

WL = np.arange(400.0, 2501.0, 10.0)


def _lib(spectra, wl=WL, names=None, classes=None):
    spectra = np.atleast_2d(spectra)
    names = names or tuple(f"s{i}" for i in range(spectra.shape[0]))
    return SpectralLibrary(wl, spectra, names, classes)


# ---------------------------------------------------------------- resampling
@settings(max_examples=40, deadline=None)
@given(
    level=st.floats(0.0, 1.0),
    sensor=st.sampled_from(list_sensors()),
    step=st.sampled_from([1.0, 2.5, 5.0, 10.0, 20.0]),
    start=st.floats(300.0, 390.0),
    data=st.data(),
)
def test_flat_spectrum_resamples_to_itself(level, sensor, step, start, data):
    # property (definition of a normalised band average): a constant spectrum keeps its value
    wl = np.arange(start, 2700.0, step)
    s = get_sensor(sensor)
    names = data.draw(st.lists(st.sampled_from(s.band_names), min_size=1, unique=True))
    out = resample_spectra(np.full(wl.size, level), wl, s, names)
    np.testing.assert_allclose(out, level, rtol=1e-12, atol=1e-14)


@settings(max_examples=25, deadline=None)
@given(
    level=st.floats(0.01, 1.0),
    resp=st.lists(st.floats(0.0, 1.0), min_size=3, max_size=12).filter(lambda r: max(r) > 0.01),
    lo=st.floats(450.0, 2000.0),
    step=st.floats(1.0, 30.0),
)
def test_flat_spectrum_with_any_tabulated_response(level, resp, lo, step):
    # property: holds for any response shape, not only Gaussians
    rwl = lo + step * np.arange(len(resp))
    s = tabulated_sensor("rand", rwl, [resp], ["X"])
    np.testing.assert_allclose(resample_spectra(np.full(WL.size, level), WL, s), level, rtol=1e-12)


@pytest.mark.parametrize("sensor_id", ["landsat-5-tm", "landsat-7-etm", "landsat-8-oli", "landsat-9-oli",
                                       "sentinel-2a-msi", "sentinel-2b-msi"])
@pytest.mark.parametrize("step", [1.0, 10.0])
def test_flat_spectrum_stays_flat_in_every_builtin_band(sensor_id, step):
    # definition of a normalised band average: a constant spectrum keeps its value, every band
    wl = np.arange(300.0, 2700.0 + step / 2, step)
    out = resample_spectra(np.full((2, wl.size), [[0.0], [0.37]]), wl, sensor_id)
    assert out.shape == (2, len(get_sensor(sensor_id).bands))
    np.testing.assert_allclose(out, np.broadcast_to([[0.0], [0.37]], out.shape), rtol=1e-12, atol=1e-15)


@pytest.mark.parametrize("sensor", ["landsat-8-oli", "sentinel-2a-msi", "landsat-5-tm"])
def test_linear_spectrum_gives_value_at_band_centre(sensor):
    # The response-weighted mean of a + b*wl is a + b*centroid for any response (linearity of the
    # integral), and centre_nm is that centroid (trapezoid on the table). Library grid 1 nm, wide enough to
    # hold every band's whole response. The OLI and MSI tables are sampled every 1 nm, so the integration
    # grids coincide (1e-9); TM's table has 2-10 nm steps in places where the 1 nm library adds its own
    # wavelengths, a finer sum than the centroid's: within 1e-6 (measured 6e-7).
    wl = np.arange(200.0, 2900.0, 1.0)
    a, b = 0.05, 1.5e-4
    s = get_sensor(sensor)
    out = resample_spectra(a + b * wl, wl, s)
    expect = a + b * np.array([band.centre_nm for band in s.bands])
    np.testing.assert_allclose(out, expect, rtol=0, atol=1e-6 if sensor == "landsat-5-tm" else 1e-9)


@pytest.mark.parametrize("sensor_id", list_sensors())
def test_resample_equals_direct_integration_of_the_table(sensor_id):
    # reference: scipy.integrate.trapezoid of spectrum x response over the response table's own grid, the
    # library spectrum linearly interpolated onto that grid (np.interp), divided by the trapezoid of the
    # response. The shipped library (every 5 nm) is coarser than every table: equal to rounding.
    lib = read_shipped_library("demo_bundles")
    s = get_sensor(sensor_id)
    names = [b.name for b in s.bands if b.support()[0] >= lib.wavelengths[0]]
    ours = resample(lib, s, names).spectra
    for k, name in enumerate(names):
        band = s.band(name)
        t, r = np.asarray(band.response_wavelengths_nm), np.asarray(band.response_values)
        for i, spec in enumerate(lib.spectra):
            ref = integrate.trapezoid(np.interp(t, lib.wavelengths, spec) * r, t) / integrate.trapezoid(r, t)
            assert ours[i, k] == pytest.approx(ref, rel=1e-12, abs=1e-14), (name, lib.names[i])


def _quad_band_average(band, wl, spec, lo, hi, kinks):
    den = integrate.quad(lambda x: float(band.response(x)), lo, hi, limit=800, points=kinks)[0]
    num = integrate.quad(lambda x: float(band.response(x) * np.interp(x, wl, spec)), lo, hi, limit=800,
                         points=kinks)[0]
    return num / den


def test_gaussian_resample_matches_scipy_quad_reference():
    # independent reference: adaptive quadrature (scipy.integrate.quad) of response x linearly
    # interpolated spectrum, divided by the quadrature of the response; Gaussian bands defined by centre
    # and width (a user-defined sensor)
    from unmix.sensors import Band, Sensor

    lib = read_shipped_library("demo_bundles")
    s = Sensor("gauss", "Gaussian bands", (Band("G", 560.0, 36.0), Band("N", 865.0, 21.0),
                                           Band("S", 2200.0, 180.0)), "test")
    ours = resample(lib, s).spectra
    for k, band in enumerate(s.bands):
        lo, hi = band.support()
        lo, hi = max(lo, lib.wavelengths[0]), min(hi, lib.wavelengths[-1])  # S runs past 2500 nm: renormalised
        kinks = list(lib.wavelengths[(lib.wavelengths > lo) & (lib.wavelengths < hi)]) + [band.centre_nm]
        for i in (0, 2, 8):
            ref = _quad_band_average(band, lib.wavelengths, lib.spectra[i], lo, hi, sorted(kinks))
            assert ours[i, k] == pytest.approx(ref, rel=1e-5, abs=1e-7), (band.name, lib.names[i])


def test_library_finer_than_the_table_is_integrated_with_its_own_wavelengths():
    # A library every 0.25 nm with a narrow dip between the 1 nm samples of the MSI table: resampling
    # follows the library (reference: scipy.integrate.quad of response x interpolated spectrum, the kinks of
    # both piecewise-linear curves given), where the table's grid alone would miss most of the dip.
    s = get_sensor("sentinel-2a-msi")
    wl = np.arange(600.0, 720.0, 0.25)
    spec = 0.3 - 0.2 * (np.abs(wl - 664.5) < 0.3)  # dip at 664.25-664.75 nm, between table samples
    band = s.band("B4")
    lo, hi = band.support()
    kinks = sorted(set(wl[(wl > lo) & (wl < hi)]) | set(band.response_wavelengths_nm))
    ref = _quad_band_average(band, wl, spec, lo, hi, kinks)
    ours = resample_spectra(spec, wl, s, ["B4"])[0]
    assert ours == pytest.approx(ref, rel=1e-5)
    t, r = np.asarray(band.response_wavelengths_nm), np.asarray(band.response_values)
    table_only = integrate.trapezoid(np.interp(t, wl, spec) * r, t) / integrate.trapezoid(r, t)
    assert table_only == pytest.approx(0.3, abs=1e-12) and ours < 0.3 - 1e-3


def test_band_outside_library_range_raises_naming_band_and_ranges():
    vnir = _lib(np.full(61, 0.2), wl=np.arange(400.0, 1001.0, 10.0))
    with pytest.raises(BandMismatchError) as e:
        resample(vnir, "landsat-8-oli", ["B4", "B6"])
    msg = str(e.value)
    assert "B6" in msg and "400-1000 nm" in msg and "1609" in msg  # centre 1609.1 nm
    # the VNIR bands alone are fine
    assert resample(vnir, "landsat-8-oli", ["B2", "B4", "B5"]).spectra.shape == (1, 3)


def test_band_slightly_past_the_edge_is_accepted_within_tolerance():
    # TM B1's measured response starts at 420 nm; a library from 440 nm leaves 0.29 % of its area out
    # (trapezoid of the shipped table below 440 nm): accepted at the default 1 %, refused at 0.01 %
    wl = np.arange(440.0, 2501.0, 10.0)
    r = resample(_lib(np.full(wl.size, 0.3), wl=wl), "landsat-5-tm", ["B1"])
    np.testing.assert_allclose(r.spectra, 0.3)
    with pytest.raises(BandMismatchError, match="0%"):
        resample(_lib(np.full(wl.size, 0.3), wl=wl), "landsat-5-tm", ["B1"], outside_tolerance=0.0001)


def test_resample_keeps_names_classes_and_sets_sensor():
    lib = _lib(np.vstack([np.full(WL.size, 0.1), np.linspace(0, 1, WL.size)]), names=("a", "b"),
               classes=("soil", None))
    r = resample(lib, "sentinel-2a-msi", ["B8A", "B4"])
    assert r.names == ("a", "b") and r.classes == ("soil", None)
    assert r.band_names == ("B8A", "B4") and r.sensor == "sentinel-2a-msi"
    np.testing.assert_allclose(r.wavelengths, [864.7, 664.6], atol=0.05)  # ESA central wavelengths (CHECKS.md)
    assert set(r.metadata["band_responses"]) == {"B8A", "B4"}
    with pytest.raises(BandMismatchError, match="already resampled"):
        resample(r, "landsat-8-oli")


def test_resample_spectra_vectorised_float32_and_nan():
    rng = np.random.default_rng(0)
    cube = rng.uniform(0, 0.6, (3, 4, WL.size)).astype(np.float32)
    out = resample_spectra(cube, WL, "landsat-8-oli", ["B2", "B5", "B7"])
    assert out.shape == (3, 4, 3) and out.dtype == np.float32
    # same as row by row in float64 (slow obvious reference)
    W = band_weights(WL, "landsat-8-oli", ["B2", "B5", "B7"])
    ref = np.array([[W @ cube[i, j].astype(np.float64) for j in range(4)] for i in range(3)])
    np.testing.assert_allclose(out, ref, rtol=1e-6)
    # NaN only touches bands whose response reaches it (NaN = no data is propagated, not guessed)
    spec = cube[0, 0].astype(np.float64)
    spec[np.searchsorted(WL, 2200.0)] = np.nan
    r = resample_spectra(spec, WL, "landsat-8-oli", ["B2", "B5", "B7"])
    assert np.isfinite(r[:2]).all() and np.isnan(r[2])


# ---------------------------------------------------------------- spectral angle
@settings(max_examples=60, deadline=None)
@given(
    n=st.integers(2, 12),
    seed=st.integers(0, 2**32 - 1),
)
def test_spectral_angle_matches_arccos_of_normalised_dot(n, seed):
    # reference: Kruse et al. 1993 definition, arccos(a.b / |a||b|), directly with numpy
    rng = np.random.default_rng(seed)
    a = rng.uniform(-1, 1, (5, n))
    b = rng.uniform(-1, 1, (5, n))
    ref = np.arccos(np.clip((a * b).sum(-1) / np.linalg.norm(a, axis=-1) / np.linalg.norm(b, axis=-1), -1, 1))
    np.testing.assert_allclose(spectral_angle(a, b), ref, atol=1e-7)


def test_spectral_angle_known_pairs_broadcast_and_dtype():
    # orthogonal -> pi/2, scaled copy -> 0, opposite -> pi (definition)
    assert spectral_angle([1.0, 0.0, 0.0], [0.0, 3.0, 0.0]) == pytest.approx(np.pi / 2, abs=1e-15)
    x = np.array([0.05, 0.08, 0.06, 0.41, 0.25])
    assert spectral_angle(x, 7.3 * x) == pytest.approx(0.0, abs=1e-8)
    assert spectral_angle(x, -x) == pytest.approx(np.pi, abs=1e-8)
    a = np.random.default_rng(1).uniform(0, 1, (3, 1, 6))
    b = np.random.default_rng(2).uniform(0, 1, (4, 6))
    out = spectral_angle(a, b)
    assert out.shape == (3, 4)
    assert out[2, 3] == pytest.approx(spectral_angle(a[2, 0], b[3]))
    assert spectral_angle(a.astype(np.float32), b.astype(np.float32)).dtype == np.float32
    assert np.isnan(spectral_angle([np.nan, 1.0], [1.0, 1.0]))
    assert np.isnan(spectral_angle([0.0, 0.0], [1.0, 1.0]))


# ---------------------------------------------------------------- NDVI
def test_ndvi_formula_and_sensor_defaults():
    # NDVI = (NIR - red) / (NIR + red) (Rouse et al. 1974; Tucker 1979)
    x = np.array([[0.04, 0.05, 0.45], [0.1, 0.3, 0.3]])
    assert ndvi(x, ["B3", "B4", "B5"], sensor="landsat-8-oli") == pytest.approx([0.8, 0.0])  # OLI: B4/B5
    assert ndvi(x, ["B3", "B4", "B5"], sensor="landsat-5-tm") == pytest.approx([(0.05 - 0.04) / 0.09, 0.5])
    assert ndvi(x, ["R", "G", "N"], red="R", nir="N") == pytest.approx([(0.45 - 0.04) / 0.49, 0.5])
    assert np.isnan(ndvi(np.zeros(2), ["B4", "B8"], sensor="sentinel-2a-msi"))  # 0/0 -> NaN, no warning
    assert np.isnan(ndvi([np.nan, 0.4], ["B4", "B8"], sensor="sentinel-2a-msi"))  # no data propagated
    assert ndvi(x.astype(np.float32), ["B3", "B4", "B5"], red="B4", nir="B5").dtype == np.float32
    with pytest.raises(UnknownNameError, match="B8"):
        ndvi(x, ["B3", "B4", "B5"], sensor="sentinel-2a-msi")
    with pytest.raises(InputError):
        ndvi(x, ["B3", "B4", "B5"])


@pytest.mark.parametrize("name", ["demo_library_landsat-8-oli", "demo_library_sentinel-2a-msi"])
def test_ndvi_of_shipped_spectra_within_rules_of_thumb(name):
    lib = read_shipped_library(name)
    v = dict(zip(lib.names, ndvi(lib)))
    # CHECKS.md "Rules of thumb" (common practice): dense green canopy 0.6-0.8
    assert 0.6 <= v["green_vegetation"] <= 0.8
    # CHECKS.md: bare soil, rock, sand "about 0 to 0.1"; we read "about" as 0..0.12
    for n in ("bright_soil", "dark_soil", "sand"):
        assert 0.0 <= v[n] <= 0.12, n
    # CHECKS.md: water < 0
    assert v["water"] < 0
    # dry vegetation: no red edge, well below green canopy (common practice: senescent cover 0.1-0.3)
    assert 0.05 <= v["dry_vegetation"] <= 0.3


def test_ndvi_of_full_resolution_library_resamples_first():
    lib = read_shipped_library("demo_library")
    direct = ndvi(lib, sensor="landsat-8-oli")
    via = ndvi(resample(lib, "landsat-8-oli", ["B4", "B5"]))
    np.testing.assert_allclose(direct, via)
    with pytest.raises(BandMismatchError, match="sensor"):
        ndvi(lib)


def test_shipped_bundles_ndvi_classes():
    lib = read_shipped_library("demo_bundles_sentinel-2a-msi")
    v = ndvi(lib)
    for n, c, x in zip(lib.names, lib.classes, v):
        if c == "green_vegetation":  # CHECKS.md: shrub/grass 0.2-0.3 up to dense canopy 0.6-0.8
            assert 0.5 <= x <= 0.8, n
        elif c in ("soil", "sand"):  # CHECKS.md: about 0 to 0.1
            assert 0.0 <= x <= 0.12, n


# ---------------------------------------------------------------- shipped spectral shapes
def _at(lib, name, lo, hi=None):
    s = lib.spectrum(name)
    if hi is None:
        return float(np.interp(lo, lib.wavelengths, s))
    m = (lib.wavelengths >= lo) & (lib.wavelengths <= hi)
    return s[m]


def test_shipped_green_vegetation_has_textbook_features():
    # Features from common practice (vegetation reflectance textbooks): green peak 0.08-0.12,
    # red edge inflection 700-730 nm, NIR plateau 0.4-0.5, water absorptions at 1450 and 1940 nm
    lib = read_shipped_library("demo_library")
    assert 0.08 <= _at(lib, "green_vegetation", 500, 600).max() <= 0.12
    wl = lib.wavelengths
    d = np.gradient(lib.spectrum("green_vegetation"), wl)
    m = (wl > 650) & (wl < 800)
    assert 700 <= wl[m][np.argmax(d[m])] <= 730
    assert 0.4 <= _at(lib, "green_vegetation", 780, 900).mean() <= 0.5
    for band, left, right in ((1450, 1300, 1650), (1940, 1800, 2150)):
        assert _at(lib, "green_vegetation", band) < 0.6 * min(_at(lib, "green_vegetation", left),
                                                              _at(lib, "green_vegetation", right))


def test_shipped_other_spectra_have_textbook_features():
    lib = read_shipped_library("demo_library")
    wl = lib.wavelengths
    m = (wl > 650) & (wl < 800)
    # dry vegetation: no red edge (slope far below that of green vegetation), rising visible,
    # cellulose/lignin absorption near 2100 nm (common practice)
    slope_dry = np.gradient(lib.spectrum("dry_vegetation"), wl)[m].max()
    slope_gv = np.gradient(lib.spectrum("green_vegetation"), wl)[m].max()
    assert slope_dry < 0.1 * slope_gv
    assert np.all(np.diff(_at(lib, "dry_vegetation", 400, 700)) > 0)
    assert _at(lib, "dry_vegetation", 2100) < min(_at(lib, "dry_vegetation", 2050), _at(lib, "dry_vegetation", 2200))
    # soils and sand: brighter in the SWIR than in the blue; sand the brightest
    for n in ("bright_soil", "dark_soil", "sand"):
        assert _at(lib, n, 1650) > _at(lib, n, 450)
    assert _at(lib, "sand", 1650) > _at(lib, "bright_soil", 1650) > _at(lib, "dark_soil", 1650)
    # water near zero beyond the NIR; shade about zero everywhere
    assert _at(lib, "water", 850, 2500).max() < 0.01
    assert lib.spectrum("shade").max() <= 0.01
    assert lib.metadata["invented"] is True and "invented" in lib.metadata["description"].lower()
    # smoothness (brief: smooth spectra): no spikes -- the second difference on the 5 nm grid stays
    # below 0.02 reflectance, while the red edge itself may rise ~0.07 per 10 nm
    assert np.allclose(np.diff(lib.wavelengths), 5.0)
    assert np.abs(np.diff(lib.spectra, n=2, axis=1)).max() < 0.02


# ---------------------------------------------------------------- library object
def test_library_select_by_class_len_and_immutability():
    lib = read_shipped_library("demo_bundles")
    assert len(lib) == 13
    sub = lib.select(["sand", "green_vegetation"])
    assert sub.names == ("sand", "green_vegetation") and sub.classes == ("sand", "green_vegetation")
    np.testing.assert_array_equal(sub.spectra[0], lib.spectrum("sand"))
    with pytest.raises(UnknownNameError) as e:
        lib.select(["sand", "snow"])
    assert "snow" in str(e.value) and "green_vegetation_crop" in str(e.value)
    groups = lib.by_class()
    assert {k: v.shape[0] for k, v in groups.items()} == {
        "green_vegetation": 3, "dry_vegetation": 3, "soil": 3, "sand": 2, "water": 1, "shade": 1}
    with pytest.raises(ValueError):
        lib.spectra[0, 0] = 1.0  # read-only arrays


def test_library_validation():
    with pytest.raises(InputError, match="unique"):
        SpectralLibrary(WL[:3], np.ones((2, 3)) * 0.1, ("a", "a"))
    with pytest.raises(InputError, match="increase"):
        SpectralLibrary(np.array([500.0, 490.0, 510.0]), np.ones((1, 3)) * 0.1, ("a",))
    with pytest.raises(InputError):
        SpectralLibrary(WL[:3], np.ones((2, 4)), ("a", "b"))
    u = SpectralLibrary(WL[:3], np.ones((1, 3)) * 0.1, ("a",))
    assert u.by_class().keys() == {"a"}  # unlabelled spectra form their own group


def test_on_bands_picks_resampled_bands_or_resamples():
    from unmix.errors import BandMismatchError
    from unmix.io.library import read_library, shipped_library_path
    from unmix.spectra import on_bands, resample

    full = read_library(shipped_library_path("demo_library"))
    oli = read_library(shipped_library_path("demo_library_landsat-8-oli"))
    bands = ["B5", "B4", "B2"]
    # A full-resolution library is resampled; a resampled one gives the same values picked by name
    # (the shipped resampled file was made by resample(); checked in test_io_library).
    np.testing.assert_allclose(on_bands(full, "landsat-8-oli", bands).spectra,
                               resample(full, "landsat-8-oli", bands).spectra, rtol=1e-12)
    # (the shipped file keeps 6 decimals)
    np.testing.assert_allclose(on_bands(oli, "landsat-8-oli", bands).spectra,
                               resample(full, "landsat-8-oli", bands).spectra, rtol=0, atol=5.1e-7)
    with pytest.raises(BandMismatchError, match="sentinel-2a-msi"):
        on_bands(oli, "sentinel-2a-msi", ["B4"])
    with pytest.raises(BandMismatchError, match="no band B1"):
        on_bands(oli, "landsat-8-oli", ["B1", "B4"])


@pytest.mark.parametrize(
    "module, topic_modules",
    [
        ("unmix.spectra", ["library", "resampling", "similarity", "vegetation_index"]),
        ("unmix.sensors", ["responses", "catalogue"]),
        ("unmix.io.library", ["reader", "writer", "responses", "shipped"]),
        ("unmix.io.products", ["atomic", "cog", "grid_mapping", "netcdf", "provenance"]),
    ],
)
def test_public_names_stay_importable_from_the_split_modules(module, topic_modules):
    # every public name is still reachable from its old module path and is the object its topic module defines
    import importlib

    mod = importlib.import_module(module)
    owners = {}
    for t in topic_modules:
        sub = importlib.import_module(f"{module}.{t}")
        for name in sub.__all__:
            owners[name] = getattr(sub, name)
    assert set(mod.__all__) == set(owners)
    for name in mod.__all__:
        assert getattr(mod, name) is owners[name], name
