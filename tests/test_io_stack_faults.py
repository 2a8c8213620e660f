"""Faults of GeoTIFF stacks: files changed after opening, odd or damaged headers, impossible dates.

Each case must end either in GDAL's values (rasterio's read of the same file, decoded as the
stack decodes) or in one :class:`~unmix.errors.UnmixError` whose message says what is wrong; never
in wrong values, a traceback of another type or a huge allocation. Files are written with
rasterio (GDAL's GTiff driver) and their tags edited in place (located with tifffile).
"""

from __future__ import annotations

import os
import struct
import tracemalloc

import numpy as np
import pytest
import rasterio
from _stack_helpers import gdal_decoded, patch_tag, tag_entries, write_tif

from unmix.errors import InputError, StackReadError
from unmix.io.stack import open_stack
from unmix.io.stack.geotiff import MAX_EDGE, _read_header


def _data(dtype="int16", shape=(3, 40, 36), seed=0):
    rng = np.random.default_rng(seed)
    return rng.integers(-2000, 9000, size=shape).astype(dtype)


def _stack_values(path, **kwargs):
    return open_stack([path], chunks=16, **kwargs).compute(scheduler="sync").values[0]


def _one_line(message):
    assert "\n" not in message and "previous exception" not in message.lower(), message


def test_file_rewritten_with_new_tiling_between_open_and_compute_is_an_error(tmp_path):
    path = write_tif(tmp_path / "scene_2020-05-06.tif", _data(), tiled=True, blockxsize=16, blockysize=16,
                     compress="deflate", predictor=2)
    cube = open_stack([path], chunks=16)
    assert _read_header(path).tiles is not None  # the direct (tifffile) path
    write_tif(path, _data(), tiled=True, blockxsize=32, blockysize=32)  # same values, new layout
    with pytest.raises(StackReadError, match=r"scene_2020-05-06\.tif was modified after the stack was opened") as err:
        cube.compute(scheduler="sync")
    _one_line(str(err.value))


def test_rewrite_keeping_size_and_mtime_is_caught_by_the_inode(tmp_path):
    path = write_tif(tmp_path / "scene_2020-05-06.tif", _data(), tiled=True, blockxsize=16, blockysize=16)
    cube = open_stack([path], chunks=16)
    st = os.stat(path)
    replacement = tmp_path / "other.tif"
    replacement.write_bytes(path.read_bytes())  # the same bytes in a new file (new inode) ...
    os.utime(replacement, ns=(st.st_atime_ns, st.st_mtime_ns))  # ... with the old modification time
    os.replace(replacement, path)
    with pytest.raises(StackReadError, match="modified after the stack was opened.*inode"):
        cube.compute(scheduler="sync")


@pytest.mark.parametrize("where", ["gdal-path", "qa-file"])
def test_gdal_path_and_quality_masks_check_the_file_too(tmp_path, where):
    folder, qa_folder = tmp_path / "stack", tmp_path / "qa"
    folder.mkdir()
    qa_folder.mkdir()
    path = write_tif(folder / "scene_2020-05-06.tif", _data(), tiled=True, blockxsize=16, blockysize=16,
                     compress="packbits")  # a layout GDAL reads
    qa = write_tif(qa_folder / "qa_2020-05-06.tif", np.zeros((1, 40, 36), np.uint8), tiled=True, blockxsize=16,
                   blockysize=16)
    assert _read_header(path).tiles is None
    cube = open_stack(folder, qa=qa_folder, chunks=16)
    target = path if where == "gdal-path" else qa
    with open(target, "ab") as fh:  # appended bytes: values unchanged, the file is another version
        fh.write(b"\0" * 10)
    with pytest.raises(StackReadError, match=rf"{target.name} was modified after the stack was opened \(size"):
        cube.compute(scheduler="sync")


def test_fill_order_2_is_read_as_gdal_reads_it(tmp_path):
    path = write_tif(tmp_path / "scene_2020-05-06.tif", _data(), tiled=False, blockysize=8)
    # Photometric (262) becomes FillOrder (266) = 2: the entries stay in ascending order
    patch_tag(path, 262, new_code=266, value=struct.pack("<H", 2))
    assert 266 in tag_entries(path)[0]
    assert _read_header(path).tiles is None  # not the direct path: GDAL decides what FillOrder 2 means
    np.testing.assert_array_equal(_stack_values(path), gdal_decoded(path))  # reference: GDAL's read


def test_predictor_tag_with_count_0_is_read_as_gdal_reads_it(tmp_path):
    path = write_tif(tmp_path / "scene_2020-05-06.tif", _data(), tiled=True, blockxsize=16, blockysize=16,
                     compress="deflate", predictor=2)
    patch_tag(path, 317, count=0)  # libtiff ignores a tag of the wrong count, with a warning
    assert _read_header(path).tiles is None
    np.testing.assert_array_equal(_stack_values(path), gdal_decoded(path))  # reference: GDAL's read


def test_unknown_tag_with_a_huge_count_is_read_as_gdal_reads_it(tmp_path):
    path = write_tif(tmp_path / "scene_2020-05-06.tif", _data(), tiled=True, blockxsize=16, blockysize=16,
                     compress="deflate")
    last = max(tag_entries(path)[0])  # the last entry becomes a private tag claiming 2^31 values
    patch_tag(path, last, new_code=65000, count=2**31)
    tracemalloc.start()
    try:
        values = _stack_values(path)
        peak = tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()
    assert peak < 64 * 2**20  # nothing near the 2^31 values the tag claims
    np.testing.assert_array_equal(values, gdal_decoded(path))  # reference: GDAL's read


def test_width_of_2_to_the_31_is_refused_without_allocating(tmp_path):
    path = write_tif(tmp_path / "scene_2020-05-06.tif", _data(shape=(2, 300, 500)), tiled=False, blockysize=1)
    patch_tag(path, 256, field_type=4, value=struct.pack("<I", 2**31 - 1))  # ImageWidth as LONG
    with rasterio.open(path) as src:
        assert src.width == 2**31 - 1  # GDAL opens the file as it claims to be
    tracemalloc.start()
    try:
        with pytest.raises(StackReadError, match=rf"{2**31 - 1} pixels .*more than the {MAX_EDGE}") as err:
            open_stack([path])
        peak = tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()
    assert peak < 64 * 2**20  # coordinates of 2^31 columns would take 16 GiB
    _one_line(str(err.value))


def test_more_strips_than_the_file_has_bytes_is_refused(tmp_path):
    path = write_tif(tmp_path / "scene_2020-05-06.tif", _data(), tiled=False, blockysize=1, compress="deflate")
    patch_tag(path, 257, field_type=4, value=struct.pack("<I", MAX_EDGE))  # ImageLength as LONG
    with rasterio.open(path) as src:
        assert src.height == MAX_EDGE  # GDAL opens it: 2^20 strips indexed in a file of a few kB
    with pytest.raises(StackReadError, match=rf"{MAX_EDGE} blocks of 1 x 36 but has only \d+ bytes") as err:
        open_stack([path])  # before a dask graph of 2^20 rows is built
    _one_line(str(err.value))


def test_unknown_compression_shows_gdal_s_message(tmp_path):
    path = write_tif(tmp_path / "scene_2020-05-06.tif", _data(), tiled=True, blockxsize=16, blockysize=16,
                     compress="deflate")
    patch_tag(path, 259, value=struct.pack("<H", 12345))
    with pytest.raises(StackReadError, match="missing codec of code 12345") as err:  # GDAL's own words
        _stack_values(path)
    _one_line(str(err.value))


def test_unsupported_predictor_shows_gdal_s_message_not_see_previous_exception(tmp_path):
    path = write_tif(tmp_path / "scene_2020-05-06.tif", _data(), tiled=True, blockxsize=16, blockysize=16,
                     compress="deflate", predictor=2)
    patch_tag(path, 317, value=struct.pack("<H", 7))
    assert _read_header(path).tiles is None
    with pytest.raises(StackReadError, match=r'"Predictor" value 7 not supported') as err:  # libtiff's words
        _stack_values(path)
    assert "scene_2020-05-06.tif (date 2020-05-06)" in str(err.value)
    _one_line(str(err.value))


@pytest.mark.parametrize("name, reason", [
    ("scene_2018-13-45.tif", "2018-13-45 in scene_2018-13-45.tif is not a valid date: month 13"),
    ("scene_2019-02-29.tif", "day 29 (month 2 of 2019 has 28 days)"),  # 2019 is no leap year (calendar)
    ("scene_1900-06-01.tif", "year 1900 is before 1972 (Landsat 1"),
    ("scene_2019366.tif", "day of year 366 (2019 has 365 days)"),
])
def test_impossible_dates_in_file_names_are_named(tmp_path, name, reason):
    path = write_tif(tmp_path / name, _data())
    with pytest.raises(InputError) as err:
        open_stack([path])
    assert reason in str(err.value) and "no date in the file name" not in str(err.value)


def test_years_after_next_year_are_named(tmp_path):
    import datetime as dt

    year = dt.date.today().year + 2
    path = write_tif(tmp_path / f"scene_{year}-01-01.tif", _data())
    with pytest.raises(InputError, match=rf"year {year} is after next year \({year - 1}\)"):
        open_stack([path])


def test_cli_reports_a_damaged_file_in_one_line(make_stack, make_library, tmp_path, capsys):
    from conftest import BANDS

    from unmix.cli.main import main

    info = make_stack()
    victim = sorted(info.folder.glob("*.tif"))[1]
    patch_tag(victim, 259, value=struct.pack("<H", 12345))
    code = main(["fractions", str(info.folder), "--library", str(make_library()), "--sensor", "landsat-8-oli",
                 "--band-names", ",".join(BANDS), "--scale", "0.0001", "--out", str(tmp_path / "out")])
    err = capsys.readouterr().err
    lines = [ln for ln in err.strip().splitlines() if ln and not ln.startswith("WARNING")]
    assert code == 2 and len(lines) == 1 and victim.name in lines[0] and "missing codec" in lines[0], err
