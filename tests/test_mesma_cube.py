"""Tests of the MESMA cube layer (unmix.cube.mesma): lazy (dask) equals eager, errors."""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr
from _mesma_helpers import (
    hand_bundles_fixture,  # noqa: F401  (registers the "hand_bundles" fixture)
    make_scene,
)

from unmix.errors import BandMismatchError, InputError
from unmix.mesma import mesma

# --------------------------------------------------------------------------------------------
# cube layer


def test_mesma_cube_lazy_equals_eager(hand_bundles):
    dask = pytest.importorskip("dask")
    from unmix.cube.mesma import mesma_cube

    rng = np.random.default_rng(11)
    x, _, _ = make_scene(rng, hand_bundles, np.zeros(6), 3 * 5 * 4)
    arr = x.reshape(3, 5, 4, 6).transpose(0, 3, 1, 2).astype(np.float32)  # (time, band, y, x)
    arr[1, 0, 2, 2] = np.nan
    cube = xr.DataArray(arr, dims=("time", "band", "y", "x"),
                        coords={"time": np.array(["2020-01-01", "2021-01-01", "2022-01-01"], "datetime64[ns]"),
                                "band": list("BGRNST"), "y": np.arange(5), "x": np.arange(4)},
                        attrs={"crs_wkt": "EPSG:32633"})
    lazy = mesma_cube(cube.chunk({"time": 1, "y": 2, "band": 3}), hand_bundles, shade=np.zeros(6))
    assert all(isinstance(lazy[v].data, dask.array.Array) for v in ("fractions", "members", "rmse", "unmodelled"))
    eager = mesma_cube(cube, hand_bundles, shade=np.zeros(6))
    assert not isinstance(eager.fractions.data, dask.array.Array)
    computed = lazy.compute()
    for v in ("fractions", "members", "rmse", "unmodelled"):
        xr.testing.assert_identical(computed[v], eager[v])
    assert computed.fractions.dims == ("time", "endmember", "y", "x")
    assert computed.members.dims == ("time", "class", "y", "x") and computed.members.dtype == np.int16
    assert computed.fractions.dtype == np.float32
    assert list(computed.endmember.values) == ["green", "dry", "soil", "shade"]
    assert list(computed["class"].values) == ["green", "dry", "soil"]
    assert computed.attrs["n_models"] == 2 + 1 + 2 + 2 + 4 + 2 + 4
    assert computed.fractions.attrs["crs_wkt"] == "EPSG:32633"
    # the kernel on the same pixels gives the same answer
    ref = mesma(arr.transpose(0, 2, 3, 1), hand_bundles, shade=np.zeros(6))
    np.testing.assert_array_equal(computed.members.transpose("time", "y", "x", "class").values, ref.members)
    np.testing.assert_array_equal(computed.fractions.transpose("time", "y", "x", "endmember").values, ref.fractions)
    assert np.isnan(computed.rmse.values[1, 2, 2]) and not computed.unmodelled.values[1, 2, 2]


def test_mesma_cube_masks_and_counts_implausible_reflectance(hand_bundles):
    from unmix.cube.mesma import mesma_cube

    rng = np.random.default_rng(12)
    x, _, _ = make_scene(rng, hand_bundles, np.zeros(6), 2 * 3 * 4)
    arr = x.reshape(2, 3, 4, 6).transpose(0, 3, 1, 2).astype(np.float32)  # (time, band, y, x)
    arr[1, 3, 0, 0] = 1e30  # undeclared fill value
    arr[1, 0, 2, 3] = -3.0  # far below any surface reflectance
    cube = xr.DataArray(arr, dims=("time", "band", "y", "x"),
                        coords={"time": np.array(["2020-01-01", "2021-01-01"], "datetime64[ns]"),
                                "band": list("BGRNST")}).chunk({"time": 1, "y": 2})
    ds = mesma_cube(cube, hand_bundles, shade=np.zeros(6)).compute()
    # counts against a numpy count of the same rule (any band outside -0.5..2)
    outside = ((arr < -0.5) | (arr > 2.0)).any(axis=1)
    np.testing.assert_array_equal(ds["implausible_count"].values, outside.sum(axis=(1, 2)))
    assert np.isnan(ds["fractions"].values[1, :, 0, 0]).all() and np.isnan(ds["fractions"].values[1, :, 2, 3]).all()
    assert not ds["unmodelled"].values[1, 0, 0]  # no data, not "no model fits"


def test_mesma_cube_errors(hand_bundles):
    from unmix.cube.mesma import mesma_cube

    cube = xr.DataArray(np.zeros((1, 5, 2, 2), np.float32), dims=("time", "band", "y", "x"))
    with pytest.raises(BandMismatchError):
        mesma_cube(cube, hand_bundles)
    with pytest.raises(InputError, match="missing"):
        mesma_cube(cube.isel(time=0), hand_bundles)
