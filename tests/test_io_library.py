"""Tests for unmix.io.library: library CSV + JSON sidecar, validation messages, responses, shipped files."""

from __future__ import annotations

import fnmatch
import json
import shutil
import tomllib
from pathlib import Path

import numpy as np
import pytest

from unmix.errors import LibraryFormatError, LibraryReadError, OutputExistsError
from unmix.io.library import (
    read_library,
    read_response,
    read_response_sensor,
    read_shipped_library,
    shipped_library_dir,
    shipped_library_path,
    sidecar_path,
    write_library,
)
from unmix.spectra import SpectralLibrary, resample, resample_spectra

GOOD = """wavelength_nm,green,soil
400,0.04,0.15
500,0.06,0.20
600,0.08,0.25
700,0.30,0.28
"""


def _write(tmp_path, text, name="lib.csv", sidecar=None):
    p = tmp_path / name
    p.write_text(text, encoding="utf-8")
    if sidecar is not None:
        sidecar_path(p).write_text(sidecar if isinstance(sidecar, str) else json.dumps(sidecar), encoding="utf-8")
    return p


def _fails(path, *parts):
    with pytest.raises(LibraryFormatError) as e:
        read_library(path)
    msg = str(e.value)
    for part in (str(path),) + parts:
        assert part in msg, (part, msg)
    return msg


# ---------------------------------------------------------------- reading
def test_read_good_library_with_sidecar(tmp_path):
    p = _write(tmp_path, GOOD, sidecar={"source": "hand-typed", "invented": True,
                                        "spectra": {"green": {"class": "green_vegetation", "description": "x"}}})
    lib = read_library(p)
    np.testing.assert_array_equal(lib.wavelengths, [400, 500, 600, 700])
    np.testing.assert_array_equal(lib.spectra, [[0.04, 0.06, 0.08, 0.30], [0.15, 0.20, 0.25, 0.28]])
    assert lib.names == ("green", "soil") and lib.classes == ("green_vegetation", None)
    assert lib.band_names is None and lib.metadata["source"] == "hand-typed"


def test_wavelength_um_is_converted_to_nm(tmp_path):
    text = GOOD.replace("wavelength_nm", "wavelength_um").replace("400,", "0.4,").replace(
        "500,", "0.5,").replace("600,", "0.6,").replace("700,", "0.7,")
    lib = read_library(_write(tmp_path, text))
    np.testing.assert_allclose(lib.wavelengths, [400, 500, 600, 700], rtol=1e-12)  # 1 um = 1000 nm


def test_scale_factor_and_add_offset_multiply_and_add(tmp_path):
    # CF conventions 8.1 (packed data): unpacked = packed x scale_factor + add_offset
    text = "wavelength_nm,soil\n400,1500\n500,2000\n600,2500\n"
    with pytest.raises(LibraryFormatError, match="scale_factor"):
        read_library(_write(tmp_path, text))  # 1500 is out of range without a scale; message says how to fix
    lib = read_library(_write(tmp_path, text, sidecar={"scale_factor": 0.0001}))
    np.testing.assert_allclose(lib.spectra, [[0.15, 0.20, 0.25]])
    lib = read_library(_write(tmp_path, text, "o.csv", sidecar={"scale_factor": 0.0001, "add_offset": -0.1}))
    np.testing.assert_allclose(lib.spectra, [[0.05, 0.10, 0.15]])


def test_old_reflectance_scale_key_is_read_with_a_deprecation_warning(tmp_path):
    from unmix.errors import DeprecatedKeyWarning

    text = "wavelength_nm,soil\n400,1500\n500,2000\n600,2500\n"
    with pytest.warns(DeprecatedKeyWarning, match="scale_factor\": 0.0001"):
        lib = read_library(_write(tmp_path, text, sidecar={"reflectance_scale": 10000}))
    np.testing.assert_allclose(lib.spectra, [[0.15, 0.20, 0.25]])  # divided by it, as before
    with pytest.raises(LibraryFormatError, match="both scale_factor and the old reflectance_scale"):
        read_library(_write(tmp_path, text, "b.csv", sidecar={"reflectance_scale": 10000, "scale_factor": 1e-4}))
    # what the writer writes now: the CF keys only
    out = write_library(lib, tmp_path / "again.csv")
    meta = json.loads(out.with_suffix(".json").read_text())
    assert meta["scale_factor"] == 1 and meta["add_offset"] == 0 and "reflectance_scale" not in meta


def test_non_numeric_cell_names_file_line_column(tmp_path):
    p = _write(tmp_path, GOOD.replace("600,0.08,0.25", "600,0.08,abc"))
    _fails(p, "line 4", "column soil", "'abc'")


def test_missing_cell_names_file_line_column(tmp_path):
    _fails(_write(tmp_path, GOOD.replace("500,0.06,0.20", "500,,0.20")), "line 3", "column green", "missing")
    _fails(_write(tmp_path, GOOD.replace("500,0.06,0.20", "500,0.06"), "b.csv"), "line 3", "column soil", "missing")


def test_unsorted_and_duplicate_wavelengths(tmp_path):
    _fails(_write(tmp_path, GOOD.replace("600,", "450,")), "line 4", "column wavelength_nm", "line 3")
    _fails(_write(tmp_path, GOOD.replace("600,", "500,"), "b.csv"), "line 4", "column wavelength_nm", "repeats")


def test_out_of_range_reflectance(tmp_path):
    # rule: after scaling every value lies in -0.05..1.5
    _fails(_write(tmp_path, GOOD.replace("0.28", "1.7")), "line 5", "column soil", "-0.05..1.5")
    _fails(_write(tmp_path, GOOD.replace("0.04", "-0.2"), "b.csv"), "line 2", "column green")
    lib = read_library(_write(tmp_path, GOOD.replace("0.04", "-0.04"), "c.csv"))  # small negatives allowed
    assert lib.spectra[0, 0] == -0.04


def test_duplicate_and_empty_names(tmp_path):
    _fails(_write(tmp_path, GOOD.replace("green,soil", "soil,soil")), "line 1", "column 3", "'soil'")
    _fails(_write(tmp_path, GOOD.replace("green,soil", ",soil"), "b.csv"), "line 1", "column 2", "empty")


def test_line_numbers_count_comments_and_blank_lines(tmp_path):
    # lines as an editor shows them: comment on line 1, blank line 3, bad cell on line 6
    text = "# invented test spectra\n" + GOOD.replace("\n500", "\n\n500").replace("600,0.08", "600,x")
    _fails(_write(tmp_path, text), "line 6", "column green")


def test_bad_header_and_extra_cells(tmp_path):
    _fails(_write(tmp_path, GOOD.replace("wavelength_nm", "lambda")), "line 1", "wavelength_nm")
    _fails(_write(tmp_path, GOOD.replace("600,0.08,0.25", "600,0.08,0.25,0.3"), "b.csv"), "line 4", "3 columns")
    _fails(_write(tmp_path, "", "c.csv"), "empty")


def test_sidecar_errors_name_the_sidecar(tmp_path):
    p = _write(tmp_path, GOOD, sidecar='{"source": "x",\n "invented": tru}')
    msg = _fails(p, "line 2")
    assert str(sidecar_path(p)) in msg
    p = _write(tmp_path, GOOD, "b.csv", sidecar={"spectra": {"grean": {"class": "gv"}}})
    _fails(p, "'grean'", "green, soil")
    p = _write(tmp_path, GOOD, "c.csv", sidecar={"units": "um"})
    _fails(p, "wavelength_nm", "agree")
    p = _write(tmp_path, GOOD, "d.csv", sidecar={"scale_factor": -3})
    _fails(p, "scale_factor")


def test_missing_file_raises_library_read_error(tmp_path):
    p = tmp_path / "nope.csv"
    with pytest.raises(LibraryReadError) as e:
        read_library(p)
    assert str(p) in str(e.value)
    assert isinstance(e.value, OSError)


def test_band_library_reads_band_column(tmp_path):
    text = "wavelength_nm,band,gv,soil\n865,B5,0.4,0.3\n655,B4,0.05,0.25\n"
    lib = read_library(_write(tmp_path, text, sidecar={"sensor": "landsat-8-oli"}))
    assert lib.band_names == ("B5", "B4") and lib.sensor == "landsat-8-oli"
    np.testing.assert_array_equal(lib.wavelengths, [865, 655])  # band order kept, need not increase
    _fails(_write(tmp_path, text.replace("B4", "B5"), "b.csv"), "line 3", "column band", "line 2")


# ---------------------------------------------------------------- writing
def _random_library(rng, n=4, n_wl=30, resampled=False):
    wl = np.sort(rng.choice(np.arange(350.0, 2600.0, 0.5), n_wl, replace=False))
    sp = rng.uniform(-0.05, 1.5, (n, n_wl))
    names = tuple(f"spec_{i}" for i in range(n))
    classes = tuple(rng.choice(["soil", "gv", None]) for _ in range(n))
    bands = tuple(f"B{i}" for i in range(n_wl)) if resampled else None
    md = {"source": "random", "invented": True, "description": "random test spectra", "note": [1, 2]}
    if resampled:
        md["sensor"] = "toy"
    return SpectralLibrary(wl, sp, names, classes, bands, md)


@pytest.mark.parametrize("resampled", [False, True])
def test_write_read_round_trip_is_exact(tmp_path, resampled):
    rng = np.random.default_rng(7 + resampled)
    lib = _random_library(rng, resampled=resampled)
    p = write_library(lib, tmp_path / "rt.csv")
    back = read_library(p)
    np.testing.assert_array_equal(back.wavelengths, lib.wavelengths)  # shortest round-trip text
    np.testing.assert_array_equal(back.spectra, lib.spectra)
    assert back.names == lib.names and back.classes == lib.classes and back.band_names == lib.band_names
    for k in ("source", "invented", "description", "note"):
        assert back.metadata[k] == lib.metadata[k]
    assert back.sensor == lib.sensor


def test_write_refuses_to_overwrite_and_leaves_file_untouched(tmp_path):
    lib = _random_library(np.random.default_rng(1))
    p = write_library(lib, tmp_path / "x.csv")
    before = p.read_bytes(), sidecar_path(p).read_bytes()
    other = _random_library(np.random.default_rng(2))
    with pytest.raises(OutputExistsError, match="overwrite"):
        write_library(other, p)
    assert (p.read_bytes(), sidecar_path(p).read_bytes()) == before
    write_library(other, p, overwrite=True)
    np.testing.assert_array_equal(read_library(p).spectra, other.spectra)
    assert not list(tmp_path.glob(".*tmp"))  # no temporary files left behind


# ---------------------------------------------------------------- responses
def test_read_response_and_tabulated_resampling(tmp_path):
    wl = np.arange(600, 721, 10)
    tri = np.clip(1 - np.abs(wl - 660) / 40, 0, None) * 50  # any positive scale
    lines = ["wavelength_nm,R"] + [f"{w},{r:g}" for w, r in zip(wl, tri)]
    p = tmp_path / "resp.csv"
    p.write_text("\n".join(lines) + "\n")
    t = read_response(p)
    assert t.band_names == ("R",) and t.responses.max() == 1.0
    s = read_response_sensor(p)
    assert s.id == "resp" and s.band("R").centre_nm == pytest.approx(660.0)
    # linear spectrum through a symmetric response -> value at its centre (mathematical identity)
    lwl = np.arange(400.0, 1000.0, 1.0)
    assert resample_spectra(0.1 + 1e-4 * lwl, lwl, s)[0] == pytest.approx(0.1 + 1e-4 * 660, abs=1e-9)
    p.write_text("wavelength_nm,R\n600,0\n610,oops\n620,0\n")
    with pytest.raises(LibraryFormatError, match="line 3, column R"):
        read_response(p)


# ---------------------------------------------------------------- shipped files
SHIPPED = ["demo_library", "demo_bundles", "demo_library_landsat-8-oli", "demo_library_sentinel-2a-msi",
           "demo_bundles_landsat-8-oli", "demo_bundles_sentinel-2a-msi"]


@pytest.mark.parametrize("name", SHIPPED)
def test_shipped_libraries_read_and_are_marked_invented(name):
    p = shipped_library_path(name)
    assert p.is_file() and p.parent == shipped_library_dir()
    lib = read_library(p)
    assert lib.metadata["invented"] is True
    assert all(c is not None for c in lib.classes)


def test_shipped_library_geometry():
    lib = read_shipped_library("demo_library")
    # brief: 400-2500 nm at 10 nm or finer
    assert lib.wavelengths[0] <= 400 and lib.wavelengths[-1] >= 2500 and np.diff(lib.wavelengths).max() <= 10
    assert lib.names == ("green_vegetation", "dry_vegetation", "bright_soil", "dark_soil", "sand", "water", "shade")
    assert read_shipped_library("demo_library_landsat-8-oli").band_names == ("B2", "B3", "B4", "B5", "B6", "B7")
    assert read_shipped_library("demo_library_sentinel-2a-msi").band_names == (
        "B2", "B3", "B4", "B5", "B6", "B7", "B8", "B8A", "B11", "B12")


@pytest.mark.parametrize("stem", ["demo_library", "demo_bundles"])
@pytest.mark.parametrize("sensor", ["landsat-8-oli", "sentinel-2a-msi"])
def test_shipped_resampled_files_are_up_to_date(stem, sensor):
    # consistency of the shipped files with the shipped full-resolution library (not a numeric check)
    full = read_shipped_library(stem)
    shipped = read_shipped_library(f"{stem}_{sensor}")
    again = resample(full, sensor, shipped.band_names)
    # the shipped resampled files keep 6 decimals (endmembers/make_demo_library.py DECIMALS)
    np.testing.assert_allclose(shipped.spectra, again.spectra, rtol=0, atol=5.1e-7)


def test_generator_reproduces_the_shipped_libraries(tmp_path):
    # regenerating into a temporary folder gives the shipped libraries: same names, bands, classes and
    # sidecars, and the same numbers to within the written precision. Numbers are compared as numbers,
    # never as text: the last digits of a response integral differ between numpy builds and CPUs.
    import importlib.util

    script = Path(shipped_library_path().parent) / "make_demo_library.py"
    spec = importlib.util.spec_from_file_location("make_demo_library", script)
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    assert mod.main(["--out", str(tmp_path)]) == 0
    for name in SHIPPED:
        shipped = read_library(shipped_library_path(name))
        again = read_library(tmp_path / f"{name}.csv")
        assert again.names == shipped.names, name
        assert again.classes == shipped.classes, name
        assert again.band_names == shipped.band_names, name
        assert json.loads((tmp_path / f"{name}.json").read_text()) == json.loads(
            shipped_library_path(name).with_suffix(".json").read_text()), name
        np.testing.assert_allclose(again.wavelengths, shipped.wavelengths, rtol=0, atol=1e-9, err_msg=name)
        # written with 6 (resampled) or 4 (full resolution) decimals: one unit of the last decimal at most
        np.testing.assert_allclose(again.spectra, shipped.spectra, rtol=0, atol=1.5e-6, err_msg=name)


def test_unknown_shipped_name_lists_available():
    with pytest.raises(LibraryReadError) as e:
        shipped_library_path("no_such_library")
    assert "demo_bundles" in str(e.value)


# ---------------------------------------------------------------- shipped files in every kind of install
REPO = Path(__file__).resolve().parents[1]
SOURCE_DIR = REPO / "endmembers"  # the shipped libraries as they sit in the repository
SHIPPED_FILES = sorted(p.name for p in SOURCE_DIR.iterdir() if p.suffix in (".csv", ".json"))


def test_source_folder_holds_the_shipped_libraries():
    # guards the two tests below against an empty listing
    assert {f"{n}{s}" for n in SHIPPED for s in (".csv", ".json")} <= set(SHIPPED_FILES)


@pytest.mark.parametrize("filename", SHIPPED_FILES)
def test_lookup_finds_every_shipped_file(filename):
    # through the function the code uses (shipped_library_path -> shipped_library_dir), byte for byte
    stem, suffix = filename.rsplit(".", 1)
    found = shipped_library_path(stem).with_suffix("." + suffix)
    assert found.read_bytes() == (SOURCE_DIR / filename).read_bytes()


def test_installed_copy_is_preferred_over_the_source_tree(tmp_path, monkeypatch):
    # a wheel install carries endmembers/ as unmix/_shipped/; simulate that layout
    from unmix.io.library import shipped

    installed = tmp_path / "site-packages" / "unmix" / "_shipped"
    installed.mkdir(parents=True)
    for name in SHIPPED_FILES:
        shutil.copyfile(SOURCE_DIR / name, installed / name)
    monkeypatch.setattr(shipped, "_installed_dir", lambda: installed)
    assert shipped_library_dir() == installed
    for name in SHIPPED_FILES:
        stem, suffix = name.rsplit(".", 1)
        assert shipped_library_path(stem).with_suffix("." + suffix) == installed / name
    assert read_shipped_library("demo_library").metadata["path"] == str(installed / "demo_library.csv")


def test_missing_shipped_folder_names_where_it_looked(tmp_path, monkeypatch):
    from unmix.io.library import shipped

    monkeypatch.setattr(shipped, "_installed_dir", lambda: tmp_path / "a" / "_shipped")
    monkeypatch.setattr(shipped, "_source_dir", lambda: tmp_path / "b" / "endmembers")
    with pytest.raises(LibraryReadError) as e:
        shipped_library_path("demo_library")
    assert str(tmp_path / "a" / "_shipped") in str(e.value) and str(tmp_path / "b" / "endmembers") in str(e.value)


def _setuptools_tables():
    with open(REPO / "pyproject.toml", "rb") as f:
        return tomllib.load(f)["tool"]["setuptools"]


def test_packaging_maps_the_shipped_folder_into_the_wheel():
    # the wheel gets endmembers/*.csv|json as unmix/_shipped/: the folder the lookup tries first
    from unmix.io.library import shipped

    st = _setuptools_tables()
    data_package = f"unmix.{shipped._INSTALLED_FOLDER}"
    assert data_package in st["packages"]
    assert st["package-dir"][data_package] == "endmembers"
    patterns = st["package-data"][data_package]
    for name in SHIPPED_FILES:
        assert any(fnmatch.fnmatch(name, pat) for pat in patterns), name


def test_packaging_lists_every_package_folder():
    # packages are listed by hand (the data package is not a folder of unmix/); a new subpackage that
    # is missing from pyproject.toml would be left out of a wheel install
    found = {
        ".".join(d.relative_to(REPO).parts)
        for d in [REPO / "unmix", *(REPO / "unmix").rglob("*")]
        if d.is_dir() and d.name != "__pycache__" and any(d.glob("*.py"))
    }
    listed = set(_setuptools_tables()["packages"]) - {"unmix._shipped"}
    assert found - listed == set(), "add these packages to [tool.setuptools] packages in pyproject.toml"
    assert listed - found == set(), "these packages in pyproject.toml have no folder under unmix/"
