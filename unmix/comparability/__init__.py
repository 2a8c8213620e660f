"""Comparability of dates across a record: phenological windows and annual composites."""

from .phenology import (
    DAYS_PER_YEAR,
    DateWindow,
    check_date_count,
    circular_day_difference,
    closest_composite,
    day_of_year,
    day_of_year_window,
    median_composite,
    season_years,
    select_dates,
    warn_window,
    window_spread_days,
    year_groups,
)

__all__ = [
    "DAYS_PER_YEAR",
    "DateWindow",
    "check_date_count",
    "circular_day_difference",
    "closest_composite",
    "day_of_year",
    "day_of_year_window",
    "median_composite",
    "season_years",
    "select_dates",
    "warn_window",
    "window_spread_days",
    "year_groups",
]
