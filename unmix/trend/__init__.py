"""Monotonic-trend and change-point tests on time series of fractions.

Kernels on ``(..., time)`` arrays: any leading dimensions, time last (or chosen with ``axis``), NaN
marks a missing value and is dropped series by series. Nothing here loops over series in Python; the
work is done by compiled kernels (the private ``_*_numba`` modules beside each method), in parallel
over series.

One module per published method; import the functions from here (``from unmix.trend import
mann_kendall``). The module names equal the function names, so ``unmix.trend.mann_kendall`` is the
function; reach a module itself with ``from unmix.trend.mann_kendall import ...``.

===================  =================================================================================
module               holds
===================  =================================================================================
``mann_kendall``     :func:`mann_kendall` (+ corrections for serial correlation),
                     :func:`iterative_prewhiten`, :class:`MannKendallCorrection`,
                     :data:`DEFAULT_CORRECTION`, :class:`MannKendallResult`, :class:`PrewhitenResult`
``seasonal_kendall`` :func:`seasonal_kendall`
``sen_slope``        :func:`sen_slope`, :func:`seasonal_sen_slope`, :class:`SenSlopeResult`
``pettitt``          :func:`pettitt`, :class:`PettittResult`
``fdr``              :func:`fdr`, :class:`FdrMethod`
===================  =================================================================================

Functions
---------
mann_kendall
    Mann-Kendall test, with optional corrections for serial correlation.
iterative_prewhiten
    The whitened series, autocorrelation and slope behind the ``iterative-prewhiten`` correction.
seasonal_kendall
    Seasonal Kendall test (sum of per-season Mann-Kendall statistics).
sen_slope
    Theil-Sen slope, intercept and its confidence interval.
seasonal_sen_slope
    Seasonal Kendall slope estimator: median of the within-season pairwise slopes.
pettitt
    Pettitt change-point test.
fdr
    False-discovery-rate control over a map of p-values (Benjamini-Hochberg / -Yekutieli).

Dtypes
------
Test statistics and p-values are float64 (``n`` is int64) whatever the input dtype. Slope-like
fields (Sen slope, intercept, interval) keep float32 for float32 input and are float64 otherwise.
"""

from __future__ import annotations

from .fdr import FdrMethod, fdr
from .mann_kendall import (
    DEFAULT_CORRECTION,
    MannKendallCorrection,
    MannKendallResult,
    PrewhitenResult,
    iterative_prewhiten,
    mann_kendall,
)
from .pettitt import PettittResult, pettitt
from .seasonal_kendall import seasonal_kendall
from .sen_slope import SenSlopeResult, seasonal_sen_slope, sen_slope

__all__ = [
    "MannKendallCorrection",
    "FdrMethod",
    "DEFAULT_CORRECTION",
    "MannKendallResult",
    "SenSlopeResult",
    "PettittResult",
    "PrewhitenResult",
    "mann_kendall",
    "iterative_prewhiten",
    "seasonal_kendall",
    "sen_slope",
    "seasonal_sen_slope",
    "pettitt",
    "fdr",
]
