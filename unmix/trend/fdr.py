"""False-discovery-rate control over a map of p-values (Benjamini-Hochberg / -Yekutieli)."""

from __future__ import annotations

import enum

import numpy as np

from unmix.errors import InputError, UnknownNameError

__all__ = ["FdrMethod", "fdr"]


class FdrMethod(str, enum.Enum):
    """False-discovery-rate procedure: ``bh`` (Benjamini & Hochberg 1995), ``by`` (Benjamini &
    Yekutieli 2001, valid under any dependence)."""

    BH = "bh"
    BY = "by"


def fdr(p, q=0.05, *, method="bh"):
    """False-discovery-rate control over all p-values of an array (one family).

    Parameters
    ----------
    p : (...) array_like
        p-values in [0, 1], any shape (e.g. a map); NaN = no test, ignored.
    q : float, default 0.05
        False-discovery rate to control, in (0, 1).
    method : FdrMethod or str, default "bh"
        ``"bh"``: Benjamini & Hochberg (1995), for independent or positively dependent tests;
        ``"by"``: Benjamini & Yekutieli (2001), valid under any dependence (more conservative).

    Returns
    -------
    reject : (...) bool ndarray
        True where the null hypothesis is rejected (step-up: the k smallest p-values, k the largest
        i with p_(i) <= i q / (m c(m)), c(m) = 1 for bh, sum_{j<=m} 1/j for by). False at NaN.
    adjusted : (...) float64 ndarray
        Adjusted p-values (q-values), as ``scipy.stats.false_discovery_control``; NaN at NaN.

    References
    ----------
    Benjamini, Y., Hochberg, Y. (1995). Controlling the false discovery rate: a practical and
    powerful approach to multiple testing. J. R. Stat. Soc. B 57(1), 289-300.
    https://doi.org/10.1111/j.2517-6161.1995.tb02031.x
    Benjamini, Y., Yekutieli, D. (2001). The control of the false discovery rate in multiple
    testing under dependency. Annals of Statistics 29(4), 1165-1188.
    https://doi.org/10.1214/aos/1013699998

    Examples
    --------
    >>> from unmix.trend import fdr
    >>> reject, adj = fdr([0.001, 0.01, 0.03, 0.5], q=0.05)
    >>> reject.tolist()
    [True, True, True, False]
    """
    try:
        meth = FdrMethod(method)
    except ValueError:
        raise UnknownNameError(f"unknown FDR method {method!r}; use 'bh' or 'by'.") from None
    if not (isinstance(q, (int, float, np.floating)) and 0 < q < 1):
        raise InputError(f"q (false-discovery rate) must be between 0 and 1, e.g. 0.05; got {q!r}.")
    p = np.asarray(p, dtype=np.float64)
    flat = p.reshape(-1)
    valid = ~np.isnan(flat)
    pv = flat[valid]
    if pv.size and (pv.min() < 0 or pv.max() > 1):
        raise InputError("p-values must lie in [0, 1] (NaN for no test); got values outside.")
    reject = np.zeros(flat.shape, dtype=bool)
    adjusted = np.full(flat.shape, np.nan)
    m = pv.size
    if m:
        order = np.argsort(pv, kind="stable")
        ps = pv[order]
        i = np.arange(1, m + 1, dtype=np.float64)
        cm = np.sum(1.0 / i) if meth is FdrMethod.BY else 1.0
        # step-up rejection, on the definition rather than on rounded adjusted values
        below = np.flatnonzero(ps <= i * q / (m * cm))
        rej_sorted = np.zeros(m, dtype=bool)
        if below.size:
            rej_sorted[: below[-1] + 1] = True
        adj_sorted = np.minimum.accumulate((ps * (m * cm / i))[::-1])[::-1]
        adj_sorted = np.clip(adj_sorted, 0.0, 1.0)
        adj = np.empty(m)
        adj[order] = adj_sorted
        rej = np.empty(m, dtype=bool)
        rej[order] = rej_sorted
        adjusted[valid] = adj
        reject[valid] = rej
    return reject.reshape(p.shape), adjusted.reshape(p.shape)
