"""Plan files (unmix.io.plan): the template, normalisation, and every kind of error naming its key.

The TOML the plan module writes is read back with the standard library's ``tomllib`` (an independent
reader), and the stored digest is checked with ``hashlib``.
"""

from __future__ import annotations

import datetime as dt
import hashlib
import re
import tomllib

import pytest

from unmix.cli.main import main
from unmix.errors import PlanError, PlanVersionWarning
from unmix.io.plan import format_value, parse_plan, read_plan, schema, template_text

MINIMAL = """\
[inputs]
stack = "stack"
[endmembers.library]
file = "library.csv"
[outputs]
folder = "products"
"""


@pytest.fixture
def folder(tmp_path):
    """A plan folder holding the paths the template names: stack/, library.csv, bundles.csv."""
    (tmp_path / "stack").mkdir()
    (tmp_path / "library.csv").write_text("wavelength_nm,a\n500,0.1\n", encoding="utf-8")
    (tmp_path / "bundles.csv").write_text("wavelength_nm,a\n500,0.1\n", encoding="utf-8")
    return tmp_path


def _error(text, folder) -> str:
    with pytest.raises(PlanError) as info:
        parse_plan(text, base=folder, source="p.toml")
    return str(info.value)


def test_template_validates_once_its_paths_exist(folder):
    plan = parse_plan(template_text(), base=folder, source="template")
    assert plan.data["inputs"]["stack"] == [str(folder / "stack")]
    assert plan.data["endmembers"] == {"library": {"file": str(folder / "library.csv")}}
    assert plan.data["outputs"]["folder"] == str(folder / "products")
    assert plan.data["trends"]["run"] is True and plan.data["sample"]["run"] is False


def test_every_key_is_in_the_template_below_a_comment():
    lines = template_text().splitlines()
    for section in schema():
        header = [i for i, ln in enumerate(lines) if ln.lstrip("# ") == f"[{section.name}]"]
        if not section.keys:
            continue
        assert len(header) == 1, section.name
        for key in section.keys:
            # the first line setting the key after the section header (active or commented out)
            at = next(i for i in range(header[0] + 1, len(lines))
                      if re.fullmatch(rf"(# )?{key.name} = .+", lines[i]))
            assert lines[at - 1].startswith("# "), (section.name, key.name)
            if key.default is not None:
                assert f"Default: {format_value(key.default)}" in " ".join(
                    ln[2:] for ln in lines[max(0, at - 4):at]), (section.name, key.name)


def test_template_alternatives_validate_when_switched_on(folder):
    # the commented-out endmember sources are complete: switching one on (and the library off) validates
    text = template_text().replace("\n[endmembers.library]\n", "\n# [endmembers.library]\n")
    text = text.replace('\nfile = "library.csv"\n', '\n# file = "library.csv"\n')
    head, _, rest = text.partition("\n# [endmembers.bundles]\n")
    block, _, tail = rest.partition("\n\n")
    block = "\n".join(ln[2:] if re.match(r"# \w+ = ", ln) else ln for ln in block.splitlines())
    plan = parse_plan(head + "\n[endmembers.bundles]\n" + block + "\n\n" + tail, base=folder, source="switched")
    assert plan.endmember_source == "bundles"
    assert plan.data["endmembers"]["bundles"] == {"file": str(folder / "bundles.csv"), "prune": "none", "keep": 1,
                                                  "misfit_limit": 0.025}


def test_normalised_text_reads_back_with_tomllib_and_is_stable(folder):
    text = MINIMAL + '[dates]\nreference_date = 2019-07-15\ndoy_window = [335, 60]\n[report]\ntitle = "A \\"q\\" ü"\n'
    plan = parse_plan(text, base=folder, source="p.toml")
    back = tomllib.loads(plan.text)  # the standard library's reader, not ours
    assert back["dates"]["reference_date"] == dt.date(2019, 7, 15)
    assert back["dates"]["doy_window"] == [335, 60]
    assert back["report"]["title"] == 'A "q" ü'
    assert back["outputs"]["folder"] == str(folder / "products")
    assert hashlib.sha256(plan.text.encode()).hexdigest() == plan.sha256
    again = parse_plan(plan.text, base=folder / "stack", source="again")  # absolute paths: base no longer matters
    assert again.text == plan.text and again.sha256 == plan.sha256


@pytest.mark.parametrize("value", ['a"b\\c', "line\nbreak\ttab", "del\x7fete", "ünïcødé ∑ 🌍", "", "'single'"])
def test_format_value_strings_read_back_with_tomllib(value):
    assert tomllib.loads(f"k = {format_value(value)}")["k"] == value


@pytest.mark.parametrize("value", [0.1, 1e-05, 2.0, -0.5, 1e300, 123456789.125])
def test_format_value_floats_read_back_exactly(value):
    got = tomllib.loads(f"k = {format_value(value)}")["k"]
    assert isinstance(got, float) and got == value


def test_relative_paths_start_at_the_plan_folder_not_the_working_folder(folder, tmp_path_factory, monkeypatch):
    (folder / "PLAN.toml").write_text(MINIMAL, encoding="utf-8")
    monkeypatch.chdir(tmp_path_factory.mktemp("elsewhere"))
    plan = read_plan(folder / "PLAN.toml")
    assert plan.data["inputs"]["stack"] == [str(folder / "stack")]
    assert plan.data["outputs"]["folder"] == str(folder / "products")


@pytest.mark.parametrize("text, key, words", [
    (MINIMAL + "[dates]\nmax_shfit = 1.0\n", "'dates.max_shfit'", "did you mean 'dates.max_shift'"),
    (MINIMAL + "[trend]\nfdr_q = 0.1\n", "'trend'", "did you mean 'trends'"),
    (MINIMAL.replace("folder = ", "foldr = "), "'outputs.foldr'", "did you mean 'outputs.folder'"),
    (MINIMAL + "[endmembers.extract]\nmethod = 'vca'\n", "'endmembers.extract'", "did you mean 'endmembers.extraction'"),
])
def test_unknown_keys_are_errors_with_a_suggestion(folder, text, key, words):
    message = _error(text, folder)
    assert f"unknown key {key}" in message and words in message, message


@pytest.mark.parametrize("extra, key, words", [
    ('[dates]\nmax_shift = "big"\n', "dates.max_shift", "expected a number > 0, got 'big'"),
    ("[dates]\nmax_shift = true\n", "dates.max_shift", "got True"),
    ("[trends]\nmin_valid = 7.5\n", "trends.min_valid", "expected a whole number >= 3, got 7.5"),
    ('[unmixing]\ncog = "yes"\n', "unmixing.cog", "expected true or false"),
    ("[dates]\nreference_date = 2019-13-01\n", None, "not a valid TOML file"),
    ('[dates]\nreference_date = "15/07/2019"\n', "dates.reference_date", "expected a date"),
    ("[dates]\ndoy_window = [60]\n", "dates.doy_window", "two whole numbers"),
    ('[inputs.extra]\nx = 1\n', "'inputs.extra'", "unknown key"),
    ('[dates]\nyears = "05-14"\n', "dates.years", "like '2005-2014'"),
    ('[unmixing]\nconstraint = "fcl"\n', "unmixing.constraint", "did you mean 'fcls'"),
])
def test_wrong_types_name_the_key_the_value_and_what_is_expected(folder, extra, key, words):
    text = MINIMAL.replace("[inputs]\n", "[inputs]\n") + extra
    if extra.startswith("[inputs."):
        text = MINIMAL.replace('stack = "stack"', 'stack = "stack"\nextra = {x = 1}')
    message = _error(text, folder)
    assert (key is None or key in message) and words in message, message


@pytest.mark.parametrize("extra, key, words", [
    ("[trends]\nfdr_q = 1.5\n", "trends.fdr_q", "> 0 and < 1, got 1.5"),
    ("[trends]\nfdr_q = 0\n", "trends.fdr_q", "got 0"),
    ("[dates]\nmax_shift = -0.1\n", "dates.max_shift", "> 0, got -0.1"),
    ("[dates]\ndoy_window = [0, 400]\n", "dates.doy_window", ">= 1 and <= 366"),
    ("[unmixing]\ncompress_level = 10\n", "unmixing.compress_level", "<= 9, got 10"),
    ("[masks]\nreflectance_range = [2.0, -0.5]\n", "masks.reflectance_range", "low must be below high"),
    ("[grid]\nchunk_size = 8\n", "grid.chunk_size", ">= 16, got 8"),
    ("[dates]\ngain_tolerance = nan\n", "dates.gain_tolerance", "got nan"),
])
def test_values_out_of_range_name_the_key(folder, extra, key, words):
    message = _error(MINIMAL + extra, folder)
    assert key in message and words in message, message


@pytest.mark.parametrize("text, words", [
    (MINIMAL.replace('[outputs]\nfolder = "products"\n', "[outputs]\noverwrite = true\n"),
     "outputs.folder: missing required key"),
    (MINIMAL.replace('[outputs]\nfolder = "products"\n', ""), "outputs: missing section [outputs]"),
    (MINIMAL.replace('stack = "stack"\n', ""), "inputs.stack: missing required key"),
    (MINIMAL.replace('[endmembers.library]\nfile = "library.csv"\n', ""), "endmembers: missing"),
    (MINIMAL.replace('file = "library.csv"', 'names = ["a"]'), "endmembers.library.file: missing required key"),
])
def test_missing_required_keys_are_named(folder, text, words):
    assert words in _error(text, folder)


@pytest.mark.parametrize("old, new, key", [
    ('stack = "stack"', 'stack = "no_such_stack"', "inputs.stack: 'no_such_stack' does not exist"),
    ('stack = "stack"', 'stack = ["stack", "missing/*.tif"]', "inputs.stack: 'missing/*.tif' does not exist"),
    ('file = "library.csv"', 'file = "lib/missing.csv"', "endmembers.library.file: 'lib/missing.csv' does not exist"),
])
def test_paths_that_do_not_exist_are_named(folder, old, new, key):
    message = _error(MINIMAL.replace(old, new), folder)
    assert key in message and str(folder) in message, message


def test_a_glob_that_matches_is_accepted(folder):
    (folder / "stack" / "a_2019-01-01.tif").write_bytes(b"")
    plan = parse_plan(MINIMAL.replace('stack = "stack"', 'stack = "stack/*.tif"'), base=folder)
    assert plan.data["inputs"]["stack"] == [str(folder / "stack" / "*.tif")]


@pytest.mark.parametrize("extra, words", [
    ("[endmembers.extraction]\nmethod = 'vca'\n", "[endmembers.library] and [endmembers.extraction] exclude each other"),
    ("[endmembers.bundles]\nfile = 'bundles.csv'\n", "[endmembers.library] and [endmembers.bundles] exclude each other"),
    ("[compute]\nworkers = 2\nscheduler = 'tcp://h:8786'\n", "compute.workers and compute.scheduler: exclude each other"),
    ("[sample]\ntotal = 100\nper_class = 10\n", "sample.total and sample.per_class: exclude each other"),
    ("[dates]\ncomposite = 'median'\n", "dates.composite: needs a window"),
    ("[dates]\ndoy_window = [60, 120]\ntarget_doy = 90\n", "dates.target_doy: is the day of dates.composite"),
    ("[grid]\ncrs = 'EPSG:32633'\n", "grid.crs: grid.crs, grid.resolution and grid.bounds go together"),
    ("[masks]\nqa_bits = [3]\n", "masks.qa_bits: needs masks.qa"),
    ("[trends]\nrun = false\n", "trends.run: is false, but report.run need the trends"),
    ("[report]\nfolder = '../up'\n", "report.folder: expected a folder name inside outputs.folder"),
])
def test_choices_that_exclude_each_other_are_named(folder, extra, words):
    text = MINIMAL.replace("[outputs]", extra + "[outputs]") if extra.startswith("[endmembers") else MINIMAL + extra
    assert words in _error(text, folder)


def test_sensor_and_response_exclude_each_other(folder):
    text = MINIMAL.replace('stack = "stack"', 'stack = "stack"\nsensor = "landsat-8-oli"\nresponse = "library.csv"')
    assert "inputs.sensor and inputs.response: exclude each other" in _error(text, folder)


def test_extraction_refuses_reading_options_it_would_ignore(folder):
    text = (MINIMAL.replace('[endmembers.library]\nfile = "library.csv"\n', "[endmembers.extraction]\ncount = 3\n")
            .replace('stack = "stack"', 'stack = "stack"\nscale = 0.0001'))
    message = _error(text, folder)
    assert "endmembers.extraction" in message and "inputs.scale" in message


def test_bundles_need_a_constraint_mesma_can_solve(folder):
    text = (MINIMAL.replace('[endmembers.library]\nfile = "library.csv"', '[endmembers.bundles]\nfile = "bundles.csv"')
            + "[unmixing]\nconstraint = 'non-negative'\n")
    assert "unmixing.constraint: bundles (MESMA)" in _error(text, folder)


def test_a_plan_of_another_version_warns(folder):
    with pytest.warns(PlanVersionWarning, match="run with unmix 0.0.1"):
        plan = parse_plan('unmix_version = "0.0.1"\n' + MINIMAL, base=folder)
    assert tomllib.loads(plan.text)["unmix_version"] != "0.0.1"  # the stored plan records this version


def test_plan_check_errors_are_one_line_exit_2(folder, capsys):
    (folder / "P.toml").write_text(MINIMAL + "[dates]\nmax_shfit = 1.0\n", encoding="utf-8")
    assert main(["plan", "check", str(folder / "P.toml")]) == 2
    err = [ln for ln in capsys.readouterr().err.splitlines() if ln.strip()]
    assert len(err) == 1 and "dates.max_shfit" in err[0] and "Traceback" not in err[0], err
    (folder / "Q.toml").write_text("[inputs\nstack = 1\n", encoding="utf-8")
    assert main(["plan", "check", str(folder / "Q.toml")]) == 2
    err = [ln for ln in capsys.readouterr().err.splitlines() if ln.strip()]
    assert len(err) == 1 and "Q.toml: not a valid TOML file" in err[0] and "line 1" in err[0], err
    assert main(["plan", "check", str(folder / "none.toml")]) == 2
    assert "none.toml not found" in capsys.readouterr().err


def test_plan_template_command_writes_and_refuses_to_overwrite(folder, capsys):
    target = folder / "P.toml"
    assert main(["plan", "template", str(target)]) == 0
    assert target.read_text(encoding="utf-8") == template_text()
    assert main(["plan", "template", str(target)]) == 2
    assert "--overwrite" in capsys.readouterr().err
    assert main(["plan", "check", str(target)]) == 0
    out = capsys.readouterr().out
    assert "# $ unmix fractions " in out and "is valid; sha256" in out
