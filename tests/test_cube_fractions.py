"""Tests of unmix.cube.fractions.unmix_cube over lazy cubes.

References outside the lazy pipeline: the fractions the fixture mixed the pixels with (conftest.py),
numpy's least squares (``np.linalg.lstsq``) for the unconstrained model, the eager kernel on plain
arrays, and a dask.distributed LocalCluster run against the threaded scheduler.
"""

from __future__ import annotations

import dask
import dask.array
import numpy as np
import pytest
import xarray as xr
from conftest import BANDS

from unmix.cube import unmix_cube
from unmix.errors import BandMismatchError, RankError
from unmix.io.stack import open_stack
from unmix.solvers import estimate_fractions


@pytest.fixture
def stack(make_stack):
    info = make_stack()
    cube = open_stack(info.folder, band_names=BANDS, scale=1e-4, chunks=16)
    return info, cube


def test_lazy_until_computed_and_equal_to_eager_kernel(stack):
    info, cube = stack
    ds = unmix_cube(cube, info.endmembers, names=info.names)
    for name in ("fractions", "rmse", "valid_count"):
        assert dask.is_dask_collection(ds[name]), name
    assert ds["fractions"].dims == ("time", "endmember", "y", "x")
    assert ds["fractions"].chunks[0] == (1,) * len(info.dates)
    assert ds["fractions"].dtype == np.float32 and ds["rmse"].dtype == np.float32
    # eager: the kernel on the whole in-memory array, band last
    eager_f, eager_r = estimate_fractions(np.moveaxis(info.reflectance, 1, -1), info.endmembers)
    np.testing.assert_array_equal(ds["fractions"].values, np.moveaxis(eager_f, -1, 1))
    np.testing.assert_array_equal(ds["rmse"].values, eager_r)


def test_recovers_mixing_fractions_and_marks_nodata(stack):
    info, cube = stack
    ds = unmix_cube(cube, info.endmembers, names=info.names).compute()
    f = ds["fractions"].values
    nodata = info.nodata_mask  # (t, y, x), pixels with a nodata band, set by the fixture
    assert np.isnan(f[np.broadcast_to(nodata[:, None], f.shape)]).all()
    assert np.isnan(ds["rmse"].values[nodata]).all()
    ok = np.broadcast_to(~nodata[:, None], f.shape)
    # truth: the Dirichlet fractions the fixture mixed with; int16 storage (1e-4 quantum) limits agreement
    np.testing.assert_allclose(f[ok], info.fractions[ok], atol=3e-3)
    np.testing.assert_allclose(f.sum(axis=1)[~nodata], 1.0, atol=1e-5)  # FCLS: sum to one
    assert (f[ok] >= -1e-7).all()
    # valid_count: dates without a nodata band, counted with numpy
    np.testing.assert_array_equal(ds["valid_count"].values, (~nodata).sum(axis=0))
    assert ds["valid_count"].dtype == np.int32


def test_unconstrained_matches_numpy_lstsq(stack):
    info, cube = stack
    sub = cube.isel(time=[2], y=slice(0, 6), x=slice(0, 5))
    ds = unmix_cube(sub, info.endmembers, names=info.names, constraint="none")
    x = np.moveaxis(sub.values[0], 0, -1).reshape(-1, len(BANDS)).astype(np.float64)
    ref, *_ = np.linalg.lstsq(info.endmembers.T, x.T, rcond=None)  # numpy reference, per pixel column
    got = np.moveaxis(ds["fractions"].values[0], 0, -1).reshape(-1, len(info.names))
    np.testing.assert_allclose(got, ref.T, atol=2e-5)


def test_int16_with_nodata_equals_float_input(make_stack):
    ints = make_stack(storage="int16", folder="ints")
    floats = make_stack(storage="float32", folder="floats")
    a = unmix_cube(open_stack(ints.folder, band_names=BANDS, scale=1e-4), ints.endmembers, names=ints.names)
    b = unmix_cube(open_stack(floats.folder, band_names=BANDS), floats.endmembers, names=floats.names)
    fa, fb = a["fractions"].values, b["fractions"].values
    np.testing.assert_array_equal(np.isnan(fa), np.isnan(fb))
    # int16 rounding moves reflectance by <= 5e-5, which moves fractions by well under 3e-3
    np.testing.assert_allclose(fa, fb, atol=3e-3)


def test_local_cluster_equals_threaded_bit_for_bit(stack):
    import distributed

    info, cube = stack
    ds = unmix_cube(cube, info.endmembers, names=info.names)
    threaded = ds["fractions"].data.compute(scheduler="threads")
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=False,
                                  dashboard_address=":0") as cluster, distributed.Client(cluster) as client:
        clustered = client.compute(ds["fractions"].data).result()
    np.testing.assert_array_equal(clustered, threaded)


def test_attributes_and_spectra(stack):
    info, cube = stack
    ds = unmix_cube(cube, info.endmembers, names=info.names, constraint="fcls")
    assert ds.attrs["constraint"] == "fcls"
    assert ds.attrs["endmember_names"] == ", ".join(info.names)
    assert list(ds["endmember"].values) == list(info.names)
    np.testing.assert_allclose(ds["endmember_spectra"].values, info.endmembers, rtol=1e-6)
    assert list(ds["endmember_spectra"]["band"].values) == list(BANDS)
    assert ds["fractions"].attrs["units"] == "1" and "long_name" in ds["rmse"].attrs
    assert ds["fractions"].attrs["crs_wkt"] == cube.attrs["crs_wkt"]


def test_endmembers_as_dataarray_are_matched_by_band_name(stack):
    info, cube = stack
    shuffled = list(reversed(BANDS))
    em = xr.DataArray(info.endmembers[:, ::-1], dims=("endmember", "band"), coords={"band": shuffled})
    a = unmix_cube(cube, em, names=info.names)["fractions"].values
    b = unmix_cube(cube, info.endmembers, names=info.names)["fractions"].values
    np.testing.assert_array_equal(a, b)


def test_rank_and_band_errors_are_raised_before_computing(stack):
    info, cube = stack
    rng = np.random.default_rng(0)
    too_many = rng.uniform(0.05, 0.6, size=(8, len(BANDS)))  # 8 > 6 bands + 1 (sum-to-one row)
    with pytest.raises(RankError):
        unmix_cube(cube, too_many, names=[f"e{i}" for i in range(8)])
    with pytest.raises(BandMismatchError):
        unmix_cube(cube, info.endmembers[:, :5], names=info.names)


def test_numpy_backed_band_chunked_and_dask_cubes_give_identical_products(stack):
    # the dask path (one task per chunk, band moved last as a view) against the in-memory path
    # (xarray.apply_ufunc) and against a cube whose bands are split over chunks (rejoined first)
    info, cube = stack
    lazy = unmix_cube(cube, info.endmembers, names=info.names).compute()
    eager = unmix_cube(cube.compute(), info.endmembers, names=info.names)
    split = unmix_cube(cube.chunk({"band": 2, "y": 10}), info.endmembers, names=info.names).compute()
    for other in (eager, split):
        for name in ("fractions", "rmse", "valid_count"):
            np.testing.assert_array_equal(lazy[name].values, other[name].values, err_msg=name)
            assert lazy[name].dtype == other[name].dtype and lazy[name].dims == other[name].dims
        assert set(lazy.coords) == set(other.coords)
    # valid_count: dates on which numpy finds every fraction of the pixel finite
    f = lazy["fractions"].values
    np.testing.assert_array_equal(lazy["valid_count"].values, np.isfinite(f).all(axis=1).sum(axis=0))


def test_local_cluster_equals_threaded_for_rmse_and_valid_count(stack):
    import distributed

    info, cube = stack
    ds = unmix_cube(cube, info.endmembers, names=info.names)
    threaded = dask.compute(ds["rmse"].data, ds["valid_count"].data, scheduler="threads")
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=False,
                                  dashboard_address=":0") as cluster, distributed.Client(cluster) as client:
        clustered = client.gather(client.compute([ds["rmse"].data, ds["valid_count"].data]))
    for a, b in zip(clustered, threaded):
        np.testing.assert_array_equal(a, b)


@pytest.mark.parametrize("chunks", [None, (1, 7, 9)])
def test_finite_mean_equals_numpy_nanmean(chunks):
    # reference: numpy.nanmean in float64 (general-purpose library)
    from unmix.cube.summary import finite_mean

    rng = np.random.default_rng(3)
    x = rng.random((3, 20, 25)).astype(np.float32)
    x[rng.random(x.shape) < 0.2] = np.nan
    x[0, 0, 0] = np.inf
    da = xr.DataArray(x)
    if chunks:
        da = da.chunk(dict(zip(da.dims, chunks)))
    finite = np.where(np.isfinite(x), x, np.nan).astype(np.float64)
    assert float(finite_mean(da)) == pytest.approx(np.nanmean(finite), rel=1e-12)
    empty = xr.DataArray(np.full((2, 3), np.nan, np.float32))
    assert np.isnan(float(finite_mean(empty.chunk({"dim_0": 1}) if chunks else empty)))


# ---------------------------------------------------------------- implausible reflectance is no data, counted
def _with_fill(info, cube, where):
    """The stack's float cube with undeclared fill values written at ``where`` [(t, b, y, x), value]."""
    data = info.reflectance.copy()
    for (t, b, y, x), value in where:
        data[t, b, y, x] = value
    return cube.copy(data=dask.array.from_array(data, chunks=cube.data.chunksize))


def test_implausible_reflectance_is_masked_and_counted_per_date(stack):
    info, cube = stack
    # an undeclared float fill (1e30, float32 max) and a value read without its scale (-9999)
    fills = [((1, 0, 3, 4), 1e30), ((1, 2, 8, 8), 3.4e38), ((2, 5, 0, 1), -9999.0), ((2, 5, 0, 2), 2.5)]
    bad_cube = _with_fill(info, cube, fills)
    ds = unmix_cube(bad_cube, info.endmembers, names=info.names)
    assert dask.is_dask_collection(ds["implausible_count"])
    f = ds["fractions"].values
    # count per date, computed here with numpy on the same array: any finite band outside -0.5..2
    data = bad_cube.values
    outside = ((data < -0.5) | (data > 2.0)).any(axis=1)  # (t, y, x); NaN compares False
    np.testing.assert_array_equal(ds["implausible_count"].values, outside.sum(axis=(1, 2)))
    assert ds["implausible_count"].values.tolist()[:3] == [0, 2, 2]
    assert np.isnan(f[np.broadcast_to(outside[:, None], f.shape)]).all()
    # every other pixel is exactly what the kernel gives on the untouched reflectance
    ref_f, _ = estimate_fractions(np.moveaxis(info.reflectance, 1, -1), info.endmembers)
    keep = np.broadcast_to(~outside[:, None], f.shape)
    np.testing.assert_array_equal(f[keep], np.moveaxis(ref_f, -1, 1)[keep])
    np.testing.assert_array_equal(ds["valid_count"].values, ((~info.nodata_mask) & ~outside).sum(axis=0))


def test_valid_range_none_screens_nothing_and_fcls_stays_on_the_simplex(stack):
    info, cube = stack
    bad_cube = _with_fill(info, cube, [((1, 0, 3, 4), 1e30)])
    ds = unmix_cube(bad_cube, info.endmembers, names=info.names, valid_range=None).compute()
    assert int(ds["implausible_count"].sum()) == 0
    f = ds["fractions"].values[1, :, 3, 4]
    assert np.isfinite(f).all() and (f >= 0).all() and (f <= 1).all()
    assert abs(float(f.sum()) - 1.0) <= 1e-6  # the FCLS kernel's guarantee for any finite input
    with pytest.raises(Exception, match="low < high"):
        unmix_cube(cube, info.endmembers, names=info.names, valid_range=(2.0, -0.5))
