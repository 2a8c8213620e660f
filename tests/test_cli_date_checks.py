"""The date checks inside ``unmix fractions`` and ``unmix survey``: the ledger, the verdicts and bad input.

The stack is a textured ground (smoothed noise, like stones and shrub clumps) mixed from the fixture's
invented endmembers, seen on ten dates with sensor noise. One date is moved by a known sub-pixel shift
with scipy.ndimage.shift, one date's band is scaled by a known gain, one date lies outside the season.
"""

from __future__ import annotations

import dataclasses

import netCDF4
import numpy as np
import pandas as pd
import pytest
from conftest import BANDS, ENDMEMBERS, NODATA
from scipy import ndimage

from unmix.cli.main import main
from unmix.errors import ComparabilityWarning

DATES = [f"{y}-09-{d:02d}" for y, d in zip(range(2010, 2019), (3, 10, 5, 12, 1, 8, 4, 11, 6))] + ["2014-02-15"]
SHIFTED, BRIGHT, OFF_SEASON = "2013-09-12", "2016-09-04", "2014-02-15"
SHIFT = (1.2, -0.9)  # pixels (y, x): 1.5 px


@pytest.fixture(scope="module")
def textured_stack(tmp_path_factory):
    from conftest import _write_geotiff

    root = tmp_path_factory.mktemp("textured") / "stack"
    root.mkdir()
    rng = np.random.default_rng(3)
    size = 128
    fields = [ndimage.gaussian_filter(rng.normal(size=(size, size)), 1.5) for _ in range(3)]
    weights = np.exp(np.stack([f / f.std() for f in fields]))  # positive, textured
    ground = weights / weights.sum(axis=0)  # (endmember, y, x) on the simplex
    M = np.array(list(ENDMEMBERS.values()))
    for date in DATES:
        refl = np.einsum("kyx,kb->byx", ground, M) + rng.normal(0, 0.003, (len(BANDS), size, size))
        if date == SHIFTED:
            refl = np.stack([ndimage.shift(b, SHIFT, order=3, mode="nearest") for b in refl])
        if date == BRIGHT:
            refl[BANDS.index("B5")] *= 1.1
        _write_geotiff(root / f"scene_{date}.tif", np.round(refl / 1e-4).astype(np.int16), nodata=NODATA,
                       blocksize=64)
    return root


def _stack_args(stack):
    return [str(stack), "--sensor", "landsat-8-oli", "--band-names", ",".join(BANDS), "--scale", "0.0001"]


def test_fractions_records_the_ledger_everywhere(textured_stack, make_library, tmp_path, capsys):
    out = tmp_path / "out"
    with pytest.warns(ComparabilityWarning) as caught:
        code = main(["fractions", *_stack_args(textured_stack), "--library", str(make_library()),
                     "--doy-window", "230-270", "--out", str(out)])
    err = capsys.readouterr().err
    assert code == 0, err
    text = " ".join(str(w.message) for w in caught)
    assert BRIGHT in text  # the band scaled by 1.1 is flagged by date
    ledger = pd.read_csv(out / "dates.csv", dtype={"reason": str}, keep_default_na=False)
    assert ledger["date"].tolist() == sorted(DATES)
    row = ledger.set_index("date")
    # the shifted date: measured within 0.1 px of the shift applied with scipy.ndimage.shift, and left out
    # (1.5 px > the default limit of 0.5 px; Townshend et al. 1992 give 0.2 px as the warning level)
    assert float(row.loc[SHIFTED, "shift_y"]) == pytest.approx(-SHIFT[0], abs=0.1)
    assert float(row.loc[SHIFTED, "shift_x"]) == pytest.approx(-SHIFT[1], abs=0.1)
    assert not row.loc[SHIFTED, "used"] and "shifted" in row.loc[SHIFTED, "reason"]
    # every other in-season date is registered: below a fifth of a pixel
    others = row.drop(index=[SHIFTED, OFF_SEASON])
    assert (np.hypot(others["shift_y"].astype(float), others["shift_x"].astype(float)) < 0.2).all()
    # the bright date: gain maps the date onto the reference (reference = gain * date + offset): 1/1.1
    assert float(row.loc[BRIGHT, "gain_B5"]) == pytest.approx(1 / 1.1, rel=0.02)
    assert row.loc[BRIGHT, "used"] and "gain" in row.loc[BRIGHT, "reason"]
    assert not row.loc[OFF_SEASON, "used"] and "window" in row.loc[OFF_SEASON, "reason"]
    # the same ledger inside fractions.nc (read with netCDF4, outside the package) ...
    with netCDF4.Dataset(out / "fractions.nc") as nc:
        used = nc["date_used"][:].astype(bool)
        shift_y = np.asarray(nc["date_shift_y"][:], dtype=float)
        assert nc.dimensions["time"].size == int(used.sum()) == 8
    np.testing.assert_array_equal(used, ledger["used"].astype(bool).to_numpy())
    np.testing.assert_allclose(shift_y, pd.to_numeric(ledger["shift_y"], errors="coerce"), atol=1e-6)
    # ... carried into trends.nc, and shown by the report (its dates.csv and its page)
    assert main(["trends", str(out / "fractions.nc"), "--out", str(out), "--min-valid", "5"]) == 0
    with netCDF4.Dataset(out / "trends.nc") as nc:
        np.testing.assert_array_equal(nc["date_used"][:].astype(bool), used)
    assert main(["report", str(out / "trends.nc"), "--fractions", str(out / "fractions.nc"),
                 "--out", str(out / "report")]) == 0
    shown = pd.read_csv(out / "report" / "dates.csv", keep_default_na=False)
    assert shown["Date"].tolist() == ledger["date"].tolist()
    assert shown["Used"].eq("yes").tolist() == ledger["used"].astype(bool).tolist()
    np.testing.assert_allclose(pd.to_numeric(shown["Shift y [px]"], errors="coerce"),
                               np.round(pd.to_numeric(ledger["shift_y"], errors="coerce"), 2), atol=1e-9)
    page = (out / "report" / "report.html").read_text(encoding="utf-8")
    assert "Dates used and left out" in page and SHIFTED in page


def test_correct_shift_resamples_instead_of_leaving_out(textured_stack, make_library, tmp_path, capsys):
    out = tmp_path / "out"
    with pytest.warns(ComparabilityWarning):
        code = main(["fractions", *_stack_args(textured_stack), "--library", str(make_library()),
                     "--doy-window", "230-270", "--correct-shift", "--out", str(out)])
    assert code == 0, capsys.readouterr().err
    ledger = pd.read_csv(out / "dates.csv", keep_default_na=False).set_index("date")
    assert ledger.loc[SHIFTED, "used"] and "resampled" in ledger.loc[SHIFTED, "reason"]


def test_checks_can_be_turned_off(textured_stack, make_library, tmp_path, capsys):
    out = tmp_path / "out"
    code = main(["fractions", *_stack_args(textured_stack), "--library", str(make_library()),
                 "--no-registration-check", "--no-radiometry-check", "--out", str(out)])
    captured = capsys.readouterr()
    assert code == 0, captured.err
    ledger = pd.read_csv(out / "dates.csv", keep_default_na=False)
    assert ledger["used"].astype(bool).all() and "shift_y" not in ledger and "gain_B5" not in ledger
    # the cube layer's words, and the option that acts on the condition added where the command prints it
    assert "co-registration: not checked (turned off) [--no-registration-check]" in captured.err + captured.out


def test_option_hints_name_options_of_both_commands():
    from unmix.cli._comparability import OPTION_OF
    from unmix.cli.fractions import fractions
    from unmix.cli.survey import survey
    from unmix.cube.date_checks import CheckSettings

    assert set(OPTION_OF) <= {f.name for f in dataclasses.fields(CheckSettings)}
    for command in (fractions, survey):
        assert set(OPTION_OF.values()) <= {o for p in command.params for o in p.opts}


def test_survey_prints_the_ledger_without_unmixing(textured_stack, tmp_path, capsys):
    csv = tmp_path / "ledger.csv"
    with pytest.warns(ComparabilityWarning):
        code = main(["survey", *_stack_args(textured_stack), "--doy-window", "230-270", "--ledger-csv", str(csv)])
    captured = capsys.readouterr()
    assert code == 0, captured.err
    text = captured.out + captured.err
    for date in DATES:
        assert date in text
    assert "co-registration" in text and "radiometry" in text and "season" in text and "resolution" in text
    assert "8 of 10 dates would be used" in text
    assert not list(tmp_path.glob("*.nc"))  # nothing unmixed
    ledger = pd.read_csv(csv, keep_default_na=False).set_index("date")
    assert not ledger.loc[SHIFTED, "used"]


def test_survey_of_a_product_folder_shows_its_ledger(textured_stack, make_library, tmp_path, capsys):
    out = tmp_path / "out"
    with pytest.warns(ComparabilityWarning):
        assert main(["fractions", *_stack_args(textured_stack), "--library", str(make_library()),
                     "--doy-window", "230-270", "--out", str(out)]) == 0
    capsys.readouterr()
    assert main(["survey", str(out)]) == 0
    text = "".join(capsys.readouterr())
    assert "ledger of the products" in text and SHIFTED in text and "8 of 10 dates" in text


@pytest.mark.parametrize("extra, expect", [
    (["--reference-date", "2030-01-01"], "2030-01-01"),
    (["--registration-band", "B9"], "B9"),
    (["--doy-window", "1-30"], "1"),
    (["--doy-window", "sixty"], "--doy-window"),
])
def test_bad_input_is_one_line(textured_stack, make_library, tmp_path, capsys, extra, expect):
    out = tmp_path / "out"
    code = main(["fractions", *_stack_args(textured_stack), "--library", str(make_library()), *extra,
                 "--out", str(out)])
    err = capsys.readouterr().err
    lines = [ln for ln in err.strip().splitlines() if ln]
    assert code == 2 and len(lines) == 1 and lines[0].startswith("unmix: error:"), err
    assert expect in lines[0]
    assert not (out / "fractions.nc").exists() and not (out / "dates.csv").exists()


def test_warnings_print_as_one_line_each_in_a_real_process(textured_stack, tmp_path):
    # outside pytest's own warning capture: the command's warnings reach stderr as lines of their own,
    # without the Python file, line number and source line of Python's default format
    import subprocess
    import sys

    proc = subprocess.run([sys.executable, "-m", "unmix.cli.main", "survey", *_stack_args(textured_stack),
                           "--doy-window", "230-270"], capture_output=True, text=True, cwd=tmp_path, timeout=300)
    assert proc.returncode == 0, proc.stderr
    lines = [line for line in proc.stderr.splitlines() if line.strip()]
    warned = [line for line in lines if line.startswith("unmix: warning: ")]
    assert any(BRIGHT in line for line in warned)  # the band scaled by 1.1, named by date
    assert not any(".py:" in line or "ComparabilityWarning" in line for line in lines)
