"""Tests of the published cross-sensor band adjustments (unmix.sensors.adjustments, unmix.cube.harmonise).

The coefficients are typed here again from the publications (Roy et al. 2016 Table 2, OLS ETM+ to OLI;
Claverie et al. 2018 / HLS v1.4 user guide, MSI to OLI; both from memory as widely quoted), so a
transcription slip in either place fails the test.
"""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr

from unmix.cube.harmonise import adjust_to_oli
from unmix.errors import InputError, UnknownNameError
from unmix.sensors.adjustments import adjust, adjustment_for

ROLES = ["blue", "green", "red", "nir", "swir1", "swir2"]
ROY_SLOPE = [0.8474, 0.8483, 0.9047, 0.8462, 0.8937, 0.9071]  # Roy et al. 2016, Table 2 (OLS)
ROY_OFFSET = [0.0003, 0.0088, 0.0061, 0.0412, 0.0254, 0.0172]
HLS_SLOPE = [0.9778, 1.0053, 0.9765, 0.9983, 0.9987, 1.0030]  # HLS v1.4 (Claverie et al. 2018)
HLS_OFFSET = [-0.0040, -0.0009, 0.0009, -0.0001, -0.0011, -0.0012]


@pytest.mark.parametrize("sensor, slope, offset", [("landsat-7-etm", ROY_SLOPE, ROY_OFFSET),
                                                   ("sentinel-2a-msi", HLS_SLOPE, HLS_OFFSET),
                                                   ("sentinel-2b-msi", HLS_SLOPE, HLS_OFFSET)])
def test_adjustment_equals_the_published_linear_transformation(sensor, slope, offset):
    x = np.random.default_rng(0).uniform(0.0, 0.6, (50, 6))
    np.testing.assert_allclose(adjust(x, sensor, ROLES), x * np.array(slope) + np.array(offset), rtol=0, atol=1e-12)


def test_oli_is_left_alone_and_unknown_sensors_refused():
    x = np.full(6, 0.2)
    np.testing.assert_array_equal(adjust(x, "landsat-8-oli", ROLES), x)
    assert adjustment_for("landsat-9-oli") is None
    with pytest.raises(UnknownNameError, match="landsat-5-tm"):
        adjust(x, "landsat-5-tm", ROLES)


def test_cube_adjustment_per_date_and_sensor_coordinates():
    data = np.random.default_rng(1).uniform(0.02, 0.5, (3, 6, 4, 5)).astype(np.float32)
    cube = xr.DataArray(data, dims=("time", "band", "y", "x"),
                        coords={"band": ROLES, "sensor": ("time", ["landsat-7-etm", "landsat-8-oli",
                                                                   "sentinel-2a-msi"])}).chunk({"time": 1})
    out = adjust_to_oli(cube)
    assert out.chunks is not None  # stays lazy
    v = out.values
    np.testing.assert_allclose(v[0], data[0] * np.array(ROY_SLOPE)[:, None, None] + np.array(ROY_OFFSET)[:, None, None],
                               rtol=1e-6)
    np.testing.assert_array_equal(v[1], data[1])
    np.testing.assert_allclose(v[2], data[2] * np.array(HLS_SLOPE)[:, None, None] + np.array(HLS_OFFSET)[:, None, None],
                               rtol=1e-6)
    assert out["sensor"].values.tolist() == ["landsat-8-oli"] * 3
    assert out["observed_sensor"].values.tolist() == ["landsat-7-etm", "landsat-8-oli", "sentinel-2a-msi"]
    assert "doi:10.1016/j.rse.2015.12.024" in out.attrs["band_adjustments"]
    with pytest.raises(InputError, match="sensor"):
        adjust_to_oli(cube.drop_vars("sensor"))
