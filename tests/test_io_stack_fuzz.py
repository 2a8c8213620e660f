"""Deterministic fuzzing of the GeoTIFF stack reader: damaged tags and bytes give GDAL's values or one UnmixError.

Small GeoTIFFs in the layouts the direct (tifffile) path reads and a few it leaves to GDAL are
written with rasterio, then each case changes one thing: a field of one directory entry (tag
code, field type, count, value or value offset; entries located with tifffile), a few bytes of the
header or of the data, or the file's length. Reading the damaged file through ``open_stack`` +
compute must either equal GDAL's (rasterio's) read of the same file decoded the same way
(reference: :func:`_stack_helpers.gdal_decoded`), or raise one :class:`~unmix.errors.UnmixError`:
no other exception type, and never values GDAL does not give. The cases are drawn from a fixed
seed, so every run tries the same ones.
"""

from __future__ import annotations

import struct
import warnings

import numpy as np
import pytest
from _stack_helpers import gdal_decoded, tag_entries, write_tif

from unmix.errors import UnmixError
from unmix.io.stack import open_stack

# (dtype, creation options); 3 bands of 21 x 35 pixels, not multiples of the 16-pixel blocks
LAYOUTS = [
    ("int16", dict(tiled=True, blockxsize=16, blockysize=16, compress="deflate", predictor=2)),
    ("uint16", dict(tiled=False, blockysize=5)),
    ("float32", dict(tiled=True, blockxsize=16, blockysize=16, compress="deflate", predictor=3)),
    ("int16", dict(tiled=True, blockxsize=16, blockysize=16, interleave="band")),
    ("uint16", dict(tiled=False, blockysize=4, compress="deflate", predictor=2, interleave="band")),
    ("float32", dict(tiled=False, blockysize=6, compress="deflate")),
    ("int16", dict(tiled=True, blockxsize=16, blockysize=16, compress="lzw", predictor=2)),
    ("uint16", dict(tiled=True, blockxsize=16, blockysize=16, compress="packbits")),  # a GDAL-path layout
]
CASES_PER_LAYOUT = 40
CODES = [254, 256, 257, 258, 259, 262, 266, 273, 274, 277, 278, 279, 284, 317, 322, 323, 324, 325, 338, 339,
         42113, 65000]
NUMBERS = [0, 1, 2, 3, 4, 5, 7, 8, 16, 255, 32946, 65535, 2**31 - 1, 2**32 - 1]


def _base_file(folder, k, dtype, options):
    rng = np.random.default_rng(k)
    if dtype == "float32":
        data = rng.normal(0.2, 0.3, size=(3, 21, 35)).astype(np.float32)
        nodata = -1.0
    else:
        data = rng.integers(0, 5000, size=(3, 21, 35)).astype(dtype)
        nodata = 0
    data[:, 2, 3] = nodata
    folder.mkdir()
    return write_tif(folder / "scene_2020-01-01.tif", data, nodata=nodata, **options).read_bytes()


def _number(rng):
    return int(rng.choice(NUMBERS)) if rng.random() < 0.7 else int(rng.integers(0, 300))


def _mutate(raw: bytes, entries: dict, big: bool, rng) -> tuple[bytes, str]:
    """One change to a copy of ``raw``, and a description of it."""
    buf = bytearray(raw)
    kind = rng.choice(["code", "type", "count", "value", "bytes-header", "bytes-any", "truncate"],
                      p=[0.12, 0.1, 0.14, 0.24, 0.15, 0.15, 0.1])
    code = int(rng.choice(sorted(entries)))
    at = entries[code][0]
    count_fmt, value_at = ("<Q", 12) if big else ("<I", 8)
    if kind == "code":
        new = int(rng.choice(CODES))
        struct.pack_into("<H", buf, at, new)
        return bytes(buf), f"tag {code} renamed {new}"
    if kind == "type":
        new = int(rng.integers(0, 19))
        struct.pack_into("<H", buf, at + 2, new)
        return bytes(buf), f"tag {code} type {new}"
    if kind == "count":
        new = _number(rng)
        struct.pack_into(count_fmt, buf, at + 4, new)
        return bytes(buf), f"tag {code} count {new}"
    if kind == "value":
        new = _number(rng)
        fmt = "<H" if new < 65536 and rng.random() < 0.5 else "<I"
        struct.pack_into(fmt, buf, at + value_at, new)
        return bytes(buf), f"tag {code} value {new} ({fmt})"
    if kind == "truncate":
        n = int(rng.integers(8, len(buf)))
        return bytes(buf[:n]), f"cut to {n} bytes"
    end = min(len(buf), 512) if kind == "bytes-header" else len(buf)
    spots = rng.integers(0, end, size=int(rng.integers(1, 9)))
    for spot in spots:
        buf[spot] = int(rng.integers(0, 256))
    return bytes(buf), f"{kind} at {sorted(int(s) for s in spots)}"


@pytest.mark.parametrize("k", range(len(LAYOUTS)), ids=[f"{d}-{i}" for i, (d, _) in enumerate(LAYOUTS)])
def test_damaged_files_give_gdal_values_or_one_unmix_error(tmp_path, k):
    dtype, options = LAYOUTS[k]
    raw = _base_file(tmp_path / "base", k, dtype, options)
    entries, big = tag_entries(tmp_path / "base" / "scene_2020-01-01.tif")
    rng = np.random.default_rng(1000 + k)
    outcomes = {"values": 0, "error": 0}
    for case in range(CASES_PER_LAYOUT):
        damaged, what = _mutate(raw, entries, big, rng)
        folder = tmp_path / f"case{case}"
        folder.mkdir()
        path = folder / "scene_2020-01-01.tif"
        path.write_bytes(damaged)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # rasterio's NotGeoreferencedWarning for damaged geokeys
            try:
                got = open_stack([path], chunks=16).compute(scheduler="sync").values[0]
            except UnmixError as exc:
                assert "\n" not in str(exc), (what, str(exc))  # one line for the CLI
                outcomes["error"] += 1
                continue
            try:
                ref = gdal_decoded(path)
            except Exception as exc:  # noqa: BLE001
                pytest.fail(f"{what}: the stack gave values but GDAL cannot read the file ({exc})")
        np.testing.assert_array_equal(got, ref, err_msg=what)  # reference: GDAL's read, decoded alike
        outcomes["values"] += 1
    assert outcomes["values"] and outcomes["error"]  # the mutations reach both outcomes
