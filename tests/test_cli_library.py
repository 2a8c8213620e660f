"""Tests for the ``unmix sensors`` and ``unmix library`` commands (through unmix.cli.main.main)."""

from __future__ import annotations

import os

import numpy as np
import pytest

from unmix.cli.main import main
from unmix.io.library import read_library, shipped_library_path, sidecar_path
from unmix.sensors import get_sensor, list_sensors
from unmix.spectra import ndvi, resample


def run(capsys, *args):
    code = main(list(args))
    out, err = capsys.readouterr()
    return code, out, err


# ---------------------------------------------------------------- sensors
def test_sensors_lists_every_builtin(capsys):
    code, out, _ = run(capsys, "sensors")
    assert code == 0
    for sid in list_sensors():
        assert sid in out


def test_sensors_id_lists_bands_and_source(capsys):
    code, out, _ = run(capsys, "sensors", "sentinel-2a-msi")
    assert code == 0
    # ESA COPE-GSEG-EOPG-TN-15-0007 via CHECKS.md: B8A centre 864.7 nm, bandwidth 21 nm; B12 2202.4 / 175.
    # Centres: ESA's central wavelength is the response-weighted mean, as ours (0.1 nm); ESA's whole-nm
    # bandwidths are 0.5-1.5 nm wider than the interpolated 50 % widths printed here (2 nm).
    for band, centre, width in (("B8A", 864.7, 21.0), ("B12", 2202.4, 175.0)):
        line = next(l for l in out.splitlines() if l.startswith(f"{band} "))
        c, lo, hi, w = (float(v) for v in line.split()[1:5])
        assert c == pytest.approx(centre, abs=0.1) and w == pytest.approx(width, abs=2.0)
        assert hi - lo == pytest.approx(w, abs=0.011) and lo < c < hi  # printed with 2 decimals
        assert line.split()[5] == "tabulated"
    assert sum(1 for l in out.splitlines() if l.startswith("B")) == 13
    assert "COPE-GSEG-EOPG-TN-15-0007" in out


def test_sensors_unknown_id_lists_known(capsys):
    code, out, err = run(capsys, "sensors", "landsat-10")
    assert code == 2 and "landsat-10" in err
    for sid in list_sensors():
        assert sid in err
    assert "Traceback" not in err


# ---------------------------------------------------------------- library show
def test_library_show_resampled_prints_classes_and_ndvi(capsys):
    p = shipped_library_path("demo_library_landsat-8-oli")
    code, out, _ = run(capsys, "library", "show", str(p))
    assert code == 0
    lib = read_library(p)
    v = dict(zip(lib.names, ndvi(lib)))
    for n, c in zip(lib.names, lib.classes):
        line = next(l for l in out.splitlines() if l.startswith(n + " "))
        assert c in line
        assert float(line.split()[-1]) == pytest.approx(v[n], abs=5e-4)
    assert "B2, B3, B4, B5, B6, B7" in out and "invented: True" in out


def test_library_show_full_resolution(capsys):
    p = shipped_library_path("demo_library")
    code, out, _ = run(capsys, "library", "show", str(p))
    assert code == 0 and "400-2500 nm" in out and "--sensor" in out  # says how to get NDVI
    code, out, _ = run(capsys, "library", "show", str(p), "--sensor", "sentinel-2a-msi")
    assert code == 0 and "NIR B8" in out
    gv = next(l for l in out.splitlines() if l.startswith("green_vegetation "))
    # CHECKS.md rule of thumb: dense green canopy 0.6-0.8
    assert 0.6 <= float(gv.split()[-1]) <= 0.8


def test_library_show_missing_file(capsys, tmp_path):
    code, _, err = run(capsys, "library", "show", str(tmp_path / "gone.csv"))
    assert code == 2 and "gone.csv" in err


# ---------------------------------------------------------------- library resample
def test_resample_writes_file_equal_to_resample(capsys, tmp_path):
    src = shipped_library_path("demo_bundles")
    out_csv = tmp_path / "oli.csv"
    code, out, _ = run(capsys, "library", "resample", str(src), "--sensor", "landsat-8-oli",
                       "--band-names", "B2,B3,B4,B5,B6,B7", "--out", str(out_csv))
    assert code == 0 and str(out_csv) in out
    back = read_library(out_csv)
    ref = resample(read_library(src), "landsat-8-oli", ["B2", "B3", "B4", "B5", "B6", "B7"])
    np.testing.assert_array_equal(back.spectra, ref.spectra)
    np.testing.assert_array_equal(back.wavelengths, ref.wavelengths)
    assert back.band_names == ref.band_names and back.classes == ref.classes
    assert back.sensor == "landsat-8-oli" and sidecar_path(out_csv).exists()


def test_resample_all_bands_by_default(capsys, tmp_path):
    out_csv = tmp_path / "s2b.csv"
    code, _, err = run(capsys, "library", "resample", str(shipped_library_path()), "--sensor", "sentinel-2b-msi",
                       "--out", str(out_csv))
    assert code == 0, err
    assert read_library(out_csv).band_names == get_sensor("sentinel-2b-msi").band_names


def test_resample_refuses_existing_output(capsys, tmp_path):
    src = shipped_library_path()
    out_csv = tmp_path / "out.csv"
    out_csv.write_text("keep me\n")
    os.utime(out_csv, (1_000_000, 1_000_000))
    code, _, err = run(capsys, "library", "resample", str(src), "--sensor", "landsat-8-oli", "--out", str(out_csv))
    assert code == 2 and "--overwrite" in err and str(out_csv) in err
    assert out_csv.read_text() == "keep me\n" and out_csv.stat().st_mtime == 1_000_000
    assert not sidecar_path(out_csv).exists()
    code, _, _ = run(capsys, "library", "resample", str(src), "--sensor", "landsat-8-oli", "--out", str(out_csv),
                     "--overwrite")
    assert code == 0 and read_library(out_csv).band_names == get_sensor("landsat-8-oli").band_names


def test_resample_unknown_sensor_lists_known_ids(capsys, tmp_path):
    code, _, err = run(capsys, "library", "resample", str(shipped_library_path()), "--sensor", "spot-5",
                       "--out", str(tmp_path / "x.csv"))
    assert code == 2
    for sid in list_sensors():
        assert sid in err
    assert not (tmp_path / "x.csv").exists()


def test_resample_bad_band_and_already_resampled(capsys, tmp_path):
    code, _, err = run(capsys, "library", "resample", str(shipped_library_path()), "--sensor", "landsat-8-oli",
                       "--band-names", "B4,B8A", "--out", str(tmp_path / "x.csv"))
    assert code == 2 and "B8A" in err and "B7" in err
    code, _, err = run(capsys, "library", "resample", str(shipped_library_path("demo_library_landsat-8-oli")),
                       "--sensor", "landsat-8-oli", "--out", str(tmp_path / "y.csv"))
    assert code == 2 and "already resampled" in err


def test_resample_with_response_file(capsys, tmp_path):
    wl = np.arange(600, 901, 5)
    r1 = np.clip(1 - np.abs(wl - 660) / 30, 0, None)
    r2 = np.clip(1 - np.abs(wl - 840) / 40, 0, None)
    resp = tmp_path / "mycam.csv"
    resp.write_text("wavelength_nm,RED,NIR\n" + "".join(f"{w},{a:g},{b:g}\n" for w, a, b in zip(wl, r1, r2)))
    out_csv = tmp_path / "lib_mycam.csv"
    code, _, err = run(capsys, "library", "resample", str(shipped_library_path()), "--response", str(resp),
                       "--out", str(out_csv))
    assert code == 0, err
    lib = read_library(out_csv)
    assert lib.band_names == ("RED", "NIR") and lib.sensor == "mycam"
    np.testing.assert_allclose(lib.wavelengths, [660.0, 840.0])  # centroids of symmetric triangles
    v = ndvi(lib, red="RED", nir="NIR")
    assert v[lib.names.index("water")] < 0 < v[lib.names.index("green_vegetation")]  # CHECKS.md rules of thumb
    code, _, err = run(capsys, "library", "resample", str(shipped_library_path()), "--response", str(resp),
                       "--sensor", "landsat-8-oli", "--out", str(tmp_path / "z.csv"))
    assert code == 2 and "exactly one" in err
