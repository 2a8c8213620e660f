"""``unmix run PLAN.toml``: the whole job from the filled-in template, the plan stored in every product,
and a rerun from the stored plan giving the same arrays.

Products are read back with netCDF4 (and the GeoJSON with ``json``), the stored digest is checked with
``hashlib``, and the stored plan parsed with ``tomllib``: readers outside the project.
"""

from __future__ import annotations

import hashlib
import json
import shlex
import tomllib

import netCDF4
import numpy as np
import pytest

from unmix.cli.main import main
from unmix.io.plan import template_text

#: 12 dates over six years: enough for the trend tests' default of 8 valid dates.
DATES = tuple(f"{y}-{m:02d}-15" for y in range(2015, 2021) for m in (3, 8))
#: What the template leaves commented out and a plain int16 stack of the fixtures needs (conftest.make_stack).
FILL = {
    '# sensor = "landsat-8-oli"': 'sensor = "landsat-8-oli"',
    '# band_names = ["B2", "B3", "B4", "B5", "B6", "B7"]': 'band_names = ["B2", "B3", "B4", "B5", "B6", "B7"]',
    "# scale = 0.0001": "scale = 0.0001",
}


def _filled_template(folder, extra: dict | None = None) -> str:
    text = template_text()
    for old, new in {**FILL, **(extra or {})}.items():
        assert text.count(old) == 1, old
        text = text.replace(old, new)
    return text


def _nc(path) -> dict:
    """Global attributes and data variables of a NetCDF product, read with netCDF4."""
    with netCDF4.Dataset(path) as ds:
        ds.set_auto_mask(False)
        attrs = {k: ds.getncattr(k) for k in ds.ncattrs()}
        data = {k: np.array(v[...]) for k, v in ds.variables.items() if getattr(v.dtype, "kind", "") in "fiu" and v.ndim >= 2}
    return {"attrs": attrs, "data": data}


def _one_error_line(capsys) -> str:
    lines = [ln for ln in capsys.readouterr().err.splitlines() if ln.strip() and "Warning" not in ln]
    assert len(lines) == 1 and "Traceback" not in lines[0], lines
    return lines[0]


class _Folder(type(__import__("pathlib").Path())):
    """tmp_path with the stack's StackInfo attached (``.info``)."""


@pytest.fixture
def planned(make_stack, make_library, tmp_path):
    """tmp_path holding the paths the template names: a 12-date stack in stack/ and library.csv."""
    folder = _Folder(tmp_path)
    folder.info = make_stack(dates=DATES, folder="stack")
    make_library(filename="library.csv")
    return folder


def test_run_from_template_stores_the_plan_and_repeats_exactly(planned, capsys):
    plan_file = planned / "PLAN.toml"
    sample_on = {"[sample]\n# Run this step. Takes true or false. Default: false.\nrun = false":
                 "[sample]\n# Run this step. Takes true or false. Default: false.\nrun = true",
                 '# endmember = "green_vegetation"': 'endmember = "green_vegetation"'}
    plan_file.write_text(_filled_template(planned, sample_on), encoding="utf-8")
    code = main(["run", str(plan_file)])
    captured = capsys.readouterr()
    assert code == 0, captured.err
    steps = [ln for ln in captured.out.splitlines() if ln.startswith("$ unmix ")]
    assert [shlex.split(s)[2] for s in steps] == ["fractions", "trends", "report", "sample"]

    out = planned / "products"
    fractions, trends = _nc(out / "fractions.nc"), _nc(out / "trends.nc")
    plan_text = fractions["attrs"]["plan"]
    digest = fractions["attrs"]["plan_sha256"]
    assert hashlib.sha256(plan_text.encode("utf-8")).hexdigest() == digest  # hashlib, not the package
    assert trends["attrs"]["plan"] == plan_text and trends["attrs"]["plan_sha256"] == digest
    assert fractions["attrs"]["unmix_version"] == tomllib.loads(plan_text)["unmix_version"]
    stored = tomllib.loads(plan_text)
    assert stored["outputs"]["folder"] == str(out) and stored["inputs"]["scale"] == 0.0001
    assert stored["trends"]["min_valid"] == 8  # defaults are written out, not left implicit
    sample = json.loads((out / "sample" / "sample.geojson").read_text(encoding="utf-8"))
    assert sample["unmix"]["plan_sha256"] == digest and sample["unmix"]["plan"] == plan_text
    assert digest in (out / "report" / "report.html").read_text(encoding="utf-8")

    # the fractions are the fixture's true fractions (the stack is an exact linear mixture of the library's
    # spectra; int16 storage rounds reflectance to 1e-4, so 2e-3 in fraction is ample; common practice)
    got, info = fractions["data"]["fractions"], planned.info
    np.testing.assert_array_equal(np.isnan(got).any(axis=1), info.nodata_mask)
    ok = ~info.nodata_mask[:, None].repeat(got.shape[1], axis=1)
    np.testing.assert_allclose(got[ok], info.fractions[ok], atol=2e-3)

    # the stored plan, written back to a file and run into another folder, gives the same products
    again_plan = planned / "AGAIN.toml"
    assert main(["plan", "extract", str(out / "trends.nc"), "--out", str(again_plan)]) == 0
    assert again_plan.read_text(encoding="utf-8") == plan_text
    again = planned / "again"
    assert main(["run", str(again_plan), "--out", str(again)]) == 0, capsys.readouterr().err
    fractions2, trends2 = _nc(again / "fractions.nc"), _nc(again / "trends.nc")
    for first, second in ((fractions, fractions2), (trends, trends2)):
        assert first["data"].keys() == second["data"].keys()
        for name, values in first["data"].items():
            np.testing.assert_array_equal(values, second["data"][name], err_msg=name)  # NaN == NaN here
    assert tomllib.loads(fractions2["attrs"]["plan"])["outputs"]["folder"] == str(again)
    assert len(fractions["data"]["fractions"]) == len(DATES)


def test_dry_run_prints_the_commands_and_writes_nothing(planned, capsys):
    plan_file = planned / "PLAN.toml"
    plan_file.write_text(_filled_template(planned), encoding="utf-8")
    assert main(["run", str(plan_file), "--dry-run"]) == 0
    steps = [shlex.split(ln)[2:] for ln in capsys.readouterr().out.splitlines() if ln.startswith("$ unmix ")]
    assert [s[0] for s in steps] == ["fractions", "trends", "report"]
    fractions = steps[0]
    assert fractions[1] == str(planned / "stack")
    assert fractions[fractions.index("--library") + 1] == str(planned / "library.csv")
    assert fractions[fractions.index("--scale") + 1] == "0.0001"
    assert fractions[fractions.index("--band-names") + 1] == "B2,B3,B4,B5,B6,B7"
    assert steps[1][1] == str(planned / "products" / "fractions.nc")
    assert not (planned / "products").exists()


def test_extraction_runs_first_and_its_library_stores_the_plan(make_stack, tmp_path, capsys):
    make_stack(dates=DATES[:4], folder="stack", storage="float32")
    text = template_text().replace("\n[endmembers.library]\n", "\n# [endmembers.library]\n")
    text = text.replace('\nfile = "library.csv"\n', "\n")
    text = text.replace("# [endmembers.extraction]\n", "[endmembers.extraction]\ncount = 3\nsample = 400\n")
    text = text.replace("[trends]\n# Run this step. Takes true or false. Default: true.\nrun = true",
                        "[trends]\nrun = false")
    text = text.replace("[report]\n# Run this step. Takes true or false. Default: true.\nrun = true",
                        "[report]\nrun = false")
    text = text.replace('# sensor = "landsat-8-oli"', 'sensor = "landsat-8-oli"')
    text = text.replace('# band_names = ["B2"', 'band_names = ["B2"')
    text = text.replace("\ncog = false\n\n", "\ncog = true\n\n", 1)  # [unmixing] cog: GeoTIFFs store the plan too
    plan_file = tmp_path / "PLAN.toml"
    plan_file.write_text(text, encoding="utf-8")
    assert main(["run", str(plan_file)]) == 0, capsys.readouterr().err
    steps = [shlex.split(ln)[2:4] for ln in capsys.readouterr().out.splitlines() if ln.startswith("$ unmix ")]
    assert steps == [["endmembers", "extract"], ["fractions", str(tmp_path / "stack")]]
    out = tmp_path / "products"
    sidecar = json.loads((out / "endmembers.json").read_text(encoding="utf-8"))
    product = _nc(out / "fractions.nc")
    assert sidecar["plan_sha256"] == product["attrs"]["plan_sha256"]
    assert hashlib.sha256(sidecar["plan"].encode("utf-8")).hexdigest() == sidecar["plan_sha256"]
    assert product["attrs"]["input_files"].endswith(str(out / "endmembers.csv"))
    assert main(["plan", "extract", str(out / "endmembers.csv"), "--out", str(tmp_path / "BACK.toml")]) == 0
    assert (tmp_path / "BACK.toml").read_text(encoding="utf-8") == sidecar["plan"]
    import rasterio

    cogs = sorted(out.glob("fractions_*.tif"))
    assert len(cogs) == 3
    with rasterio.open(cogs[0]) as src:  # GDAL's metadata, read by rasterio
        assert src.tags()["plan_sha256"] == sidecar["plan_sha256"] and src.tags()["plan"] == sidecar["plan"]


def test_a_failing_step_stops_the_run_with_one_line_naming_it(planned, capsys):
    plan_file = planned / "PLAN.toml"
    # the library has no spectrum 'soil': the plan is valid, the fractions step fails
    text = _filled_template(planned, {'# names = ["green_vegetation", "soil"]': 'names = ["green_vegetation", "soil"]'})
    plan_file.write_text(text, encoding="utf-8")
    assert main(["run", str(plan_file)]) == 2
    line = _one_error_line(capsys)
    assert "step 1 of 3 (fractions) failed" in line and str(plan_file) in line and "soil" in line, line
    assert not (planned / "products" / "trends.nc").exists()  # later steps did not run


def test_an_existing_product_stops_the_run_and_overwrite_replaces_it(planned, capsys):
    plan_file = planned / "PLAN.toml"
    text = _filled_template(planned).replace("[trends]\n# Run this step. Takes true or false. Default: true.\n"
                                             "run = true", "[trends]\nrun = false")
    text = text.replace("[report]\n# Run this step. Takes true or false. Default: true.\nrun = true",
                        "[report]\nrun = false")
    plan_file.write_text(text, encoding="utf-8")
    assert main(["run", str(plan_file)]) == 0
    before = (planned / "products" / "fractions.nc").stat().st_mtime_ns
    capsys.readouterr()
    assert main(["run", str(plan_file)]) == 2
    line = _one_error_line(capsys)
    assert "step 1 of 1 (fractions) failed" in line and "--overwrite" in line, line
    assert (planned / "products" / "fractions.nc").stat().st_mtime_ns == before
    assert main(["run", str(plan_file), "--overwrite"]) == 0
    stored = tomllib.loads(_nc(planned / "products" / "fractions.nc")["attrs"]["plan"])
    assert stored["outputs"]["overwrite"] is True  # the plan as run, override included


def test_plan_errors_stop_before_any_step(planned, capsys):
    plan_file = planned / "PLAN.toml"
    plan_file.write_text(_filled_template(planned).replace("max_shift = 0.5", "max_shift = 0"), encoding="utf-8")
    assert main(["run", str(plan_file)]) == 2
    line = _one_error_line(capsys)
    assert "dates.max_shift: expected a number > 0, got 0" in line, line
    assert not (planned / "products").exists()


def test_plan_extract_refuses_a_product_without_a_plan(tmp_path, capsys):
    path = tmp_path / "plain.nc"
    with netCDF4.Dataset(path, "w") as ds:
        ds.setncattr("command", "unmix fractions stack")
    assert main(["plan", "extract", str(path), "--out", str(tmp_path / "P.toml")]) == 2
    assert "holds no plan" in _one_error_line(capsys)
    with netCDF4.Dataset(path, "a") as ds:  # a plan whose digest no longer matches: changed after writing
        ds.setncattr("plan", "x = 1\n")
        ds.setncattr("plan_sha256", hashlib.sha256(b"x = 2\n").hexdigest())
    assert main(["plan", "extract", str(path), "--out", str(tmp_path / "P.toml")]) == 2
    assert "does not match its plan_sha256" in _one_error_line(capsys)
    assert not (tmp_path / "P.toml").exists()


def test_every_plan_setting_reaches_its_command_option(tmp_path):
    # each step's arguments are parsed by the command's own click parser (not run): the values it receives
    # are the plan's
    from unmix.cli.main import cli
    from unmix.cli.run import plan_steps
    from unmix.io.plan import parse_plan

    for name in ("stack", "rules.txt", "zones.geojson", "bundles.csv", "dates.csv"):
        (tmp_path / name).mkdir() if name == "stack" else (tmp_path / name).write_text("x", encoding="utf-8")
    plan = parse_plan("""
[inputs]
stack = "stack"
sensor = "landsat-8-oli"
band_names = ["B2", "B3", "B4", "B5", "B6", "B7"]
dates = "dates.csv"
scale = 0.0001
offset = -0.2
[grid]
align = true
resampling = "bilinear"
chunk_size = 256
[masks]
qa = 7
qa_bits = [1, 3]
reflectance_range = false
[endmembers.bundles]
file = "bundles.csv"
prune = "ear"
keep = 2
misfit_limit = 0.03
[unmixing]
constraint = "sum-to-one"
compress_level = 4
cog = true
[dates]
reference_date = 2019-07-15
registration_band = "B5"
max_shift = 0.7
correct_shift = true
normalise = true
gain_tolerance = 0.1
registration_check = false
radiometry_check = false
doy_window = [335, 60]
years = "2005-2014"
first_date = 2005-01-01
last_date = "2014-12-31"
composite = "closest"
target_doy = 10
[trends]
fdr_q = 0.1
min_slope = 0.01
min_step = 0.1
correction = "none"
season_scheme = "month"
min_valid = 5
cog = true
[rules]
file = "rules.txt"
[zones]
file = "zones.geojson"
field = "zone_name"
pixels = "share"
periods = "2005-2006,2013-2014"
[report]
title = "T i t l e"
folder = "rep"
[sample]
run = true
map = "trajectory"
endmember = "soil"
per_class = 30
min_per_class = 5
target_se = 0.02
expected_accuracy = "0.9,stable=0.7"
seed = 4
folder = "pts"
[compute]
workers = 2
[outputs]
folder = "out"
overwrite = true
""", base=tmp_path)
    out = tmp_path / "out"
    params = {}
    for name, args in plan_steps(plan.data):
        command, rest = cli, list(args)
        while hasattr(command, "get_command"):  # the group, then `endmembers`' subcommands
            command, rest = command.get_command(None, rest[0]), rest[1:]
        params[name] = command.make_context(name, rest).params
    assert list(params) == ["endmembers prune", "fractions", "trends", "report", "sample"]
    prune = params["endmembers prune"]
    assert (prune["method"], prune["keep"], prune["overwrite"]) == ("ear", 2, True)
    assert str(prune["out"]) == str(out / "bundles_pruned.csv")
    f = params["fractions"]
    assert f["stack"] == (str(tmp_path / "stack"),) and str(f["library"]) == str(out / "bundles_pruned.csv")
    assert (f["mesma"], f["max_rmse"], f["constraint"], f["valid_range"]) == (True, 0.03, "sum-to-one", "none")
    assert (f["compress_level"], f["cog"], f["workers"], f["scheduler"], f["overwrite"]) == (4, True, 2, None, True)
    assert (f["sensor"], f["band_names"], str(f["dates"])) == ("landsat-8-oli", "B2,B3,B4,B5,B6,B7",
                                                               str(tmp_path / "dates.csv"))
    assert (f["scale"], f["offset"], f["qa"], f["qa_bits"]) == (0.0001, -0.2, "7", "1,3")
    assert (f["align"], f["resampling"], f["chunk_size"]) == (True, "bilinear", 256)
    assert (f["reference_date"], f["registration_band"], f["max_shift"], f["gain_tolerance"]) == (
        "2019-07-15", "B5", 0.7, 0.1)
    assert (f["correct_shift"], f["normalise"], f["no_registration"], f["no_radiometry"]) == (True, True, True, True)
    assert (f["doy_window"], f["years"], f["date_range"]) == ("335-60", "2005-2014", "2005-01-01,2014-12-31")
    assert (f["composite"], f["target_doy"]) == ("closest", 10)
    t = params["trends"]
    assert (t["fdr_q"], t["min_slope"], t["min_step"], t["correction"], t["season_scheme"], t["min_valid"]) == (
        0.1, 0.01, 0.1, "none", "month", 5)
    assert (str(t["rules_file"]), str(t["zones_file"]), t["zone_field"], t["zone_pixels"]) == (
        str(tmp_path / "rules.txt"), str(tmp_path / "zones.geojson"), "zone_name", "share")
    assert (t["cover_change"], t["periods"], t["cog"], t["workers"], str(t["out"])) == (
        False, "2005-2006,2013-2014", True, 2, str(out))
    r = params["report"]
    assert (r["title"], str(r["out"]), str(r["fractions"])) == ("T i t l e", str(out / "rep"), str(out / "fractions.nc"))
    s = params["sample"]
    assert (s["endmember"], s["per_class"], s["total"], s["min_per_class"], s["target_se"]) == ("soil", 30, None, 5, 0.02)
    assert (s["expected_accuracy"], s["seed"], str(s["out"]), str(s["trends"])) == (
        "0.9,stable=0.7", 4, str(out / "pts"), str(out / "trends.nc"))
