"""A self-contained HTML report (figures embedded as PNG) from fraction and trend products.

:func:`build_report` assembles the page from the sections of :mod:`unmix.report.sections`; it returns the
page, its tables (written as CSV beside it) and its figures (written as PNG beside it). Nothing here
touches a path: :mod:`unmix.io.report` writes the files.
"""

from __future__ import annotations

import html
from collections.abc import Mapping
from datetime import datetime, timezone

import numpy as np
import pandas as pd
import xarray as xr

from .. import __version__
from .methods import LABEL_MEANINGS, METHODS, REFERENCES, parameters_table
from .print_css import PRINT_CSS
from .sections import (
    Page,
    accuracy_section,
    areas_section,
    fractions_section,
    quality_section,
    series_section,
    trends_section,
)

__all__ = ["CAUTION", "build_report"]

#: The caution every report and product carries.
CAUTION = (
    "Fractions, trends and trajectory labels are model estimates from satellite data. Validate them "
    "with field observations before they inform any land-management decision, and defer to local "
    "regulations and licensed professional practice."
)

# Colours: dark text on white, one muted accent; readable in grey print. Print rules keep figures and table
# rows whole and let wide tables wrap instead of running off the page.
_STYLE = """
body{font-family:system-ui,sans-serif;max-width:1100px;margin:2em auto;padding:0 1em;color:#222;line-height:1.45}
h1{font-size:1.55em;margin-bottom:.2em}h2{font-size:1.25em;border-bottom:1px solid #bbb;margin-top:1.8em}
h3{font-size:1.05em;margin-bottom:.3em}
table{border-collapse:collapse;font-size:.85em;margin:.6em 0;max-width:100%}
td,th{border:1px solid #c8c8c8;padding:.2em .55em;text-align:right;vertical-align:top;overflow-wrap:break-word}
th{background:#eeeeee}td:first-child,th:first-child{text-align:left}td.text,th.text{text-align:left}
.caution{border:2px solid #444;padding:.6em 1em;background:#f6f6f6}
.note{color:#444;font-size:.9em}.summary li{margin:.15em 0}
figure{margin:1em 0;break-inside:avoid}figure img{max-width:100%;height:auto}
figcaption{font-size:.85em;color:#444}
dl dt{font-weight:600}dl dd{margin:0 0 .4em 1.2em}
@media print{h2{break-after:avoid}a{color:#222;text-decoration:none}}
""" + PRINT_CSS


def build_report(
    fractions: xr.Dataset | None,
    trends: xr.Dataset,
    *,
    title: str = "Land-cover fractions and their trends",
    extra_sections: list[tuple[str, str]] | None = None,
    zones: Mapping[str, np.ndarray] | None = None,
    points: Mapping[str, tuple[float, float]] | None = None,
    assessment: Mapping[str, pd.DataFrame] | None = None,
    rmse_limit: float = 0.025,
    rgb: tuple[str, str, str] | None = None,
) -> tuple[str, dict[str, pd.DataFrame], dict[str, bytes]]:
    """Build the HTML report, its tables and its figures.

    Parameters
    ----------
    fractions : xarray.Dataset or None
        A fractions product (``fractions`` (time, endmember, y, x), ``rmse``, ``valid_count``); when given,
        period composites, the RGB composite, time series and the data-quality maps are shown.
    trends : xarray.Dataset
        A trend product (``trajectory``, ``slope``, ``q_value``, ``change_date``, rule maps, and the zone
        and cover-change tables when it was made with them).
    title : str
        Report title.
    extra_sections : list of (heading, html) pairs, optional
        Sections added before the methods (for example a comparison with known truth).
    zones : mapping, optional
        Zone name -> (y, x) boolean mask on the products' grid, for the zone-mean time series.
    points : mapping, optional
        Point label -> (x, y) in the products' CRS, for the point time series.
    assessment : mapping, optional
        The tables of ``unmix assess`` (``accuracy``, ``error_matrix``, ``overall``): accuracies and the
        sample-based areas with their 95 % confidence intervals.
    rmse_limit : float
        RMSE [reflectance] above which a pixel counts as poorly modelled in the data-quality section.
    rgb : three endmember names, optional
        Endmembers shown as red, green and blue in the fraction composite (default: the first three that are
        not shade).

    Returns
    -------
    html_text : str
        A self-contained HTML page (figures embedded).
    tables : dict of str -> pandas.DataFrame
        ``trajectory_areas``, ``rule_areas``, ``dates`` (the ledger; empty without one), ``parameters`` and,
        when present, the zone, cover-change and accuracy tables: for writing as CSV beside the report.
    figures : dict of str -> bytes
        Each figure as PNG, for writing beside the report.
    """
    page = Page()
    ledger = _ledger(trends if fractions is None else fractions)
    page.add("<h1>" + html.escape(title) + "</h1>")
    page.add(f'<p class="caution"><strong>Caution.</strong> {html.escape(CAUTION)}</p>')
    page.add(_summary(fractions, trends, ledger))
    if fractions is not None:
        fractions_section(page, fractions, rgb=rgb)
    trends_section(page, trends)
    areas_section(page, trends)
    if fractions is not None and (zones or points):
        series_section(page, fractions, trends, zones=zones, points=points)
    if assessment:
        accuracy_section(page, assessment)
    quality_section(page, fractions, ledger, rmse_limit=rmse_limit)
    for heading, body in extra_sections or []:
        page.add(f"<h2>{html.escape(heading)}</h2>{body}")
    page.tables["parameters"] = parameters_table({"fractions": fractions, "trends": trends})
    page.add(_methods(page.tables["parameters"]))
    plan = trends.attrs.get("plan")
    if plan:
        page.add("<h3>Plan of this run</h3><p>The plan file this run was made from (<code>unmix run</code>); running "
                 "it again repeats the job.</p><pre style=\"white-space:pre-wrap;overflow-wrap:anywhere;font-size:.8em\">"
                 + html.escape(str(plan)) + "</pre>")
    page.add(f'<p class="caution"><strong>Caution.</strong> {html.escape(CAUTION)}</p>')
    page.add(f"<p class=\"note\">unmix {__version__}; report built "
             f"{datetime.now(timezone.utc).isoformat(timespec='seconds')}.</p>")
    text = (f"<!DOCTYPE html><html lang=\"en\"><head><meta charset=\"utf-8\">"
            f"<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\"><title>{html.escape(title)}"
            f"</title><style>{_STYLE}</style></head><body>{''.join(page.parts)}</body></html>")
    return text, page.tables, page.figures


def _ledger(product: xr.Dataset):
    from ..io.ledger import ledger_from_product, ledger_variable_names

    return ledger_from_product(product) if ledger_variable_names(product) else None


def _summary(fractions, trends: xr.Dataset, ledger) -> str:
    from ._mapping import map_frame

    frame = map_frame(trends["trajectory"])
    ny, nx = trends.sizes["y"], trends.sizes["x"]
    items = [f"Grid: {ny:,} × {nx:,} pixels in {html.escape(frame.crs_name)}."]
    if fractions is not None:
        t = fractions["time"].values.astype("datetime64[D]")
        items.append(f"Record: {t.size:,} dates used, {t[0]} to {t[-1]}"
                     + (f" ({int(ledger['used'].values.sum())} of {ledger.sizes['time']} dates offered; see "
                        "'Dates used and left out')" if ledger is not None else "") + ".")
    items.append("Endmembers: " + ", ".join(html.escape(str(e)) for e in trends["endmember"].values) + ".")
    if "rule_area" in trends:
        items += [f"Rule <em>{html.escape(str(r))}</em>: {float(a):,.1f} ha ({100 * float(s):.1f} % of the valid "
                  "area)." for r, a, s in zip(trends["rule"].values, trends["rule_area"].values,
                                              trends["rule_share"].values)]
    return "<ul class=\"summary\">" + "".join(f"<li>{i}</li>" for i in items) + "</ul>"


def _methods(params: pd.DataFrame) -> str:
    from .sections import table_html

    parts = ["<h2>Methods in plain words</h2>"]
    parts += [f"<h3>{html.escape(h)}</h3><p>{html.escape(p)}</p>" for h, p in METHODS]
    parts.append("<h3>What each trajectory label means</h3><dl>"
                 + "".join(f"<dt>{html.escape(k.replace('_', ' '))}</dt><dd>{html.escape(v)}</dd>"
                           for k, v in LABEL_MEANINGS.items()) + "</dl>")
    parts.append("<h3>Parameters of this run</h3>" + table_html(params, text_columns=("Step", "Parameter", "Value")))
    parts.append("<h3>References</h3><ul>" + "".join(f"<li>{html.escape(r)}</li>" for r in REFERENCES) + "</ul>")
    return "".join(parts)
