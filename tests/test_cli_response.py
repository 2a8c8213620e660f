"""``--response FILE`` (a tabulated sensor) on `unmix fractions`, `unmix endmembers extract` and
`unmix library resample`, and which resampled libraries a stack of that sensor accepts.

The stack is made here: mixtures of shipped full-resolution spectra resampled with the response table
(trapezoidal integration of the table, written out with numpy/scipy, not with unmix), so the
fractions unmix recovers can be compared with the fractions the pixels were mixed with.
"""

from __future__ import annotations

import importlib.resources
import json

import netCDF4
import numpy as np
import pytest
import rasterio
from affine import Affine
from scipy import integrate

from unmix.cli.main import main
from unmix.io.library import read_library, read_shipped_library, shipped_library_path

BANDS = ["B2", "B3", "B4", "B5", "B6", "B7"]
NAMES = ["green_vegetation", "bright_soil", "water"]
DATES = ["2021-05-01", "2021-08-01"]


def _shipped_table(name: str) -> str:
    return (importlib.resources.files("unmix") / "data" / name).read_text()


def _band_values(spectra, wl, table_text):
    """Reference resampling: trapezoid of spectrum x response on the table's grid (scipy)."""
    lines = table_text.splitlines()
    header = lines[0].split(",")
    t = np.loadtxt(lines[1:], delimiter=",")
    out = np.empty((spectra.shape[0], len(BANDS)))
    for k, b in enumerate(BANDS):
        x, rr = t[:, 0], t[:, header.index(b)]  # (the OLI table is sampled every 1 nm around every band)
        for i, s in enumerate(spectra):
            out[i, k] = integrate.trapezoid(np.interp(x, wl, s) * rr, x) / integrate.trapezoid(rr, x)
    return out


@pytest.fixture()
def setup(tmp_path):
    """A response file (the shipped OLI table under another name) and a float32 stack mixed with it."""
    resp = tmp_path / "mycam.csv"
    resp.write_text(_shipped_table("landsat8_oli_rsr.csv"))
    lib = read_shipped_library("demo_library").select(NAMES)
    em = _band_values(lib.spectra, lib.wavelengths, resp.read_text())
    rng = np.random.default_rng(3)
    ny, nx = 6, 7
    a = rng.dirichlet(np.ones(3), (len(DATES), ny, nx))
    cube = np.einsum("tyxk,kb->tbyx", a, em).astype(np.float32)
    folder = tmp_path / "stack"
    folder.mkdir()
    transform = Affine(30.0, 0.0, 500000.0, 0.0, -30.0, 4500000.0)
    for t, d in enumerate(DATES):
        with rasterio.open(folder / f"scene_{d}.tif", "w", driver="GTiff", width=nx, height=ny,
                           count=len(BANDS), dtype="float32", crs="EPSG:32633", transform=transform) as dst:
            dst.write(cube[t])
    return resp, folder, a


def run(capsys, *args):
    code = main([str(a) for a in args])
    out, err = capsys.readouterr()
    return code, out, err


def fractions(capsys, folder, library, out, *sensor_args):
    return run(capsys, "fractions", folder, "--library", library, *sensor_args, "--band-names", ",".join(BANDS),
               "--endmembers", ",".join(NAMES), "--out", out)


def assert_one_line_error(code, err, *patterns):
    lines = [ln for ln in err.strip().splitlines() if ln]
    assert code == 2 and len(lines) == 1 and lines[0].startswith("unmix: error:"), err
    for p in patterns:
        assert p in lines[0], (p, lines[0])


def test_fractions_with_a_response_file_recover_the_mixing_fractions(setup, tmp_path, capsys):
    resp, folder, a = setup
    code, _, err = fractions(capsys, folder, shipped_library_path("demo_library"), tmp_path / "o1",
                             "--response", resp)
    assert code == 0, err
    with netCDF4.Dataset(tmp_path / "o1" / "fractions.nc") as nc:
        f = nc["fractions"][:].filled(np.nan)
        assert "--response" in nc.command
    # the fractions the pixels were mixed with (fixture); float32 storage of the stack
    np.testing.assert_allclose(np.moveaxis(f, 1, -1), a, atol=2e-5)


def test_library_resampled_with_the_response_is_accepted_for_that_sensor(setup, tmp_path, capsys):
    resp, folder, a = setup
    lib_csv = tmp_path / "lib_mycam.csv"
    code, _, err = run(capsys, "library", "resample", shipped_library_path("demo_library"), "--response", resp,
                       "--band-names", ",".join(BANDS), "--out", lib_csv)
    assert code == 0, err
    side = json.loads(lib_csv.with_suffix(".json").read_text())
    assert side["sensor"] == "mycam" and side["response_file"] == str(resp)
    assert set(side["band_responses"]) == set(BANDS)
    code, _, err = fractions(capsys, folder, lib_csv, tmp_path / "o2", "--response", resp)
    assert code == 0, err
    with netCDF4.Dataset(tmp_path / "o2" / "fractions.nc") as nc:
        np.testing.assert_allclose(np.moveaxis(nc["fractions"][:].filled(np.nan), 1, -1), a, atol=2e-5)
    # the same table is the built-in OLI's: equal response digests, so --sensor landsat-8-oli accepts it too
    code, _, err = fractions(capsys, folder, lib_csv, tmp_path / "o3", "--sensor", "landsat-8-oli")
    assert code == 0, err
    # another table under the same name (OLI-2's): refused, naming the bands that differ
    other = tmp_path / "other"
    other.mkdir()
    (other / "mycam.csv").write_text(_shipped_table("landsat9_oli2_rsr.csv"))
    code, _, err = fractions(capsys, folder, lib_csv, tmp_path / "o4", "--response", other / "mycam.csv")
    assert_one_line_error(code, err, str(lib_csv), "other responses", "B2")
    # and another sensor altogether
    code, _, err = fractions(capsys, folder, lib_csv, tmp_path / "o5", "--sensor", "sentinel-2a-msi")
    assert_one_line_error(code, err, "mycam", "sentinel-2a-msi")


def test_sensor_and_response_are_exclusive(setup, tmp_path, capsys):
    resp, folder, _ = setup
    lib = shipped_library_path("demo_library")
    code, _, err = fractions(capsys, folder, lib, tmp_path / "o", "--response", resp, "--sensor", "landsat-8-oli")
    assert_one_line_error(code, err, "exactly one", "--sensor", "--response")
    code, _, err = fractions(capsys, folder, lib, tmp_path / "o")
    assert_one_line_error(code, err, "exactly one")
    assert not (tmp_path / "o" / "fractions.nc").exists()


@pytest.mark.parametrize("content, patterns", [
    ("wavelength_nm,B2,B3\n400,0,0\n410,0.5,x\n420,0,0\n", ["line 3", "column B3", "'x' is not a number"]),
    ("wavelength_nm,B2,B3\n400,0,0\n410,0.5\n420,0,0\n", ["line 3", "column B3", "missing value"]),
    ("wavelength_nm,B2,B3\n400,0,0\n390,0.5,1\n420,0,0\n", ["line 3", "column wavelength_nm", "increase"]),
    ("wavelength_nm,B2,B3\n400,0,0\n410,-0.5,1\n420,0,0\n", ["line 3", "column B2", "negative"]),
    ("nm,B2\n400,0\n410,1\n", ["line 1", "column 1", "wavelength_nm"]),
    ("wavelength_nm,B2,B2\n400,0,0\n410,1,1\n", ["line 1", "column 3", "repeats"]),
    ("wavelength_nm,B2,B3\n400,0,0\n410,1,0\n420,0,0\n", ["column B3", "zero everywhere"]),
])
def test_malformed_response_file_is_one_line_naming_file_line_column(setup, tmp_path, capsys, content, patterns):
    _, folder, _ = setup
    bad = tmp_path / "bad.csv"
    bad.write_text(content)
    code, _, err = fractions(capsys, folder, shipped_library_path("demo_library"), tmp_path / "o",
                             "--response", bad)
    assert_one_line_error(code, err, str(bad), *patterns)
    code, _, err = fractions(capsys, folder, shipped_library_path("demo_library"), tmp_path / "o",
                             "--response", tmp_path / "missing.csv")
    assert_one_line_error(code, err, "response file", "missing.csv", "does not exist")


def test_endmembers_extract_with_a_response_file(setup, tmp_path, capsys):
    resp, folder, a = setup
    out = tmp_path / "em.csv"
    code, _, err = run(capsys, "endmembers", "extract", folder, "--response", resp, "--band-names",
                       ",".join(BANDS), "--count", "3", "--out", out)
    assert code == 0, err
    lib = read_library(out)
    assert lib.sensor == "mycam" and lib.band_names == tuple(BANDS)
    assert lib.metadata["response_file"] == str(resp)
    # wavelengths of the extracted library: the table's band centres (response-weighted means, numpy)
    lines = resp.read_text().splitlines()
    t = np.loadtxt(lines[1:], delimiter=",")
    header = lines[0].split(",")
    centres = [np.trapezoid(t[:, header.index(b)] * t[:, 0], t[:, 0]) / np.trapezoid(t[:, header.index(b)], t[:, 0])
               for b in BANDS]
    np.testing.assert_allclose(lib.wavelengths, centres, atol=1e-6)
    # the extracted library is accepted for the same sensor
    code, _, err = run(capsys, "fractions", folder, "--library", out, "--response", resp, "--band-names",
                       ",".join(BANDS), "--out", tmp_path / "o")
    assert code == 0, err
