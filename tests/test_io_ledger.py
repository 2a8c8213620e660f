"""Tests of the date ledger (unmix.cube.ledger, unmix.io.ledger): CSV <-> Dataset <-> NetCDF product.

References outside the package: Python's ``csv`` module reads the CSV, the ``netCDF4`` library reads the
product's variables directly; the ledger Dataset built here is the third copy. Each check names which
copy it reads.
"""

from __future__ import annotations

import csv
import datetime as dt

import netCDF4
import numpy as np
import pytest
import xarray as xr

from unmix.cube.ledger import build_ledger, mark_unused
from unmix.errors import InputError, OutputExistsError, ShapeError
from unmix.io.ledger import ledger_from_product, ledger_variables, read_ledger_csv, write_ledger_csv
from unmix.io.products import open_product, write_netcdf

BANDS = ["red", "nir", "swir1"]


def _ledger(n=6, seed=0):
    rng = np.random.default_rng(seed)
    t = (np.datetime64("2004-12-28") + np.arange(n) * 61).astype("datetime64[ns]")
    valid = rng.uniform(0, 1, n)
    valid[1] = np.nan  # not known
    gain = rng.normal(1, 0.05, (n, 3))
    gain[2, 1] = np.nan
    reasons = [""] * n
    reasons[3] = "outside day-of-year window 335-60"
    reasons[4] = 'valid share 0.02, below "0.1"; shift, large'  # quotes and commas survive CSV quoting
    return build_ledger(t, sensor=["landsat-7-etm", "landsat-8-oli"] * (n // 2), product=[f"scene_{i}" for i in range(n)],
                        valid_share=valid, shift_y=rng.normal(0, 0.3, n), shift_x=rng.normal(0, 0.3, n),
                        shift_sd=rng.uniform(0.05, 0.2, n), bands=BANDS, gain=gain,
                        offset=rng.normal(0, 0.01, (n, 3)), r2=rng.uniform(0.8, 1, (n, 3)), reason=reasons)


def _same_float(a, b):
    np.testing.assert_array_equal(np.asarray(a, np.float32), np.asarray(b, np.float32))


def test_ledger_variables_have_cf_attributes_and_used_follows_reasons():
    led = _ledger()
    assert led["used"].values.tolist() == [True, True, True, False, False, True]
    assert led["shift_x"].attrs["units"] == "pixel" and led["gain"].dims == ("time", "band")
    ref = [dt.date.fromisoformat(str(t)[:10]).timetuple().tm_yday for t in led.time.values]  # Python datetime
    assert led["doy"].values.tolist() == ref
    with pytest.raises(ShapeError):
        build_ledger(led.time.values, valid_share=[0.5])
    with pytest.raises(InputError, match="band names"):
        build_ledger(led.time.values, gain=np.ones((6, 3)))


def test_csv_holds_the_ledger_values_as_numbers(tmp_path):
    led = _ledger()
    path = write_ledger_csv(led, tmp_path / "dates.csv")
    with open(path, newline="", encoding="utf-8") as fh:  # Python csv module
        rows = list(csv.DictReader(fh))
    assert list(rows[0]) == ["date", "doy", "sensor", "product", "valid_share", "shift_y", "shift_x", "shift_sd",
                             "gain_red", "gain_nir", "gain_swir1", "offset_red", "offset_nir", "offset_swir1",
                             "r2_red", "r2_nir", "r2_swir1", "used", "reason"]
    assert [r["date"] for r in rows] == [str(t)[:10] for t in led.time.values]  # CSV vs Dataset
    _same_float([float(r["valid_share"]) if r["valid_share"] else np.nan for r in rows], led.valid_share.values)
    _same_float([[float(r[f"gain_{b}"]) if r[f"gain_{b}"] else np.nan for b in BANDS] for r in rows], led.gain.values)
    _same_float([float(r["shift_sd"]) for r in rows], led.shift_sd.values)  # CSV vs Dataset
    assert [r["reason"] for r in rows] == led.reason.values.tolist()
    assert [r["used"] for r in rows] == ["true", "true", "true", "false", "false", "true"]
    assert rows[1]["valid_share"] == "" and rows[2]["gain_nir"] == ""  # NaN as an empty cell


def test_csv_round_trip_gives_the_same_dataset(tmp_path):
    led = _ledger()
    back = read_ledger_csv(write_ledger_csv(led, tmp_path / "dates.csv"))
    xr.testing.assert_identical(back, led)  # the Dataset read from the CSV vs the one written
    with pytest.raises(OutputExistsError):
        write_ledger_csv(led, tmp_path / "dates.csv")
    write_ledger_csv(mark_unused(led, ["", "", "", "", "", "cloud"]), tmp_path / "dates.csv", overwrite=True)
    assert not read_ledger_csv(tmp_path / "dates.csv").used.values[5]


def test_a_ledger_with_few_parts_round_trips(tmp_path):
    led = build_ledger(np.array(["2001-01-01T10:30:00"], "datetime64[ns]"), valid_share=[0.5])
    path = write_ledger_csv(led, tmp_path / "d.csv")
    assert path.read_text().splitlines()[1].startswith("2001-01-01T10:30:00,1,0.5,")  # Python text read
    xr.testing.assert_identical(read_ledger_csv(path), led)


@pytest.mark.parametrize("complevel", [0, 1])
def test_ledger_in_a_product_agrees_with_the_csv_and_the_dataset(tmp_path, complevel):
    led = _ledger()
    csv_path = write_ledger_csv(led, tmp_path / "dates.csv")
    product = xr.Dataset({"fraction": (("time", "y", "x"), np.zeros((6, 2, 3), np.float32))},
                         coords={"time": led.time.values, "y": [15.0, 5.0], "x": [5.0, 15.0, 25.0]})
    product = product.merge(ledger_variables(led))
    nc_path = write_netcdf(product, tmp_path / "fractions.nc", complevel=complevel)
    with netCDF4.Dataset(nc_path) as nc:  # the netCDF4 library, not xarray
        assert list(nc["date_reason"][:]) == led.reason.values.tolist()  # NetCDF vs Dataset
        assert list(nc["date_sensor"][:]) == led.sensor.values.tolist()
        np.testing.assert_array_equal(nc["date_used"][:], led.used.values.astype(np.int8))
        assert nc["date_used"].flag_meanings == "not_used used"
        _same_float(np.ma.filled(nc["date_gain"][:].astype(np.float32), np.nan), led.gain.values)
        assert nc["date_gain"].dimensions == ("time", "ledger_band")
        assert list(nc["ledger_band"][:]) == BANDS
    back = ledger_from_product(open_product(nc_path))
    xr.testing.assert_identical(back, led)  # NetCDF product vs Dataset
    xr.testing.assert_identical(back, read_ledger_csv(csv_path))  # NetCDF product vs CSV


def test_ledger_on_its_own_dimension_beside_fewer_product_dates(tmp_path):
    led = _ledger()
    used = led.time.values[led.used.values]
    product = xr.Dataset({"fraction": (("time", "y", "x"), np.zeros((used.size, 2, 3), np.float32))},
                         coords={"time": used, "y": [15.0, 5.0], "x": [5.0, 15.0, 25.0]})
    product = product.merge(ledger_variables(led, dim="ledger_time"))
    nc_path = write_netcdf(product, tmp_path / "trends.nc")
    opened = open_product(nc_path)
    assert opened.sizes["time"] == 4 and opened.sizes["ledger_time"] == 6  # netCDF4 dims via xarray
    back = ledger_from_product(opened)
    np.testing.assert_array_equal(back.time.values, led.time.values)
    xr.testing.assert_equal(back.drop_vars("time"), led.drop_vars("time"))


def test_bad_ledger_files_name_line_and_column(tmp_path):
    path = tmp_path / "d.csv"
    path.write_text("date,doy,valid_share,used,reason\n2001-01-01,1,half,true,\n")
    with pytest.raises(InputError, match="line 2 column valid_share"):
        read_ledger_csv(path)
    path.write_text("date,doy,used,reason\n2001-01-01,1,maybe,\n")
    with pytest.raises(InputError, match="line 2 column used"):
        read_ledger_csv(path)
    path.write_text("when,what\n")
    with pytest.raises(InputError, match="not a date ledger"):
        read_ledger_csv(path)
    with pytest.raises(InputError, match="no date ledger"):
        ledger_from_product(xr.Dataset({"a": ("time", [1.0])}))


def test_mark_unused_joins_reasons_and_aligns_by_date():
    led = _ledger()
    why = xr.DataArray(["cloud"], dims="time", coords={"time": led.time.values[3:4]})
    out = mark_unused(led, why)
    assert out.reason.values[3] == "outside day-of-year window 335-60; cloud"
    assert out.used.values.tolist() == led.used.values.tolist()
    out = mark_unused(led, ["late", "", "", "", "", ""])
    assert out.used.values.tolist() == [False, True, True, False, False, True]


def test_find_ledger_in_a_product_a_folder_and_a_stack(tmp_path, make_netcdf_stack):
    from unmix.io.ledger import find_ledger

    led = _ledger()
    product = xr.Dataset({"fraction": (("time", "y", "x"), np.zeros((6, 2, 3), np.float32))},
                         coords={"time": led.time.values, "y": [15.0, 5.0], "x": [5.0, 15.0, 25.0]})
    folder = tmp_path / "out"
    folder.mkdir()
    nc_path = write_netcdf(product.merge(ledger_variables(led)), folder / "fractions.nc")
    xr.testing.assert_identical(find_ledger(nc_path), led)  # the file itself
    xr.testing.assert_identical(find_ledger(folder), led)  # a product folder: its fractions.nc
    (folder / "fractions.nc").unlink()
    write_ledger_csv(led, folder / "dates.csv")
    xr.testing.assert_identical(find_ledger(folder), led)  # no product left: the folder's CSV
    stack = make_netcdf_stack(name="stack.nc").files[0]  # an input stack carries no ledger
    assert find_ledger(stack) is None
