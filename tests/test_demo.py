"""The bundled demo end to end: the invented scene is recovered, and the run behaves like a command."""

from __future__ import annotations

import numpy as np
import pytest

from unmix.cli.main import main
from unmix.demo.run import run_demo
from unmix.demo.scenario import ENDMEMBERS, make_scenario


def test_scenario_is_a_valid_mixture():
    spectra = np.random.default_rng(1).uniform(0.0, 0.5, (len(ENDMEMBERS), 6))
    s = make_scenario(spectra, size=64, n_time=20)
    # Fractions of a linear mixture are a partition of the pixel (Keshava & Mustard 2002).
    np.testing.assert_allclose(s.fractions.sum(axis=1), 1.0, atol=1e-12)
    assert s.fractions.min() >= 0.0
    assert np.isnan(s.reflectance).any() and np.isfinite(s.reflectance).mean() > 0.9


def test_pivot_disc_area_matches_the_rule_of_thumb():
    # CHECKS.md (common practice): a 1 km disc is about 78.5 ha, about 873 pixels of 30 m.
    s = make_scenario(np.full((len(ENDMEMBERS), 6), 0.2), size=160, n_time=10)
    assert s.pivot_disc_ha == pytest.approx(np.pi * 500.0**2 / 1e4, rel=0.01)


@pytest.fixture(scope="module")
def demo_result(tmp_path_factory):
    out = tmp_path_factory.mktemp("demo")
    return run_demo(out, echo=lambda *_: None)  # the Quick start demo itself (160 x 160 px, 41 dates)


def test_demo_recovers_fractions(demo_result):
    # Truth is the invented scene itself; noise sd 0.004 reflectance on 6 bands. A bound of 0.05 mean
    # absolute error is a common acceptance level for fraction maps (common practice, not a standard).
    assert (demo_result.errors["mae"] < 0.05).all(), demo_result.errors


def test_demo_record_switches_sensor_and_is_read_as_delivered_products(demo_result):
    # the invented record is written as Landsat Collection 2 Level-2 scene folders (TM, then OLI) and
    # unmixed with only the library and the endmembers; the product records each date's sensor
    from unmix.demo.run import SENSORS
    from unmix.io.products import open_product

    folders = sorted((p.name for p in (demo_result.out / "stack").iterdir()), key=lambda n: n.split("_")[3])
    assert folders[0].startswith("LT05_L2SP_") and folders[-1].startswith("LC08_L2SP_")  # sorted by date
    sensors = open_product(demo_result.out / "fractions.nc")["sensor"].values.tolist()
    assert sensors[0] == SENSORS[0] and sensors[-1] == SENSORS[1] and sensors == sorted(sensors)
    assert "--sensor" not in demo_result.commands[0] and "--band-names" not in demo_result.commands[0]


def test_demo_recovers_trajectories(demo_result):
    hits = demo_result.hits.set_index(["zone", "endmember"])["hit_pct"]
    assert hits.min() >= 80.0, demo_result.hits
    assert hits[("pivot", "green_vegetation")] >= 95.0


def test_demo_clearing_rule_area_is_the_disc(demo_result):
    areas = demo_result.rule_areas.set_index("Rule")["Area [ha]"]
    assert areas["clearing"] == pytest.approx(demo_result.pivot_disc_ha, rel=0.05)


def test_demo_report_carries_the_caution(demo_result):
    text = demo_result.report.read_text(encoding="utf-8")
    assert "Validate them with field observations" in text
    assert "invented" in text


def test_demo_refuses_to_overwrite(demo_result, capsys):
    before = (demo_result.out / "fractions.nc").stat().st_mtime_ns
    code = main(["demo", "--out", str(demo_result.out), "--size", "40", "--dates", "12"])
    assert code == 2
    err = capsys.readouterr().err
    assert "--overwrite" in err and "Traceback" not in err
    assert (demo_result.out / "fractions.nc").stat().st_mtime_ns == before


def test_demo_date_checks_find_the_built_in_faults(demo_result):
    """The three faults built into the record are each found, and the trajectories stay recovered
    (test_demo_recovers_trajectories)."""
    from unmix.demo.run import BRIGHT, OFF_SEASON_DATE, SHIFTED
    from unmix.io.ledger import read_ledger_csv

    ledger = read_ledger_csv(demo_result.out / "dates.csv")
    days = ledger["time"].values.astype("datetime64[D]")
    by_fault = {row["built in"].split()[0]: np.datetime64(row["date"], "D") for _, row in demo_result.checks.iterrows()}
    off = days == OFF_SEASON_DATE
    assert not ledger["used"].values[off].any() and "window" in str(ledger["reason"].values[off][0])
    i = int(np.flatnonzero(days == by_fault["shifted"])[0])
    # measured against the shift applied with scipy.ndimage.shift: within 0.1 px, and the date left out
    assert ledger["shift_y"].values[i] == pytest.approx(-SHIFTED["shift"][0], abs=0.1)
    assert ledger["shift_x"].values[i] == pytest.approx(-SHIFTED["shift"][1], abs=0.1)
    assert not ledger["used"].values[i]
    j = int(np.flatnonzero(days == by_fault[BRIGHT["band"]])[0])
    gain = float(ledger["gain"].sel(band=BRIGHT["band"]).values[j])
    assert gain == pytest.approx(1 / BRIGHT["gain"], rel=0.03) and "gain" in str(ledger["reason"].values[j])
    # every other in-season date measures below a fifth of a pixel (Townshend et al. 1992, common practice)
    rest = ledger["used"].values.copy()
    shift = np.hypot(ledger["shift_y"].values, ledger["shift_x"].values)
    assert (shift[rest] < 0.2).all(), shift


def test_demo_sample_based_area_brackets_the_truth(demo_result):
    """The error-adjusted area of the sampled rule (Olofsson et al. 2014, eqs. 9-11) and its 95 % interval
    contain the invented true area; the report shows it next to the pixel count, with the districts."""
    row = demo_result.areas.set_index("class").loc["true"]
    assert abs(row["sample-based [ha]"] - row["true [ha]"]) <= row["± 95 % [ha]"]
    page = demo_result.report.read_text(encoding="utf-8")
    assert "Accuracy and sample-based areas" in page and "Koppies ward" in page and "Per zone and rule" in page
    assert (demo_result.out / "districts.geojson").exists() and (demo_result.out / "trajectory.tif").exists()
