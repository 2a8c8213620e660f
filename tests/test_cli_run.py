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
