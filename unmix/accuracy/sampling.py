"""Sample size and stratified random sampling of a class map for accuracy assessment.

The strata are the map classes. :func:`sample_size` gives the total number of sample units that
reaches a target standard error of the overall accuracy (Olofsson et al. 2014, eq. 13, after Cochran
1977, eq. 5.25); :func:`allocate` shares a total among the strata in proportion to their area with a
minimum per stratum, which keeps enough units in rare (change) classes for their user's accuracy;
:func:`stratified_sample` draws the pixels, without replacement, reproducibly from a seed.

References
----------
Olofsson, P., Foody, G. M., Herold, M., Stehman, S. V., Woodcock, C. E., & Wulder, M. A. (2014).
Good practices for estimating area and assessing accuracy of land change. Remote Sensing of
Environment 148, 42-57. https://doi.org/10.1016/j.rse.2014.02.015
Cochran, W. G. (1977). Sampling Techniques, 3rd ed. Wiley, New York.
"""

from __future__ import annotations

import numpy as np

from ..errors import InputError, ShapeError

__all__ = ["DEFAULT_MIN_PER_CLASS", "sample_size", "allocate", "stratified_sample"]

#: Default smallest sample per stratum; Olofsson et al. (2014) suggest 50-100 units per rare class
#: (from memory; common practice).
DEFAULT_MIN_PER_CLASS = 50


def _weights(mapped_area) -> np.ndarray:
    a = np.asarray(mapped_area, dtype=float)
    if a.ndim != 1 or a.size < 1 or not np.all(np.isfinite(a)) or np.any(a < 0) or a.sum() <= 0:
        raise InputError(f"mapped areas must be a 1-D list of finite, non-negative values, not all zero; got {a!r}")
    return a / a.sum()


def sample_size(mapped_area, expected_users_accuracy, target_se_overall: float = 0.01,
                population: int | None = None) -> int:
    """Total sample size for a target standard error of the overall accuracy (Olofsson et al. 2014, eq. 13).

    ``n = (sum_i W_i S_i)^2 / (S(O)^2 + sum_i W_i S_i^2 / N)`` with ``W_i`` the area share of map class
    ``i``, ``S_i = sqrt(U_i (1 - U_i))`` the standard deviation of stratum ``i`` from its expected user's
    accuracy ``U_i``, ``S(O)`` the target standard error and ``N`` the number of units in the population;
    without ``population`` the second term is left out (``N`` large, as for a map of pixels):
    ``n = (sum_i W_i S_i / S(O))^2``.

    Parameters
    ----------
    mapped_area : (k,) array_like of float
        Mapped area (or pixel count) of each class, any unit; only the shares matter.
    expected_users_accuracy : float or (k,) array_like of float
        Conjectured user's accuracy of each class, 0..1 (one value for all classes or one per class).
    target_se_overall : float, default 0.01
        Standard error of the overall accuracy to reach.
    population : int, optional
        Number of units (pixels) of the map, for the finite-population form.

    Returns
    -------
    int
        The sample size, rounded up.

    References
    ----------
    Olofsson, P., Foody, G. M., Herold, M., Stehman, S. V., Woodcock, C. E., & Wulder, M. A. (2014).
    Good practices for estimating area and assessing accuracy of land change. Remote Sensing of
    Environment 148, 42-57. https://doi.org/10.1016/j.rse.2014.02.015
    Cochran, W. G. (1977). Sampling Techniques, 3rd ed. Wiley, New York (eq. 5.25).

    Examples
    --------
    >>> sample_size([0.02, 0.015, 0.32, 0.645], [0.7, 0.6, 0.9, 0.95], 0.01)
    641
    """
    w = _weights(mapped_area)
    u = np.broadcast_to(np.asarray(expected_users_accuracy, dtype=float), w.shape) if np.ndim(
        expected_users_accuracy) == 0 else np.asarray(expected_users_accuracy, dtype=float)
    if u.shape != w.shape:
        raise ShapeError(f"expected_users_accuracy needs one value or one per class ({w.size}), got {u.size}")
    if not np.all((u >= 0) & (u <= 1)):
        raise InputError(f"expected user's accuracies must lie in 0..1, got {u.tolist()}")
    if not 0 < target_se_overall < 1:
        raise InputError(f"target_se_overall must lie between 0 and 1 (e.g. 0.01), got {target_se_overall}")
    s = np.sqrt(u * (1 - u))
    numerator = float(np.sum(w * s)) ** 2
    denominator = target_se_overall ** 2
    if population is not None:
        if int(population) < 1:
            raise InputError(f"population must be a positive number of units, got {population}")
        denominator += float(np.sum(w * s ** 2)) / int(population)
    # guard against 640.0000000001 becoming 641 through rounding error
    return max(1, int(np.ceil(round(numerator / denominator, 9))))


def allocate(total: int, mapped_area, *, minimum: int = DEFAULT_MIN_PER_CLASS, available=None) -> np.ndarray:
    """Share ``total`` sample units among strata in proportion to area, with at least ``minimum`` per stratum.

    Strata whose proportional share falls below ``minimum`` get ``minimum``; the rest of the total is
    shared in proportion to area among the others (repeated until no share is below the minimum) and
    rounded to whole units by largest remainders. When ``minimum`` times the number of strata exceeds
    ``total``, every stratum gets ``minimum`` (the total grows). A stratum never gets more units than
    it has pixels (``available``); a stratum of zero area gets none.

    Parameters
    ----------
    total : int
        Sample size to share (e.g. from :func:`sample_size`).
    mapped_area : (k,) array_like of float
        Area or pixel count of each stratum.
    minimum : int, default 50
        Smallest sample of a stratum (50-100 per class suggested by Olofsson et al. 2014; from memory).
    available : (k,) array_like of int, optional
        Pixels in each stratum (default: ``mapped_area`` rounded, as when it is a pixel count).

    Returns
    -------
    (k,) int64 ndarray

    References
    ----------
    Olofsson, P., Foody, G. M., Herold, M., Stehman, S. V., Woodcock, C. E., & Wulder, M. A. (2014).
    Good practices for estimating area and assessing accuracy of land change. Remote Sensing of
    Environment 148, 42-57. https://doi.org/10.1016/j.rse.2014.02.015

    Examples
    --------
    >>> allocate(600, [200_000, 150_000, 3_200_000, 6_450_000], minimum=75).tolist()
    [75, 75, 149, 301]
    """
    w = _weights(mapped_area)
    if int(total) < 1 or int(minimum) < 0:
        raise InputError(f"the sample size must be positive and the minimum per class not negative; got "
                         f"total={total}, minimum={minimum}")
    cap = np.round(np.asarray(mapped_area if available is None else available, dtype=float))
    if cap.shape != w.shape:
        raise ShapeError(f"available needs one pixel count per stratum ({w.size}), got {cap.size}")
    floor = np.minimum(np.where(w > 0, int(minimum), 0), cap)
    fixed = floor >= w * total  # strata held at the minimum (or at their size)
    while True:
        rest = total - floor[fixed].sum()
        free_w = np.where(fixed, 0.0, w)
        share = np.where(fixed, floor, rest * free_w / free_w.sum() if free_w.sum() > 0 else 0.0)
        newly = ~fixed & (share < floor)
        if not newly.any():
            break
        fixed |= newly
    share = np.maximum(share, 0.0)
    n = np.floor(share).astype(np.int64)
    missing = int(round(share.sum())) - int(n.sum())
    if missing > 0:
        order = np.argsort(-(share - n), kind="stable")
        n[order[:missing]] += 1
    return np.minimum(n, cap.astype(np.int64))


def stratified_sample(class_map, n_per_class: dict[int, int], seed: int | None) -> dict[int, np.ndarray]:
    """Draw pixels of each class of a map at random, without replacement, reproducibly.

    Parameters
    ----------
    class_map : (...) integer ndarray
        Class code of every pixel (any shape; codes not in ``n_per_class`` are never drawn).
    n_per_class : dict of int to int
        Sample size per class code. More than a class has pixels raises :class:`~unmix.errors.InputError`.
    seed : int or None
        Seed of :func:`numpy.random.default_rng`; the same seed, map and sizes give the same pixels.
        Classes are drawn in increasing code order from one generator.

    Returns
    -------
    dict of int to (n_h,) int64 ndarray
        Flat (C-order) pixel indices of each class, sorted; ``np.unravel_index`` gives row and column.

    References
    ----------
    Cochran, W. G. (1977). Sampling Techniques, 3rd ed. Wiley, New York (stratified random sampling).

    Examples
    --------
    >>> m = np.array([[0, 0, 1], [1, 1, 0]])
    >>> {k: v.tolist() for k, v in stratified_sample(m, {0: 2, 1: 3}, seed=1).items()}[1]
    [2, 3, 4]
    """
    flat = np.asarray(class_map).ravel()
    if flat.dtype.kind not in "iub":
        raise InputError(f"the class map must hold integer class codes, got dtype {flat.dtype}")
    rng = np.random.default_rng(seed)
    drawn: dict[int, np.ndarray] = {}
    for code in sorted(int(c) for c in n_per_class):
        n = int(n_per_class[code])
        where = np.flatnonzero(flat == code)
        if n < 0 or n > where.size:
            raise InputError(f"cannot draw {n} pixels of class code {code}: the map has {where.size} of them; "
                             "lower the sample size of that class")
        drawn[code] = np.sort(where[rng.choice(where.size, size=n, replace=False)])
    return drawn
