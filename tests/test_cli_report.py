"""``unmix report`` on the products of a small demo run."""

from __future__ import annotations

import re

import numpy as np
import pandas as pd
import pytest

from unmix.cli.main import main
from unmix.demo.run import run_demo


@pytest.fixture(scope="module")
def products(tmp_path_factory):
    out = tmp_path_factory.mktemp("products")
    run_demo(out, size=96, n_time=32, echo=lambda *_: None)
    return out


def test_report_writes_page_and_tables(products, tmp_path, capsys):
    out = tmp_path / "rep"
    code = main(["report", str(products / "trends.nc"), "--fractions", str(products / "fractions.nc"),
                 "--zones", str(products / "districts.geojson"), "--zone-field", "district",
                 "--points", str(products / "points.csv"), "--assessment", str(products / "assessment"),
                 "--out", str(out), "--title", "Test title"])
    assert code == 0, capsys.readouterr().err
    page = (out / "report.html").read_text(encoding="utf-8")
    assert "Test title" in page and "Validate them with field observations" in page
    # every section the deliverable names
    for heading in ("Cover fractions", "Trends and changes", "Areas", "Per zone and trajectory",
                    "Cover change between periods", "Time series", "Accuracy and sample-based areas",
                    "Data quality", "Dates used and left out", "Methods in plain words",
                    "What each trajectory label means", "Parameters of this run", "References"):
        assert f">{heading}<" in page, heading
    # every figure is embedded and opens as an image (decoded with matplotlib's PNG reader), and is also
    # written beside the page
    import base64
    import io

    from matplotlib import image

    embedded = re.findall(r'src="data:image/png;base64,([^"]+)"', page)
    files = sorted((out / "figures").glob("*.png"))
    assert len(embedded) == len(files) >= 10
    for data in embedded:
        assert image.imread(io.BytesIO(base64.b64decode(data)), format="png").ndim == 3
    areas = pd.read_csv(out / "trajectory_areas.csv")
    # every pixel of each endmember map has exactly one label: 96 x 96 pixels per endmember
    assert (areas.groupby("Endmember")["Pixels"].sum() == 96 * 96).all()
    # 30 m pixels are 0.09 ha (unit definition)
    np.testing.assert_allclose(areas["Area [ha]"], areas["Pixels"] * 0.09, rtol=1e-9)
    rules = pd.read_csv(out / "rule_areas.csv")
    assert set(rules["Rule"]) == {"desertification", "clearing", "recovery"}
    # the map's area in the page (96 x 96 x 0.09 ha = 829.44 ha);
    # the cover-change table's classes and the ledger are there)
    assert "The map covers 829.4 ha" in page
    ledger = pd.read_csv(products / "dates.csv", keep_default_na=False)
    shown = pd.read_csv(out / "dates.csv", keep_default_na=False)
    assert shown["Date"].tolist() == ledger["date"].tolist()


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


def _changed_fractions(products, tmp_path, change):
    """The demo's fractions product with one thing changed, written with the project's writer."""
    from unmix.io.products import grid_mapping_attrs, open_product, write_netcdf

    ds = open_product(products / "fractions.nc").load()
    if change == "dates":
        ds = ds.isel(time=slice(1, None))
    elif change in ("transform", "crs"):
        gm = ds["spatial_ref"].attrs
        c, a, b, f, d, e = (float(v) for v in gm["GeoTransform"].split())
        crs = "EPSG:4326" if change == "crs" else gm["crs_wkt"]
        shift = a if change == "transform" else 0.0  # one pixel to the east
        ds = ds.assign_coords(spatial_ref=((), 0, grid_mapping_attrs(crs, (a, b, c + shift, d, e, f))))
        for var in ds.data_vars.values():
            var.attrs.pop("crs_wkt", None)
            var.attrs.pop("transform", None)
    elif change == "shape":
        ds = ds.isel(y=slice(0, -1))
    return write_netcdf(ds, tmp_path / f"fractions_{change}.nc")


@pytest.mark.parametrize("change, said", [("dates", "dates"), ("transform", "transform"), ("crs", "CRS EPSG:32734 against EPSG:4326"),
                                          ("shape", "grid shape")])
def test_report_refuses_products_of_another_scene(products, tmp_path, capsys, change, said):
    other = _changed_fractions(products, tmp_path, change)
    out = tmp_path / "rep"
    assert main(["report", str(products / "trends.nc"), "--fractions", str(other), "--out", str(out)]) == 2
    lines = [ln for ln in capsys.readouterr().err.splitlines() if ln.strip()]
    assert len(lines) == 1 and "are not from the same scene" in lines[0] and said in lines[0], lines
    assert not out.exists() or list(out.iterdir()) == []  # nothing written, no claim left
