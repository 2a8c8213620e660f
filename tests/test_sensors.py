"""Tests for unmix.sensors: built-in measured responses against published values, response functions."""

from __future__ import annotations

import importlib.resources
import json

import numpy as np
import pytest
from scipy import stats

from unmix.errors import InputError, UnknownNameError
from unmix.sensors import (
    Band,
    Sensor,
    gaussian_response,
    get_sensor,
    half_maximum_points,
    list_sensors,
    tabulated_sensor,
)

# NASA Landsat 8 OLI band summary, 50 % points [nm], as quoted in ../shared/data/sensor-responses/README.md
# and unmix/data/README.md (CA, Blue, Green, Red, NIR, SWIR1, SWIR2). NASA's band centre is the mid-point.
OLI_HALF_MAX_NM = {
    "B1": (434.97, 450.95),
    "B2": (452.02, 512.06),
    "B3": (532.74, 590.07),
    "B4": (635.85, 673.32),
    "B5": (850.54, 878.79),
    "B6": (1566.50, 1651.22),
    "B7": (2107.40, 2294.06),
}

# Sentinel-2A MSI central wavelength / bandwidth [nm]: ESA COPE-GSEG-EOPG-TN-15-0007, as in CHECKS.md.
S2A_CENTRE_WIDTH = {
    "B1": (442.7, 21), "B2": (492.4, 66), "B3": (559.8, 36), "B4": (664.6, 31), "B5": (704.1, 15),
    "B6": (740.5, 15), "B7": (782.8, 20), "B8": (832.8, 106), "B8A": (864.7, 21), "B9": (945.1, 20),
    "B10": (1373.5, 31), "B11": (1613.7, 91), "B12": (2202.4, 175),
}

# Sentinel-2B MSI central wavelength / bandwidth [nm]: same ESA document, S2B columns (from memory).
S2B_CENTRE_WIDTH = {
    "B1": (442.2, 21), "B2": (492.1, 66), "B3": (559.0, 36), "B4": (664.9, 31), "B5": (703.8, 16),
    "B6": (739.1, 15), "B7": (779.7, 20), "B8": (832.9, 106), "B8A": (864.0, 22), "B9": (943.2, 21),
    "B10": (1376.9, 30), "B11": (1610.4, 94), "B12": (2185.7, 185),
}


def test_oli_half_maximum_points_match_nasa_band_summary():
    # NASA OLI band summary (50 % points, above); the brief's tolerance: 1 nm. Measured: within 0.07 nm.
    s = get_sensor("landsat-8-oli")
    for name, (lo, hi) in OLI_HALF_MAX_NM.items():
        b = s.band(name)
        got_lo, got_hi = b.half_maximum_nm()
        assert got_lo == pytest.approx(lo, abs=1.0), name
        assert got_hi == pytest.approx(hi, abs=1.0), name
        assert b.fwhm_nm == pytest.approx(hi - lo, abs=1.0), name
        # NASA's centre = mid-point of the 50 % points; ours is the response-weighted mean (within 0.6 nm)
        assert b.centre_nm == pytest.approx((lo + hi) / 2, abs=1.0), name


def test_oli_widths_are_the_measured_ones_not_the_old_gaussians():
    # issue #10's outside check: measured 50 % widths B3 57.4, B4 37.5, B5 28.2, B6 84.7 nm, where the
    # old Gaussians had 75, 50, 40, 100 nm (USGS band edges); NASA OLI band summary agrees (above)
    s = get_sensor("landsat-8-oli")
    for name, width in (("B3", 57.4), ("B4", 37.5), ("B5", 28.2), ("B6", 84.7)):
        assert s.band(name).fwhm_nm == pytest.approx(width, abs=0.2), name


def test_oli2_follows_the_oli_band_summary_within_its_build_differences():
    # OLI-2 was built to the OLI band specification (USGS Landsat 9 handbook, from memory); its measured
    # 50 % points differ from OLI's summary by up to 2.0 nm (SWIR2 lower edge), so 2.5 nm here.
    s = get_sensor("landsat-9-oli")
    assert s.band_names == get_sensor("landsat-8-oli").band_names == ("B1", "B2", "B3", "B4", "B5", "B6", "B7", "B9")
    for name, (lo, hi) in OLI_HALF_MAX_NM.items():
        got_lo, got_hi = s.band(name).half_maximum_nm()
        assert got_lo == pytest.approx(lo, abs=2.5) and got_hi == pytest.approx(hi, abs=2.5), name


@pytest.mark.parametrize("sensor_id, table", [("sentinel-2a-msi", S2A_CENTRE_WIDTH),
                                              ("sentinel-2b-msi", S2B_CENTRE_WIDTH)])
def test_msi_centres_reproduce_esa_central_wavelengths(sensor_id, table):
    # ESA's central wavelength is the response-weighted mean, ours too: within 0.1 nm of the published
    # values (S2A: CHECKS.md; S2B: from memory). ESA's bandwidths (whole nm) are 0.4-1.9 nm wider than our
    # interpolated 50 % widths; a check within 2.5 nm that they describe the same band.
    s = get_sensor(sensor_id)
    assert s.band_names == tuple(table)  # all 13, agency order
    for name, (c, w) in table.items():
        assert s.band(name).centre_nm == pytest.approx(c, abs=0.1), name
        assert s.band(name).fwhm_nm == pytest.approx(w, abs=2.5), name


def test_tm_and_etm_centres_moved_to_the_measured_responses():
    # issue #10's outside check: TM B5 centred near 1677 nm, not 1650 (the old mid-point of the USGS
    # band edges 1.55-1.75 um); TM B2 10.6 nm and ETM+ B7 11.9 nm from the old mid-points 560 / 2220 nm
    tm, etm = get_sensor("landsat-5-tm"), get_sensor("landsat-7-etm")
    assert tm.band("B5").centre_nm == pytest.approx(1677.0, abs=1.0)
    assert abs(tm.band("B5").centre_nm - 1650.0) > 20
    assert tm.band("B2").centre_nm - 560.0 == pytest.approx(10.6, abs=0.2)
    assert 2220.0 - etm.band("B7").centre_nm == pytest.approx(11.9, abs=0.2)
    # reflective bands only (USGS band designations): thermal B6 and panchromatic B8 left out
    assert tm.band_names == etm.band_names == ("B1", "B2", "B3", "B4", "B5", "B7")


def test_every_builtin_band_is_tabulated_with_its_half_maximum_width():
    for sid in list_sensors():
        for b in get_sensor(sid).bands:
            assert b.tabulated, (sid, b.name)
            lo, hi = b.half_maximum_nm()
            # definition: the response is 0.5 at both points (linear between samples) and lo < centre < hi
            np.testing.assert_allclose(b.response([lo, hi]), 0.5, atol=1e-12)
            assert b.fwhm_nm == pytest.approx(hi - lo) and lo < b.centre_nm < hi


def test_every_builtin_sensor_names_its_document_and_ndvi_bands():
    documents = {"landsat-5-tm": "L5_TM_RSR", "landsat-7-etm": "L7_RSR", "landsat-8-oli": "Ball_BA_RSR",
                 "landsat-9-oli": "OLI-2 band-average", "sentinel-2a-msi": "COPE-GSEG-EOPG-TN-15-0007",
                 "sentinel-2b-msi": "COPE-GSEG-EOPG-TN-15-0007"}  # ../shared/data/sensor-responses/README.md
    assert set(list_sensors()) == set(documents)
    for sid in list_sensors():
        s = get_sensor(sid)
        assert documents[sid] in s.source and "from memory" not in s.source, sid
        red, nir = s.band(s.red), s.band(s.nir)
        # red band inside 600-700 nm, NIR inside 760-900 nm (common practice definition of the regions)
        assert 600 <= red.centre_nm <= 700 and 760 <= nir.centre_nm <= 900


def test_shipped_tables_are_peak_normalised_non_negative_and_listed():
    # unmix/data/README.md: each band divided by its own peak; negatives set to 0
    data = importlib.resources.files("unmix") / "data"
    files = json.loads((data / "sensor_responses.json").read_text())["files"]
    assert {f["sensor"] for f in files.values()} == set(list_sensors())
    for fname, entry in files.items():
        lines = (data / fname).read_text().splitlines()
        header = lines[0].split(",")
        assert header[0] == "wavelength_nm" and header[1:] == entry["bands"], fname
        t = np.loadtxt(lines[1:], delimiter=",")
        assert np.all(np.diff(t[:, 0]) > 0) and t[:, 1:].min() == 0.0, fname
        np.testing.assert_allclose(t[:, 1:].max(axis=0), 1.0, atol=1e-6, err_msg=fname)
        assert get_sensor(entry["sensor"]).band_names == tuple(entry["bands"])


def test_unknown_sensor_lists_known_ids():
    with pytest.raises(UnknownNameError) as e:
        get_sensor("landsat-99")
    for sid in list_sensors():
        assert sid in str(e.value)
    assert get_sensor("Sentinel-2A-MSI").id == "sentinel-2a-msi"  # ids are case-insensitive


def test_unknown_band_lists_the_bands():
    with pytest.raises(UnknownNameError, match="B8A") as e:
        get_sensor("landsat-8-oli").band("B8A")
    assert "B7" in str(e.value)


@pytest.mark.parametrize("centre,fwhm", [(660.0, 30.0), (865.0, 40.0), (2200.0, 200.0)])
def test_gaussian_response_matches_scipy_normal_and_fwhm_definition(centre, fwhm):
    # reference: scipy.stats.norm with sigma = FWHM / (2 sqrt(2 ln 2)) (definition of FWHM)
    sigma = fwhm / (2 * np.sqrt(2 * np.log(2)))
    wl = np.linspace(centre - 1.9 * fwhm, centre + 1.9 * fwhm, 501)
    ref = stats.norm.pdf(wl, centre, sigma) / stats.norm.pdf(centre, centre, sigma)
    np.testing.assert_allclose(gaussian_response(wl, centre, fwhm), ref, rtol=1e-12, atol=1e-15)
    np.testing.assert_allclose(gaussian_response([centre - fwhm / 2, centre + fwhm / 2], centre, fwhm), 0.5)
    assert gaussian_response(centre + 2.1 * fwhm, centre, fwhm) == 0.0


def test_user_defined_gaussian_band_keeps_centre_and_width():
    # a sensor defined by centre and width keeps Gaussian responses (definition of FWHM)
    s = Sensor("mine", "my sensor", (Band("R", 660.0, 30.0),), "test")
    assert not s.band("R").tabulated and s.band("R").half_maximum_nm() == (645.0, 675.0)
    np.testing.assert_allclose(s.response("R", [660.0, 675.0]), [1.0, 0.5])


def test_builtin_response_is_the_table_linearly_interpolated():
    # the shipped OLI table (unmix/data/landsat8_oli_rsr.csv), np.interp as the reference
    data = importlib.resources.files("unmix") / "data"
    lines = (data / "landsat8_oli_rsr.csv").read_text().splitlines()
    t = np.loadtxt(lines[1:], delimiter=",")
    col = lines[0].split(",").index("B4")
    x = np.array([600.0, 640.0, 654.5, 660.25, 700.0, 2000.0])
    np.testing.assert_allclose(get_sensor("landsat-8-oli").response("B4", x),
                               np.interp(x, t[:, 0], t[:, col], left=0, right=0), rtol=0, atol=1e-15)


def test_tabulated_sensor_centroid_fwhm_and_interpolation():
    wl = np.arange(600.0, 721.0, 10.0)
    tri = np.clip(1 - np.abs(wl - 660.0) / 40.0, 0, None)  # triangle, half width 40 nm at the base
    box = ((wl >= 630) & (wl <= 700)).astype(float) * 7.0  # any positive scale, divided by max
    s = tabulated_sensor("toy", wl, np.vstack([tri, box]), ["T", "Q"], red="T", nir="Q")
    # symmetric table -> centroid = centre of symmetry; triangle FWHM = half its base width (geometry)
    assert s.band("T").centre_nm == pytest.approx(660.0)
    assert s.band("T").fwhm_nm == pytest.approx(40.0)
    assert s.band("T").half_maximum_nm() == pytest.approx((640.0, 680.0))
    assert s.band("Q").centre_nm == pytest.approx(665.0)
    # half maximum of the box: linear ramps 620-630 and 700-710 cross 0.5 at their mid-points (geometry)
    assert s.band("Q").half_maximum_nm() == pytest.approx((625.0, 705.0))
    # response is linear interpolation of the table, zero outside (np.interp reference); the band keeps
    # only its own stretch of the table
    x = np.array([590.0, 633.0, 655.5, 800.0])
    np.testing.assert_allclose(s.response("T", x), np.interp(x, wl, tri, left=0, right=0))
    np.testing.assert_allclose(s.response("Q", x), np.interp(x, wl, box / 7.0, left=0, right=0))
    assert s.band("Q").response_wavelengths_nm == (620.0, 630.0, 640.0, 650.0, 660.0, 670.0, 680.0, 690.0,
                                                   700.0, 710.0)


def test_band_of_a_shared_table_ends_at_its_own_last_sample():
    # A table shared by two bands: A sampled every 1 nm up to 503 nm (still 0.2 there), the next row is
    # B's grid 100 nm away. A's response ends at 503 nm instead of ramping down to 0 across the gap;
    # a zero one step away closes a curve as usual (definition in tabulated_sensor).
    wl = [500.0, 501.0, 502.0, 503.0, 603.0, 604.0, 605.0]
    s = tabulated_sensor("two", wl, [[0.0, 1.0, 0.6, 0.2, 0, 0, 0], [0, 0, 0, 0, 0.0, 1.0, 0.0]], ["A", "B"])
    assert s.band("A").response_wavelengths_nm == (500.0, 501.0, 502.0, 503.0)
    assert s.band("A").response(550.0) == 0.0 and s.band("A").response(502.5) == pytest.approx(0.4)
    assert s.band("B").response_wavelengths_nm == (603.0, 604.0, 605.0)
    # the shipped TM table jumps from 945 nm (B4 still 0.0017) to 1514 nm (B5's grid): B4 is 0 at 1200 nm
    tm = get_sensor("landsat-5-tm")
    assert tm.band("B4").support()[1] == 945.0 and tm.response("B4", 1200.0) == 0.0


def test_half_maximum_points_takes_the_outermost_crossings():
    # two lobes: the width spans both (definition: outermost crossings), the dip is ignored
    wl = [500.0, 510.0, 520.0, 530.0, 540.0, 550.0, 560.0]
    r = [0.0, 1.0, 0.2, 0.2, 0.8, 0.0, 0.0]
    assert half_maximum_points(wl, r) == pytest.approx((505.0, 543.75))  # 540 + 10 * (0.8-0.5)/0.8
    assert half_maximum_points([1.0, 2.0], [1.0, 1.0]) == (1.0, 2.0)  # above half at both ends: the ends


def test_fingerprint_identifies_the_response():
    oli = get_sensor("landsat-8-oli")
    b4 = oli.band("B4")
    again = tabulated_sensor("other-name", b4.response_wavelengths_nm, [b4.response_values], ["B4"])
    assert again.band("B4").fingerprint == b4.fingerprint  # same name and table, any sensor id
    assert get_sensor("landsat-9-oli").band("B4").fingerprint != b4.fingerprint
    assert Band("B4", 654.6, 37.5).fingerprint != b4.fingerprint


def test_band_and_sensor_validation():
    with pytest.raises(InputError, match="fwhm"):
        Band("B1", 500.0, 0.0)
    with pytest.raises(InputError, match="unique"):
        Sensor("x", "x", (Band("B1", 500.0, 10.0), Band("B1", 600.0, 10.0)), "test")
    with pytest.raises(InputError, match="red band"):
        Sensor("x", "x", (Band("B1", 500.0, 10.0),), "test", red="B3")
    with pytest.raises(InputError, match="twice"):
        get_sensor("landsat-8-oli").select(["B4", "B4"])
