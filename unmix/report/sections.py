"""The sections of the report: each adds its headings, figures and tables to a :class:`Page`.

Figures come from :mod:`unmix.report.maps`, :mod:`unmix.report.trend_maps` and :mod:`unmix.report.series`
(every map with its CRS, a scale bar or longitude / latitude ticks and a no-data entry of its own);
tables are shown with thousands separators and readable headings, and kept for the CSV files.
"""

from __future__ import annotations

import base64
import html
import io
import re
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
import xarray as xr
from matplotlib.figure import Figure

__all__ = ["Page", "table_html", "fractions_section", "trends_section", "areas_section", "series_section",
           "accuracy_section", "quality_section"]


@dataclass
class Page:
    """The report being built: HTML parts, tables (for CSV) and figures (PNG bytes)."""

    parts: list[str] = field(default_factory=list)
    tables: dict[str, pd.DataFrame] = field(default_factory=dict)
    figures: dict[str, bytes] = field(default_factory=dict)

    def add(self, text: str) -> None:
        self.parts.append(text)

    def figure(self, name: str, fig: Figure | None, caption: str) -> None:
        """Embed ``fig`` (also kept as ``name``.png) with its caption."""
        if fig is None:
            return
        buffer = io.BytesIO()
        fig.savefig(buffer, format="png", dpi=110)
        data = buffer.getvalue()
        self.figures[name] = data
        self.add(f'<figure><img alt="{html.escape(caption)}" src="data:image/png;base64,'
                 f'{base64.b64encode(data).decode("ascii")}"><figcaption>{html.escape(caption)}</figcaption></figure>')

    def table(self, name: str, df: pd.DataFrame, **kw) -> None:
        self.tables[name] = df
        self.add(table_html(df, **kw))


def _cell(value, column: str) -> str:
    if value is None or (isinstance(value, float) and not np.isfinite(value)):
        return "–"
    if isinstance(value, (bool, np.bool_)):
        return "yes" if value else "no"
    if isinstance(value, (int, np.integer)):
        return f"{int(value):,}"
    if isinstance(value, (float, np.floating)):
        if "[%]" in column:
            return f"{float(value):.1f}"
        if "[ha]" in column or "area" in column.lower():
            return f"{float(value):,.1f}"
        return f"{float(value):,.3f}"
    return html.escape(str(value))


def table_html(df: pd.DataFrame, *, text_columns: Sequence[str] = ()) -> str:
    """A table with thousands separators, one decimal for hectares and percent, '–' for no value."""
    if df is None or not len(df):
        return '<p class="note">(no rows)</p>'
    text = set(text_columns) | {c for c in df.columns if df[c].dtype == object}
    head = "".join(f'<th class="{"text" if c in text else ""}">{html.escape(str(c))}</th>' for c in df.columns)
    body = "".join("<tr>" + "".join(f'<td class="{"text" if c in text else ""}">{_cell(v, str(c))}</td>'
                                    for c, v in zip(df.columns, row)) + "</tr>" for row in df.itertuples(index=False))
    return f"<table><thead><tr>{head}</tr></thead><tbody>{body}</tbody></table>"


def _rgb_default(names: Sequence[str]) -> tuple[str, str, str] | None:
    chosen = [n for n in names if n != "shade"][:3]
    return tuple(chosen) if len(chosen) == 3 else None


def fractions_section(page: Page, fractions: xr.Dataset, *, rgb: tuple[str, str, str] | None = None) -> None:
    """Fraction maps of the first and last period (per-pixel medians of the period's dates) and an RGB composite."""
    from .maps import default_periods, fraction_period_maps, rgb_composite_figure

    fr = fractions["fractions"]
    periods = default_periods(fr["time"].values)
    page.add("<h2>Cover fractions</h2>")
    page.add("<p>Each map is the per-pixel median of the valid dates of a period (the first and the last year of "
             "the record), so single cloudy dates do not show. Fractions run from 0 (none of the pixel) to 1 "
             "(all of it).</p>")
    page.figure("fraction_periods", fraction_period_maps(fr, periods),
                "Fraction of each endmember, " + " and ".join(p[0] for p in periods) + " (period medians)")
    names = [str(n) for n in fr["endmember"].values]
    chosen = tuple(rgb) if rgb else _rgb_default(names)
    if chosen:
        page.figure("fraction_rgb", rgb_composite_figure(fr, chosen, periods[-1]),
                    f"Fraction composite {periods[-1][0]}: red = {chosen[0]}, green = {chosen[1]}, blue = {chosen[2]}")


def trends_section(page: Page, trends: xr.Dataset) -> None:
    """Slope maps (non-significant pixels masked), trajectory maps, change dates and one map per rule."""
    from .trend_maps import change_date_maps, fdr_q_of, rule_maps, slope_maps, trajectory_maps

    q = fdr_q_of(trends)
    page.add("<h2>Trends and changes</h2>")
    if "slope" in trends and "q_value" in trends:
        page.figure("slopes", slope_maps(trends, q),
                    f"Sen slope [fraction per year]; pale grey: not significant after FDR control at q = {q:g}")
    page.figure("trajectories", trajectory_maps(trends), "Trajectory of each endmember's fraction")
    if "change_date" in trends:
        page.figure("change_dates", change_date_maps(trends), "Date of the abrupt changes (decimal year)")
    if "rule_area" in trends:
        page.add("<h3>Modification rules</h3>")
        page.figure("rules", rule_maps(trends), "Where each modification rule holds")


def areas_section(page: Page, trends: xr.Dataset) -> None:
    """Area tables: per trajectory, per rule, per zone, and the from-to table; the excluded area stated."""
    from .tables import excluded_area, from_to_table, rule_area_table, trajectory_area_table, zone_area_tables

    page.add("<h2>Areas</h2>")
    ex = excluded_area(trends)
    page.add(f"<p>The map covers {ex['map']:,.1f} ha. Left out of every share: {ex['insufficient']:,.1f} ha with "
             "too few valid dates to test" + (f", of which {ex['no_data']:,.1f} ha without any valid date"
                                               if "no_data" in ex else "")
             + ". Shares are of the valid area (the rest). Areas are pixel counts times ground pixel areas: see "
               "'Accuracy and sample-based areas' for estimates with confidence intervals.</p>")
    page.add("<h3>Per trajectory</h3>")
    page.table("trajectory_areas", trajectory_area_table(trends))
    rules = rule_area_table(trends)
    page.tables["rule_areas"] = rules  # written as CSV even when empty
    if len(rules):
        page.add("<h3>Per modification rule</h3>" + table_html(rules, text_columns=("Rule", "Expression")))
    for name, df in zone_area_tables(trends).items():
        page.add("<h3>" + ("Per zone and trajectory" if "trajectory" in name else "Per zone and rule") + "</h3>")
        page.table(name, df)
    change = from_to_table(trends)
    if change is not None:
        page.add("<h3>Cover change between periods</h3><p>Hectares moving from each cover class of the first "
                 "period (rows) to each class of the second (columns): the conversion side of the story.</p>")
        page.table("cover_change", change)


def series_section(page: Page, fractions: xr.Dataset, trends: xr.Dataset, *,
                   zones: Mapping[str, np.ndarray] | None, points: Mapping[str, tuple[float, float]] | None) -> None:
    """Time series of zone means and of chosen points, with the Sen line and its 95 % interval."""
    from .series import point_series_figure, zone_series_figure

    fr = fractions["fractions"]
    page.add("<h2>Time series</h2>")
    for em in [str(e) for e in fr["endmember"].values if str(e) != "shade"]:
        safe = re.sub(r"\W+", "_", em)
        if zones:
            page.figure(f"series_zones_{safe}", zone_series_figure(fr, dict(zones), endmember=em),
                        f"Mean {em} fraction per zone and date, with the Sen line of each zone's series")
        if points:
            page.figure(f"series_points_{safe}", point_series_figure(fr, dict(points), endmember=em, trends=trends),
                        f"{em} fraction at the chosen points, with each pixel's Sen line and its 95 % interval")


def accuracy_section(page: Page, assessment: Mapping[str, pd.DataFrame]) -> None:
    """Accuracies and sample-based areas with 95 % confidence intervals (tables of ``unmix assess``)."""
    page.add("<h2>Accuracy and sample-based areas</h2>")
    page.add("<p>A stratified random sample of the map was interpreted on reference data. Following Olofsson et "
             "al. (2014), the error matrix is expressed in estimated area proportions, and each class's area is "
             "estimated from the sample (error-adjusted) with a 95 % confidence interval, beside the mapped area "
             "(the pixel count, which is biased by the map's errors).</p>")
    for name, heading in (("accuracy", "Areas and accuracies per class"), ("overall", "Overall accuracy"),
                          ("error_matrix", "Error matrix (estimated area proportions; rows: map, columns: "
                                           "reference)")):
        if name in assessment:
            page.add(f"<h3>{heading}</h3>")
            page.table(f"accuracy_{name}" if name != "accuracy" else "accuracy", assessment[name])


def quality_section(page: Page, fractions: xr.Dataset | None, ledger, *, rmse_limit: float) -> None:
    """Valid observations per pixel, the RMSE map and the share above the limit, the ledger of the dates."""
    from .tables import ledger_table

    page.add("<h2>Data quality</h2>")
    if fractions is not None:
        from .maps import rmse_map, rmse_share, valid_count_map

        if "valid_count" in fractions:
            page.figure("valid_observations", valid_count_map(fractions["valid_count"], fractions.sizes["time"]),
                        "Valid observations per pixel (dates with a fraction)")
        if "rmse" in fractions:
            _, share = rmse_share(fractions["rmse"], rmse_limit)
            page.add(f"<p>Unmixing fit: {100 * share:.1f} % of the pixels have a median RMSE above {rmse_limit:g} "
                     "(reflectance), where the endmembers do not describe the surface well.</p>")
            page.figure("rmse", rmse_map(fractions["rmse"], rmse_limit), "Median unmixing RMSE per pixel")
    page.add("<h3>Dates used and left out</h3>")
    if ledger is None:
        page.tables["dates"] = pd.DataFrame()
        page.add('<p class="note">The products carry no date ledger.</p>')
        return
    used = int(ledger["used"].values.sum())
    page.add(f"<p>{used} of {ledger.sizes['time']} dates used. Before unmixing, every date was checked for "
             "comparability with the others: season (day-of-year window), co-registration (sub-pixel shift "
             "against a reference date), radiometry (gain and offset against a reference date of the same sensor "
             "on pseudo-invariant pixels) and the sensors on the grid.</p>")
    verdicts = list(ledger.attrs.get("verdicts", []))
    if verdicts:
        page.add("<ul>" + "".join(f"<li>{html.escape(v)}</li>" for v in verdicts) + "</ul>")
    page.table("dates", ledger_table(ledger), text_columns=("Date", "Sensor", "Reason or flag", "Used"))
