"""Tests of `unmix endmembers extract` and `unmix endmembers prune` on tiny files in tmp_path."""

from __future__ import annotations

import json

import numpy as np
import pytest
import rasterio
from affine import Affine

from unmix.cli.main import main
from unmix.io.library import read_library, read_shipped_library, shipped_library_path, write_library
from unmix.spectra import SpectralLibrary

BANDS = ["B2", "B3", "B4", "B5", "B6", "B7"]
NAMES = ["green_vegetation", "bright_soil", "water"]
DATES = ["2020-06-01", "2020-07-01", "2020-08-01"]
# (date index, row, column) of the one pure pixel of each endmember
PURE = {"green_vegetation": (1, 2, 3), "bright_soil": (0, 7, 1), "water": (2, 5, 8)}


@pytest.fixture()
def stack(tmp_path):
    """Three dated 6-band float32 GeoTIFFs (EPSG:32633, 30 m) of mixtures of shipped OLI spectra."""
    lib = read_shipped_library("demo_library_landsat-8-oli").select(NAMES)
    assert list(lib.band_names) == BANDS
    em = lib.spectra
    rng = np.random.default_rng(0)
    folder = tmp_path / "stack"
    folder.mkdir()
    ny, nx = 10, 12
    a = rng.dirichlet(np.ones(3) * 0.8, (len(DATES), ny, nx))
    # keep mixtures away from the vertices so the pure pixels are the only extremes
    a = 0.8 * a + 0.2 / 3
    for k, name in enumerate(NAMES):
        t, y, x = PURE[name]
        a[t, y, x] = np.eye(3)[k]
    cube = np.einsum("tyxk,kb->tbyx", a, em).astype(np.float32)
    cube[0, :, 0, 0] = np.nan  # no data
    transform = Affine(30.0, 0.0, 500000.0, 0.0, -30.0, 4500000.0)
    for t, d in enumerate(DATES):
        with rasterio.open(
            folder / f"scene_{d}.tif", "w", driver="GTiff", width=nx, height=ny, count=len(BANDS),
            dtype="float32", crs="EPSG:32633", transform=transform, nodata=np.nan,
        ) as dst:
            dst.write(cube[t])
    return folder, cube


def run(args, capsys):
    code = main(args)
    out = capsys.readouterr()
    return code, out.out, out.err


def extract_args(folder, out, *more):
    return ["endmembers", "extract", str(folder), "--sensor", "landsat-8-oli",
            "--band-names", ",".join(BANDS), "--out", str(out), *more]


@pytest.mark.parametrize("method", ["vca", "nfindr", "atgp", "ppi"])
def test_extract_writes_library_with_provenance(stack, tmp_path, capsys, method):
    folder, cube = stack
    out = tmp_path / "found.csv"
    code, stdout, err = run(
        extract_args(folder, out, "--method", method, "--count", "3",
                     "--library", str(shipped_library_path("demo_library")), "--max-angle", "3"),
        capsys,
    )
    assert code == 0, err
    assert len(stdout.strip().splitlines()) == 1 and "3 endmembers" in stdout
    lib = read_library(out)
    assert lib.band_names == tuple(BANDS) and lib.sensor == "landsat-8-oli"
    # noise-free pure pixels, matched one to one to the full-resolution library resampled to OLI
    assert sorted(lib.names) == sorted(NAMES)
    meta = json.loads(out.with_suffix(".json").read_text())
    assert meta["method"] == method and meta["count"] == 3 and meta["count_chosen_by"] == "given"
    assert meta["seed"] == 0 and len(meta["input_files"]) == 3
    for name in lib.names:
        entry = meta["spectra"][name]
        t, y, x = PURE[name]
        assert (entry["date"], entry["row"], entry["column"]) == (DATES[t], y, x)
        assert entry["matched"] is True and entry["angle_deg"] < 1e-3
        # the spectrum written is the pixel of that date (file values, float32 -> float64)
        np.testing.assert_allclose(lib.spectrum(name), cube[t, :, y, x], rtol=1e-6)
        # class taken from the reference library's sidecar
    assert dict(zip(lib.names, lib.classes))["bright_soil"] == "soil"


def test_extract_unmatched_are_flagged_and_auto_count(stack, tmp_path, capsys):
    folder, _ = stack
    out = tmp_path / "auto.csv"
    # a reference library of one decreasing ramp, unlike every endmember of the scene: nothing may
    # be named after it (two endmembers have no partner at all, the third is too far)
    wl = np.arange(400.0, 2501.0, 10.0)
    ref = write_library(SpectralLibrary(wl, np.linspace(0.6, 0.05, wl.size)[None, :], ("ramp",)),
                        tmp_path / "ramp.csv")
    code, _, err = run(
        extract_args(folder, out, "--method", "atgp", "--count", "auto", "--count-method", "hfc",
                     "--library", str(ref), "--max-angle", "5"),
        capsys,
    )
    assert code == 0, err
    lib = read_library(out)
    meta = json.loads(out.with_suffix(".json").read_text())
    assert meta["count_chosen_by"] == "hfc" and meta["count"] == len(lib)
    assert list(lib.names) == [f"endmember_{k + 1}" for k in range(len(lib))]
    assert all(meta["spectra"][n]["matched"] is False for n in lib.names)
    assert all(meta["spectra"][n]["nearest_library_spectrum"] == "ramp" for n in lib.names)
    assert all(c is None for c in lib.classes)


def test_extract_same_seed_same_library(stack, tmp_path, capsys):
    folder, _ = stack
    a, b = tmp_path / "a.csv", tmp_path / "b.csv"
    for out in (a, b):
        code, _, err = run(extract_args(folder, out, "--count", "3", "--sample", "200", "--seed", "4"), capsys)
        assert code == 0, err
    # compared as numbers and names, not as text
    lib_a, lib_b = read_library(a), read_library(b)
    assert lib_a.names == lib_b.names and lib_a.band_names == lib_b.band_names
    np.testing.assert_array_equal(lib_a.spectra, lib_b.spectra)
    assert json.loads(a.with_suffix(".json").read_text()) == json.loads(b.with_suffix(".json").read_text())


def test_extract_overwrite_checked_before_any_work(tmp_path, capsys):
    out = tmp_path / "exists.csv"
    out.write_text("keep me")
    # the stack does not even exist: the existing output must be reported first
    code, _, err = run(extract_args(tmp_path / "missing", out, "--count", "3"), capsys)
    assert code == 2 and "exists already" in err and "--overwrite" in err
    assert out.read_text() == "keep me"
    assert len(err.strip().splitlines()) == 1


@pytest.mark.parametrize(
    "extra, message",
    [
        (["--count", "1"], "at least 2"),
        (["--count", "many"], "'auto' or a whole number"),
        (["--count", "9"], "bands"),
        (["--sensor", "no-such-sensor"], "unknown sensor"),
        (["--library", "nowhere.csv"], "nowhere.csv"),
    ],
)
def test_extract_bad_input(stack, tmp_path, capsys, extra, message):
    folder, _ = stack
    code, _, err = run(extract_args(folder, tmp_path / "x.csv", *extra), capsys)
    assert code == 2
    assert message in err and "Traceback" not in err
    assert not (tmp_path / "x.csv").exists()


def test_extract_missing_stack(tmp_path, capsys):
    code, _, err = run(extract_args(tmp_path / "nothing_here", tmp_path / "x.csv", "--count", "3"), capsys)
    assert code == 2 and "nothing_here" in err


def test_extract_out_must_be_csv(stack, tmp_path, capsys):
    folder, _ = stack
    code, _, err = run(extract_args(folder, tmp_path / "x.txt", "--count", "3"), capsys)
    assert code == 2 and ".csv" in err


def test_prune_keeps_one_per_class(tmp_path, capsys):
    src = shipped_library_path("demo_bundles")
    orig = read_library(src)
    out = tmp_path / "pruned.csv"
    for method in ("ear", "masa", "cob"):
        code, stdout, err = run(["endmembers", "prune", str(src), "--method", method, "--out", str(out),
                                 "--overwrite"], capsys)
        assert code == 0, err
        assert len(stdout.strip().splitlines()) == 1
        lib = read_library(out)
        assert sorted(c for c in lib.classes) == sorted(set(orig.classes))
        meta = json.loads(out.with_suffix(".json").read_text())
        assert meta["pruning"]["method"] == method
        key = {"ear": "ear", "masa": "masa_deg", "cob": "in_count"}[method]
        assert all(key in meta["spectra"][n] for n in lib.names)
        # spectra are copied unchanged
        for n in lib.names:
            np.testing.assert_array_equal(lib.spectrum(n), orig.spectrum(n))
    code, _, _ = run(["endmembers", "prune", str(src), "--keep", "2", "--out", str(out), "--overwrite"], capsys)
    assert code == 0
    counts = {c: read_library(out).classes.count(c) for c in set(orig.classes)}
    assert all(counts[c] == min(2, orig.classes.count(c)) for c in counts)


def test_prune_needs_class_labels(tmp_path, capsys):
    lib = SpectralLibrary(np.array([500.0, 600.0, 700.0]), np.array([[0.1, 0.2, 0.3], [0.2, 0.2, 0.3]]),
                          ("a", "b"))
    src = write_library(lib, tmp_path / "nolabels.csv")
    code, _, err = run(["endmembers", "prune", str(src), "--out", str(tmp_path / "p.csv")], capsys)
    assert code == 2 and "class" in err and "nolabels.csv" in err
    assert not (tmp_path / "p.csv").exists()


def test_prune_refuses_to_overwrite(tmp_path, capsys):
    out = tmp_path / "p.csv"
    out.write_text("x")
    code, _, err = run(["endmembers", "prune", str(shipped_library_path("demo_bundles")), "--out", str(out)],
                       capsys)
    assert code == 2 and "exists already" in err and out.read_text() == "x"
