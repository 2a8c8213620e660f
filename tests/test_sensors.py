"""Tests for unmix.sensors: band tables against published values, response functions."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from unmix.errors import InputError, UnknownNameError
from unmix.sensors import Band, Sensor, gaussian_response, get_sensor, list_sensors, tabulated_sensor

# Landsat 8/9 OLI band edges [um]: USGS Landsat 8 Data Users Handbook, as in CHECKS.md
# (from memory, cross-checked with secondary copies).
OLI_EDGES_UM = {
    "B1": (0.433, 0.453),
    "B2": (0.450, 0.515),
    "B3": (0.525, 0.600),
    "B4": (0.630, 0.680),
    "B5": (0.845, 0.885),
    "B6": (1.560, 1.660),
    "B7": (2.100, 2.300),
}

# Sentinel-2A MSI centre / bandwidth [nm]: ESA COPE-GSEG-EOPG-TN-15-0007, as in CHECKS.md.
S2A_CENTRE_WIDTH = {
    "B1": (442.7, 21), "B2": (492.4, 66), "B3": (559.8, 36), "B4": (664.6, 31), "B5": (704.1, 15),
    "B6": (740.5, 15), "B7": (782.8, 20), "B8": (832.8, 106), "B8A": (864.7, 21), "B9": (945.1, 20),
    "B10": (1373.5, 31), "B11": (1613.7, 91), "B12": (2202.4, 175),
}

# Landsat 4-5 TM and Landsat 7 ETM+ reflective band edges [um]: USGS Landsat 4-7 / Landsat 7 Data
# Users Handbooks (from memory).
TM_EDGES_UM = {"B1": (0.45, 0.52), "B2": (0.52, 0.60), "B3": (0.63, 0.69), "B4": (0.76, 0.90),
               "B5": (1.55, 1.75), "B7": (2.08, 2.35)}
ETM_EDGES_UM = {"B1": (0.45, 0.52), "B2": (0.52, 0.60), "B3": (0.63, 0.69), "B4": (0.77, 0.90),
                "B5": (1.55, 1.75), "B7": (2.09, 2.35)}

# Sentinel-2B MSI centre / bandwidth [nm]: ESA COPE-GSEG-EOPG-TN-15-0007, S2B columns (from memory).
S2B_CENTRE_WIDTH = {
    "B1": (442.2, 21), "B2": (492.1, 66), "B3": (559.0, 36), "B4": (664.9, 31), "B5": (703.8, 16),
    "B6": (739.1, 15), "B7": (779.7, 20), "B8": (832.9, 106), "B8A": (864.0, 22), "B9": (943.2, 21),
    "B10": (1376.9, 30), "B11": (1610.4, 94), "B12": (2185.7, 185),
}


def _check_edges(sensor_id, edges_um):
    s = get_sensor(sensor_id)
    for name, (lo, hi) in edges_um.items():
        b = s.band(name)
        assert b.centre_nm == pytest.approx((lo + hi) / 2 * 1000, abs=1e-6), name
        assert b.fwhm_nm == pytest.approx((hi - lo) * 1000, abs=1e-6), name


@pytest.mark.parametrize("sensor_id", ["landsat-8-oli", "landsat-9-oli"])
def test_oli_band_edges_match_usgs_table(sensor_id):
    # CHECKS.md "Sensor bands", USGS Landsat 8 Data Users Handbook; OLI-2 shares the nominal bands
    _check_edges(sensor_id, OLI_EDGES_UM)
    # reflective only: no panchromatic B8, no thermal B10/B11 (brief; USGS band designations)
    names = get_sensor(sensor_id).band_names
    assert "B8" not in names and "B10" not in names and "B11" not in names


def test_sentinel_2a_centres_and_widths_match_esa_table():
    # CHECKS.md "Sensor bands", ESA COPE-GSEG-EOPG-TN-15-0007 (pinned version)
    s = get_sensor("sentinel-2a-msi")
    assert s.band_names == tuple(S2A_CENTRE_WIDTH)  # all 13, agency order
    for name, (c, w) in S2A_CENTRE_WIDTH.items():
        assert s.band(name).centre_nm == pytest.approx(c, abs=1e-9)
        assert s.band(name).fwhm_nm == pytest.approx(w, abs=1e-9)


def test_sentinel_2b_centres_and_widths_match_esa_table():
    # ESA COPE-GSEG-EOPG-TN-15-0007, S2B columns (from memory)
    s = get_sensor("sentinel-2b-msi")
    assert s.band_names == tuple(S2B_CENTRE_WIDTH)
    for name, (c, w) in S2B_CENTRE_WIDTH.items():
        assert s.band(name).centre_nm == pytest.approx(c, abs=1e-9)
        assert s.band(name).fwhm_nm == pytest.approx(w, abs=1e-9)


def test_tm_and_etm_reflective_bands_match_usgs_tables():
    # USGS Landsat 4-7 handbooks (from memory); thermal B6 and panchromatic B8 left out
    _check_edges("landsat-5-tm", TM_EDGES_UM)
    _check_edges("landsat-7-etm", ETM_EDGES_UM)
    assert get_sensor("landsat-5-tm").band_names == ("B1", "B2", "B3", "B4", "B5", "B7")
    assert get_sensor("landsat-7-etm").band_names == ("B1", "B2", "B3", "B4", "B5", "B7")


def test_every_builtin_sensor_names_a_source_and_ndvi_bands():
    for sid in list_sensors():
        s = get_sensor(sid)
        assert s.source and ("USGS" in s.source or "ESA" in s.source)
        red, nir = s.band(s.red), s.band(s.nir)
        # red band inside 600-700 nm, NIR inside 760-900 nm (common practice definition of the regions)
        assert 600 <= red.centre_nm <= 700 and 760 <= nir.centre_nm <= 900
    assert set(list_sensors()) == {"landsat-5-tm", "landsat-7-etm", "landsat-8-oli", "landsat-9-oli",
                                   "sentinel-2a-msi", "sentinel-2b-msi"}


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


def test_sensor_response_uses_the_band():
    s = get_sensor("sentinel-2a-msi")
    wl = np.array([664.6, 664.6 + 15.5])
    np.testing.assert_allclose(s.response("B4", wl), [1.0, 0.5])


def test_tabulated_sensor_centroid_fwhm_and_interpolation():
    wl = np.arange(600.0, 721.0, 10.0)
    tri = np.clip(1 - np.abs(wl - 660.0) / 40.0, 0, None)  # triangle, half width 40 nm at the base
    box = ((wl >= 630) & (wl <= 700)).astype(float) * 7.0  # any positive scale, divided by max
    s = tabulated_sensor("toy", wl, np.vstack([tri, box]), ["T", "Q"], red="T", nir="Q")
    # symmetric table -> centroid = centre of symmetry; triangle FWHM = half its base width (geometry)
    assert s.band("T").centre_nm == pytest.approx(660.0)
    assert s.band("T").fwhm_nm == pytest.approx(40.0)
    assert s.band("Q").centre_nm == pytest.approx(665.0)
    # response is linear interpolation of the table, zero outside (np.interp reference)
    x = np.array([590.0, 633.0, 655.5, 800.0])
    np.testing.assert_allclose(s.response("T", x), np.interp(x, wl, tri, left=0, right=0))
    np.testing.assert_allclose(s.response("Q", x), np.interp(x, wl, box / 7.0, left=0, right=0))


def test_band_and_sensor_validation():
    with pytest.raises(InputError, match="fwhm"):
        Band("B1", 500.0, 0.0)
    with pytest.raises(InputError, match="unique"):
        Sensor("x", "x", (Band("B1", 500.0, 10.0), Band("B1", 600.0, 10.0)), "test")
    with pytest.raises(InputError, match="red band"):
        Sensor("x", "x", (Band("B1", 500.0, 10.0),), "test", red="B3")
    with pytest.raises(InputError, match="twice"):
        get_sensor("landsat-8-oli").select(["B4", "B4"])
