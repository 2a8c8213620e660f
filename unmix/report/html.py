"""A self-contained HTML report (figures embedded as PNG) from fraction and trend products."""

from __future__ import annotations

import base64
import html
import io
import json
from datetime import datetime, timezone

import numpy as np
import pandas as pd
import xarray as xr
from matplotlib.figure import Figure

from .. import __version__
from .figures import fraction_maps_figure, trajectory_maps_figure
from .tables import ledger_table, rule_area_table, trajectory_area_table

__all__ = ["CAUTION", "build_report"]

#: The caution every report and product carries.
CAUTION = (
    "Fractions, trends and trajectory labels are model estimates from satellite data. Validate them "
    "with field observations before they inform any land-management decision, and defer to local "
    "regulations and licensed professional practice."
)

_STYLE = """
body{font-family:system-ui,sans-serif;max-width:1100px;margin:2em auto;color:#222;line-height:1.4}
h1{font-size:1.5em}h2{font-size:1.2em;border-bottom:1px solid #ccc;margin-top:1.6em}
table{border-collapse:collapse;font-size:.85em;margin:.6em 0}
td,th{border:1px solid #ccc;padding:.2em .6em;text-align:right}th{background:#f3f1ec}
td:first-child,th:first-child{text-align:left}
.caution{background:#fff6e0;border-left:4px solid #d99a00;padding:.6em 1em}
img{max-width:100%}code{font-size:.9em}
"""


def _png(fig: Figure) -> str:
    buffer = io.BytesIO()
    fig.savefig(buffer, format="png", dpi=110)
    return base64.b64encode(buffer.getvalue()).decode("ascii")


def _table_html(df: pd.DataFrame) -> str:
    return df.to_html(index=False, float_format=lambda v: f"{v:,.2f}", na_rep="–", border=0)


def _ledger(product: xr.Dataset):
    from ..io.ledger import ledger_from_product

    if not any("ledger_name" in v.attrs for v in product.data_vars.values()):
        return None
    names = [k for k, v in product.data_vars.items() if "ledger_name" in v.attrs]
    return ledger_from_product(product[names].load())


def build_report(
    fractions: xr.Dataset | None,
    trends: xr.Dataset,
    *,
    title: str = "Land-cover fractions and their trends",
    extra_sections: list[tuple[str, str]] | None = None,
) -> tuple[str, dict[str, pd.DataFrame]]:
    """Build the HTML report and its tables.

    Parameters
    ----------
    fractions : xarray.Dataset or None
        A fractions product (``fractions`` (time, endmember, y, x)); when given, maps of the first and
        last date are shown.
    trends : xarray.Dataset
        A trend product with ``trajectory`` (endmember, y, x) and optional rule maps.
    title : str
        Report title.
    extra_sections : list of (heading, html) pairs, optional
        Sections added after the standard ones (for example a comparison with known truth).

    Returns
    -------
    html_text : str
        A self-contained HTML page (figures embedded).
    tables : dict of str -> pandas.DataFrame
        ``"trajectory_areas"``, ``"rule_areas"`` and ``"dates"`` (the date ledger; empty when the products
        carry none), for writing as CSV beside the report.
    """
    ledger = _ledger(trends if fractions is None else fractions)
    tables = {"trajectory_areas": trajectory_area_table(trends), "rule_areas": rule_area_table(trends),
              "dates": ledger_table(ledger) if ledger is not None else pd.DataFrame()}
    parts = [f"<h1>{html.escape(title)}</h1>",
             f'<p class="caution"><strong>Caution.</strong> {html.escape(CAUTION)}</p>']

    if fractions is not None:
        fr = fractions["fractions"]
        t0 = np.datetime_as_string(fr["time"].values[0], unit="D")
        t1 = np.datetime_as_string(fr["time"].values[-1], unit="D")
        parts.append("<h2>Cover fractions</h2>")
        parts.append(f"<p>{fr.sizes['time']} dates from {t0} to {t1}; "
                     f"{fr.sizes['y']} × {fr.sizes['x']} pixels; endmembers: "
                     f"{', '.join(html.escape(str(n)) for n in fr['endmember'].values)}.</p>")
        parts.append(f'<img alt="fraction maps" src="data:image/png;base64,{_png(fraction_maps_figure(fr))}">')
        if "rmse" in fractions:
            rmse = np.asarray(fractions["rmse"].values, dtype=float)
            parts.append(f"<p>Model fit: median RMSE {np.nanmedian(rmse):.4f}, 99th percentile "
                         f"{np.nanpercentile(rmse, 99):.4f} (reflectance). High RMSE marks pixels the "
                         f"endmembers do not describe.</p>")

    parts.append("<h2>Trajectories</h2>")
    parts.append(f'<img alt="trajectory maps" '
                 f'src="data:image/png;base64,{_png(trajectory_maps_figure(trends["trajectory"]))}">')
    parts.append(_table_html(tables["trajectory_areas"]))
    if len(tables["rule_areas"]):
        parts.append("<h2>Modification rules</h2>")
        parts.append(_table_html(tables["rule_areas"]))

    if ledger is not None:
        used = int(ledger["used"].values.sum())
        parts.append("<h2>Dates used and left out</h2>")
        parts.append(f"<p>{used} of {ledger.sizes['time']} dates used. Before unmixing, every date was checked "
                     "for comparability with the others: season (day-of-year window), co-registration (sub-pixel "
                     "shift against a reference date by phase correlation), radiometry (gain and offset against "
                     "the reference date on pseudo-invariant pixels) and the sensors on the grid.</p>")
        verdicts = list(ledger.attrs.get("verdicts", []))
        if verdicts:
            parts.append("<ul>" + "".join(f"<li>{html.escape(v)}</li>" for v in verdicts) + "</ul>")
        parts.append(tables["dates"].to_html(index=False, na_rep="–", border=0))

    for heading, body in extra_sections or []:
        parts.append(f"<h2>{html.escape(heading)}</h2>{body}")

    provenance = {k: v for k, v in trends.attrs.items() if isinstance(v, (str, int, float))}
    parts.append("<h2>Provenance</h2><pre>" + html.escape(json.dumps(provenance, indent=1, default=str))
                 + "</pre>")
    parts.append(f"<p><small>unmix {__version__}, report built "
                 f"{datetime.now(timezone.utc).isoformat(timespec='seconds')}.</small></p>")
    page = (f"<!DOCTYPE html><html lang=\"en\"><head><meta charset=\"utf-8\"><title>{html.escape(title)}"
            f"</title><style>{_STYLE}</style></head><body>{''.join(parts)}</body></html>")
    return page, tables
