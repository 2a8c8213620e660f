"""Figures, area tables and a self-contained HTML report built from fraction and trend products.

Everything here builds content (matplotlib figures, pandas tables, an HTML string); writing files is
left to :mod:`unmix.io.report`.
"""

from .figures import fraction_maps_figure, series_figure, trajectory_maps_figure
from .html import CAUTION, build_report
from .tables import ledger_table, rule_area_table, trajectory_area_table

__all__ = [
    "CAUTION",
    "build_report",
    "fraction_maps_figure",
    "ledger_table",
    "rule_area_table",
    "series_figure",
    "trajectory_area_table",
    "trajectory_maps_figure",
]
