"""Seasons of the seasonal Kendall test and seasonal Sen slope: named grouping schemes of real dates."""

from __future__ import annotations

import enum

import numpy as np

from ..errors import InputError

__all__ = ["SeasonScheme", "season_labels"]


class SeasonScheme(str, enum.Enum):
    """How dates are grouped into seasons for the seasonal Kendall test.

    NONE
        No seasons: the Mann-Kendall test on the whole series.
    MONTH
        Calendar month (12 seasons).
    QUARTER
        Meteorological seasons: December-February, March-May, June-August, September-November.
    """

    NONE = "none"
    MONTH = "month"
    QUARTER = "quarter"


def season_labels(times, scheme) -> np.ndarray | None:
    """Integer season label of each date under a :class:`SeasonScheme` (None for ``none``).

    ``month``: 1..12. ``quarter``: 0 = Dec-Feb, 1 = Mar-May, 2 = Jun-Aug, 3 = Sep-Nov.

    Examples
    --------
    >>> season_labels(np.array(["2020-01-15", "2020-04-15", "2020-12-15"], dtype="datetime64[D]"), "quarter").tolist()
    [0, 1, 0]
    """
    scheme = _season_scheme(scheme)
    if scheme is SeasonScheme.NONE:
        return None
    t = np.asarray(times).astype("datetime64[M]")
    month = t.astype(np.int64) % 12 + 1
    if scheme is SeasonScheme.MONTH:
        return month
    return (month % 12) // 3


def _season_scheme(scheme) -> SeasonScheme:
    if scheme is None:
        return SeasonScheme.NONE
    try:
        return SeasonScheme(scheme)
    except ValueError:
        raise InputError(
            f"unknown season scheme {scheme!r}; use one of: {', '.join(s.value for s in SeasonScheme)}"
        ) from None
