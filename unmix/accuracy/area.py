"""Error matrix, accuracies and error-adjusted areas of a map from a stratified random sample.

The strata are the map classes; the sample count matrix ``n_ij`` counts sample units of map class
``i`` (rows) whose reference class is ``j`` (columns). With ``W_i`` the share of the mapped area in
map class ``i`` and ``n_i.`` the sample size of stratum ``i`` the estimators of Olofsson et al. (2014)
are (equation numbers of the paper):

- eq. 4, error matrix in estimated area proportions: ``p_ij = W_i n_ij / n_i.``
- eqs. 1-3, overall ``O = sum_j p_jj``, user's ``U_i = p_ii / p_i.``, producer's ``P_j = p_jj / p_.j``
- eq. 5, ``V(O) = sum_i W_i^2 U_i (1 - U_i) / (n_i. - 1)``
- eq. 6, ``V(U_i) = U_i (1 - U_i) / (n_i. - 1)``
- eq. 7, ``V(P_j) = (1 / N_.j^2) [N_j.^2 (1 - P_j)^2 U_j (1 - U_j) / (n_j. - 1)
  + P_j^2 sum_{i != j} N_i.^2 (n_ij / n_i.) (1 - n_ij / n_i.) / (n_i. - 1)]``
  with ``N_i.`` the mapped area of class ``i`` and ``N_.j = sum_i N_i. n_ij / n_i.`` the estimated
  area of reference class ``j``
- eqs. 8-9, area proportion ``p_.k = sum_i W_i n_ik / n_i.`` and area ``A_k = A_tot p_.k``
- eqs. 10-11, ``S(p_.k) = sqrt(sum_i W_i^2 (n_ik / n_i.)(1 - n_ik / n_i.) / (n_i. - 1))``,
  ``S(A_k) = A_tot S(p_.k)``
- confidence intervals: ``z S`` with ``z`` the normal quantile (1.96 for 95 %).

These are the stratified estimators of a mean (areas, overall and user's accuracy) and of a ratio of
means (producer's accuracy) of Cochran (1977) with the strata being the map classes.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import pandas as pd
from scipy.stats import norm

from ..errors import InputError, ShapeError

__all__ = ["check_counts", "error_matrix_proportions", "stratified_area"]




def check_counts(counts, mapped_area, classes: Sequence[str] | None = None) -> tuple[np.ndarray, np.ndarray, list[str]]:
    """Validate a sample count matrix and the mapped areas; return them as float arrays and the class names.

    Raises
    ------
    ShapeError
        ``counts`` is not square, or ``mapped_area`` / ``classes`` do not have one entry per class.
    InputError
        Negative, non-integer or non-finite counts; negative or non-finite areas; no mapped area at all.
    """
    n = np.asarray(counts, dtype=float)
    if n.ndim != 2 or n.shape[0] != n.shape[1] or n.shape[0] < 2:
        raise ShapeError(
            f"counts must be a square (map class x reference class) matrix of at least 2 classes, got shape "
            f"{n.shape}; rows are map classes, columns reference classes in the same order"
        )
    k = n.shape[0]
    if not np.all(np.isfinite(n)) or np.any(n < 0) or np.any(n != np.round(n)):
        bad = np.argwhere(~np.isfinite(n) | (n < 0) | (n != np.round(n)))[0]
        raise InputError(
            f"counts must be non-negative whole numbers of sample units; counts[{bad[0]}, {bad[1]}] = "
            f"{n[bad[0], bad[1]]!r}"
        )
    a = np.asarray(mapped_area, dtype=float)
    if a.shape != (k,):
        raise ShapeError(f"mapped_area needs one value per map class ({k}), got shape {a.shape}")
    if not np.all(np.isfinite(a)) or np.any(a < 0) or a.sum() <= 0:
        raise InputError(f"mapped_area must be finite, non-negative and not all zero, got {a.tolist()}")
    names = [str(c) for c in classes] if classes is not None else [f"class_{i}" for i in range(k)]
    if len(names) != k or len(set(names)) != k:
        raise ShapeError(f"classes needs {k} distinct names (one per row of counts), got {names}")
    return n, a, names


def error_matrix_proportions(counts, mapped_area, *, classes: Sequence[str] | None = None) -> pd.DataFrame:
    """Error matrix in estimated area proportions, ``p_ij = W_i n_ij / n_i.`` (Olofsson et al. 2014, eq. 4).

    Parameters
    ----------
    counts : (k, k) array_like of int
        Sample counts, rows map classes, columns reference classes (same order).
    mapped_area : (k,) array_like of float
        Mapped area of each map class, any unit (pixels, ha).
    classes : sequence of str, optional
        Class names (default ``class_0`` ...).

    Returns
    -------
    pandas.DataFrame
        (k, k) proportions summing to 1 over the strata that were sampled; index ``map``, columns
        ``reference``. A map class with mapped area but no sample unit has a row of NaN (its share of
        the map cannot be distributed among reference classes).

    References
    ----------
    Olofsson, P., Foody, G. M., Herold, M., Stehman, S. V., Woodcock, C. E., & Wulder, M. A. (2014).
    Good practices for estimating area and assessing accuracy of land change. Remote Sensing of
    Environment 148, 42-57. https://doi.org/10.1016/j.rse.2014.02.015
    Cochran, W. G. (1977). Sampling Techniques, 3rd ed. Wiley, New York.

    Examples
    --------
    >>> error_matrix_proportions([[9, 1], [2, 8]], [30.0, 70.0], classes=["a", "b"]).round(3).values.tolist()
    [[0.27, 0.03], [0.14, 0.56]]
    """
    n, a, names = check_counts(counts, mapped_area, classes)
    p = _proportions(n, a)
    return pd.DataFrame(p, index=pd.Index(names, name="map"), columns=pd.Index(names, name="reference"))


def _proportions(n: np.ndarray, a: np.ndarray) -> np.ndarray:
    w = a / a.sum()
    return w[:, None] * _shares(n, a)


def _shares(n: np.ndarray, a: np.ndarray) -> np.ndarray:
    """``n_ij / n_i.``; 0 for a class neither mapped nor sampled (it holds no part of the map), NaN for a
    mapped stratum without sample units."""
    n_i = n.sum(axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        share = n / n_i[:, None]
    return np.where(((n_i == 0) & (a == 0))[:, None], 0.0, share)


def stratified_area(counts, mapped_area, *, classes: Sequence[str] | None = None,
                    confidence: float = 0.95, stratum_units=None) -> pd.DataFrame:
    """Error-adjusted area, user's and producer's accuracy of every class with confidence intervals.

    Parameters
    ----------
    counts : (k, k) array_like of int
        Stratified random sample counts: rows map classes (the strata), columns reference classes in
        the same order.
    mapped_area : (k,) array_like of float
        Mapped area of each map class, any unit (pixels, m^2, ha); areas are returned in that unit.
    classes : sequence of str, optional
        Class names, the index of the result (default ``class_0`` ...).
    confidence : float, default 0.95
        Confidence level of the intervals (normal approximation, half-widths ``z * se``).
    stratum_units : (k,) array_like of int, optional
        Units (pixels) of each stratum. When given, every variance term of stratum ``i`` is multiplied by
        the finite population correction ``1 - n_i. / N_i`` (Cochran 1977, eq. 5.6), so that a stratum
        sampled in full (a small class) adds no variance instead of NaN; without it the terms are those
        of Olofsson et al. (2014), who take the strata as large.

    Returns
    -------
    pandas.DataFrame
        One row per class with columns ``mapped_area``, ``n_sample`` (sample units of the stratum),
        ``proportion`` (estimated area proportion, eq. 8) and ``proportion_se``, ``area`` (eq. 9),
        ``area_se`` (eq. 11), ``area_ci95`` (half-width of the interval at ``confidence``, the column
        keeps its name for other levels), ``users_accuracy``, ``users_se``, ``users_ci95``,
        ``producers_accuracy``, ``producers_se``, ``producers_ci95``. ``attrs`` holds
        ``overall_accuracy``, ``overall_se``, ``overall_ci95``, ``confidence``, ``z`` and
        ``error_matrix`` (the eq. 4 matrix as nested lists, rows map classes).

    Notes
    -----
    NaN where a value is undefined, never a guess: user's accuracy of a stratum without sample units;
    producer's accuracy of a class no sample unit was referenced as (its estimated area is 0); a
    standard error from a stratum of a single unit (``n_i. - 1 = 0``). A stratum with mapped area but
    no sample unit makes the areas, proportions and overall accuracy NaN, since its part of the map
    is not estimated.

    References
    ----------
    Olofsson, P., Foody, G. M., Herold, M., Stehman, S. V., Woodcock, C. E., & Wulder, M. A. (2014).
    Good practices for estimating area and assessing accuracy of land change. Remote Sensing of
    Environment 148, 42-57. https://doi.org/10.1016/j.rse.2014.02.015
    Cochran, W. G. (1977). Sampling Techniques, 3rd ed. Wiley, New York.

    Examples
    --------
    >>> t = stratified_area([[45, 5], [10, 40]], [200.0, 800.0], classes=["change", "stable"])
    >>> round(float(t.loc["change", "area"]), 1), round(float(t.loc["change", "users_accuracy"]), 2)
    (340.0, 0.9)
    >>> round(t.attrs["overall_accuracy"], 2)
    0.82
    """
    if not 0 < confidence < 1:
        raise InputError(f"confidence must lie between 0 and 1 (e.g. 0.95), got {confidence}")
    n, a, names = check_counts(counts, mapped_area, classes)
    z = float(norm.ppf(0.5 + confidence / 2))
    total = a.sum()
    w = a / total
    n_i = n.sum(axis=1)
    p = _proportions(n, a)
    share = _shares(n, a)  # n_ij / n_i. per stratum
    fpc = None
    if stratum_units is not None:
        units = np.asarray(stratum_units, dtype=float)
        if units.shape != n_i.shape or np.any(units < n_i):
            raise InputError(f"stratum_units needs one unit count per stratum, each at least its sample size "
                             f"{n_i.astype(int).tolist()}; got {np.ravel(units).tolist()}")
        with np.errstate(invalid="ignore", divide="ignore"):
            fpc = np.where(units > 0, 1.0 - n_i / units, 0.0)
    with np.errstate(invalid="ignore", divide="ignore"):
        dof = np.where(n_i > 1, n_i - 1, np.nan)
        # a stratum of no mapped area adds nothing to any variance (even unsampled, where dof is NaN)
        var_term = np.where((a > 0)[:, None], share * (1 - share) / dof[:, None], 0.0)
        if fpc is not None:  # a stratum sampled in full has no sampling variance
            var_term = np.where((fpc > 0)[:, None], fpc[:, None] * var_term, 0.0)
        # eqs. 8, 10: area proportion of each reference class and its standard error
        p_k = p.sum(axis=0)
        var_p_k = (w[:, None] ** 2 * var_term).sum(axis=0)
        # eqs. 2, 6: user's accuracy
        users = np.where(n_i > 0, np.diag(share), np.nan)
        var_users = users * (1 - users) / dof if fpc is None else np.where(
            fpc > 0, fpc * users * (1 - users) / dof, np.where(n_i > 0, 0.0, np.nan))
        # eqs. 3, 7: producer's accuracy (estimated reference area of class j: N_.j = sum_i N_i. n_ij / n_i.)
        diag_p = np.diag(p)
        producers = diag_p / p_k
        n_hat = (a[:, None] * share).sum(axis=0)
        off = a[:, None] ** 2 * var_term
        off_sum = off.sum(axis=0) - np.diag(off)
        var_prod = (a ** 2 * (1 - producers) ** 2 * np.diag(var_term) + producers ** 2 * off_sum) / n_hat ** 2
        # eqs. 1, 5: overall accuracy
        overall = diag_p.sum()
        var_overall = (w ** 2 * np.diag(var_term)).sum()
    producers = np.where(p_k > 0, producers, np.nan)
    var_prod = np.where(p_k > 0, var_prod, np.nan)
    se_p = np.sqrt(var_p_k)
    table = pd.DataFrame(
        {
            "mapped_area": a,
            "n_sample": n_i.astype(np.int64),
            "proportion": p_k,
            "proportion_se": se_p,
            "area": total * p_k,
            "area_se": total * se_p,
            "area_ci95": z * total * se_p,
            "users_accuracy": users,
            "users_se": np.sqrt(var_users),
            "users_ci95": z * np.sqrt(var_users),
            "producers_accuracy": producers,
            "producers_se": np.sqrt(var_prod),
            "producers_ci95": z * np.sqrt(var_prod),
        },
        index=pd.Index(names, name="class"),
    )
    table.attrs.update(
        overall_accuracy=float(overall),
        overall_se=float(np.sqrt(var_overall)),
        overall_ci95=float(z * np.sqrt(var_overall)),
        confidence=float(confidence),
        z=z,
        error_matrix=p.tolist(),
        classes=list(names),
    )
    return table
