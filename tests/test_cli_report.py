"""``unmix report`` on the products of a small demo run."""

from __future__ import annotations

import pandas as pd
import pytest

from unmix.cli.main import main
from unmix.demo.run import run_demo


@pytest.fixture(scope="module")
def products(tmp_path_factory):
    out = tmp_path_factory.mktemp("products")
    run_demo(out, size=48, n_time=16, echo=lambda *_: None)
    return out


def test_report_writes_page_and_tables(products, tmp_path, capsys):
    out = tmp_path / "rep"
    code = main(["report", str(products / "trends.nc"), "--fractions", str(products / "fractions.nc"),
                 "--out", str(out), "--title", "Test title"])
    assert code == 0, capsys.readouterr().err
    page = (out / "report.html").read_text(encoding="utf-8")
    assert "Test title" in page and "Validate them with field observations" in page
    areas = pd.read_csv(out / "trajectory_areas.csv")
    # every pixel of each endmember map has exactly one label: 48 x 48 pixels per endmember
    assert (areas.groupby("endmember")["pixels"].sum() == 48 * 48).all()
    rules = pd.read_csv(out / "rule_areas.csv")
    assert set(rules["rule"]) == {"desertification", "clearing", "recovery"}


def test_report_refuses_overwrite_and_non_trend_products(products, tmp_path, capsys):
    out = tmp_path / "rep"
    assert main(["report", str(products / "trends.nc"), "--out", str(out)]) == 0
    before = (out / "report.html").read_bytes()
    capsys.readouterr()
    assert main(["report", str(products / "trends.nc"), "--out", str(out)]) == 2
    assert "--overwrite" in capsys.readouterr().err
    assert (out / "report.html").read_bytes() == before
    assert main(["report", str(products / "fractions.nc"), "--out", str(tmp_path / "r2")]) == 2
    err = capsys.readouterr().err
    assert "trajectory" in err and "Traceback" not in err
