"""Checks of an unmixing problem and of its solution: endmember validation and conditioning
(:func:`check_endmembers`) and the optimality certificate of given fractions (:func:`kkt_residual`).
"""

from __future__ import annotations

import warnings

import numpy as np

from ..errors import (
    BandMismatchError,
    CollinearityWarning,
    InputError,
    RankError,
    ShapeError,
)
from .constraints import Constraint, _as_constraint, _has_sum_to_one

__all__ = ["check_endmembers", "kkt_residual", "COLLINEARITY_WARN_CONDITION", "RANK_ERROR_CONDITION"]

#: Condition number of the (weighted, under sum-to-one projected) mixing system above which
#: :class:`~unmix.errors.CollinearityWarning` is issued: reflectance errors may be amplified this
#: many times in the fractions.
COLLINEARITY_WARN_CONDITION = 1e4

#: Condition number above which the system counts as rank deficient (:class:`~unmix.errors.RankError`).
#: The solver works on the normal equations, whose condition number is the square of this one, so
#: beyond about 1/sqrt(machine epsilon) the fractions are not determined in double precision.
RANK_ERROR_CONDITION = 1e8


# --------------------------------------------------------------------------------------------------
# validation
# --------------------------------------------------------------------------------------------------


def _label(i: int, names) -> str:
    return f"{names[i]!r} (row {i})" if names is not None else f"row {i}"


def _validate_endmembers(endmembers, n_bands, names):
    M = np.asarray(endmembers)
    if M.dtype.kind not in "biuf":
        raise InputError(f"endmembers must be real numbers, got dtype {M.dtype}")
    M = np.array(M, dtype=np.float64)  # own copy: later changes by the caller do not matter
    if M.ndim != 2:
        raise ShapeError(
            f"endmembers must be a 2-d array (n_endmembers, n_bands), got shape {M.shape}; "
            "put one endmember spectrum per row"
        )
    p, nb = M.shape
    if p < 1 or nb < 1:
        raise ShapeError(f"endmembers has shape {M.shape}; it needs at least one endmember and one band")
    if names is not None:
        names = [str(n) for n in names]
        if len(names) != p:
            raise ShapeError(f"{len(names)} endmember names given for {p} endmember rows; give one name per row")
    if n_bands is not None and int(n_bands) != nb:
        raise BandMismatchError(
            f"the reflectance has {int(n_bands)} bands but the endmembers have {nb}; resample the "
            "endmember spectra to the image bands (same bands, same order)"
        )
    bad = np.argwhere(~np.isfinite(M))
    if bad.size:
        i, b = bad[0]
        raise InputError(
            f"endmember {_label(i, names)} has a non-finite value ({M[i, b]}) in band {b}; "
            f"{len(bad)} non-finite value(s) in all; endmember spectra must be complete"
        )
    return M, names


def _validate_weights(weights, n_bands):
    if weights is None:
        return None
    w = np.asarray(weights)
    if w.dtype.kind not in "biuf":
        raise InputError(f"weights must be real numbers, got dtype {w.dtype}")
    w = np.array(w, dtype=np.float64)
    if w.shape != (n_bands,):
        raise ShapeError(f"weights must have shape ({n_bands},), one per band, got shape {w.shape}")
    bad = np.flatnonzero(~(np.isfinite(w) & (w > 0)))
    if bad.size:
        b = bad[0]
        raise InputError(
            f"weights must be positive and finite; band {b} has weight {w[b]}; give every band a "
            "positive weight (for example 1 / noise variance) or drop the band"
        )
    return w


def _system(M, w, con):
    """The matrix whose condition number governs the fractions: sqrt(W) M^T, projected under sum-to-one.

    Returns (A, Z) with A (n_bands, p) and Z (p, p - 1) an orthonormal basis of the directions that keep
    the sum of fractions (None without sum-to-one).
    """
    p = M.shape[0]
    sw = np.ones(M.shape[1]) if w is None else np.sqrt(w)
    A = M.T * sw[:, None]
    Z = None
    if _has_sum_to_one(con):
        Z = np.linalg.svd(np.ones((1, p)))[2][1:].T
    return A, Z


def _conditioning(M, w, con):
    """(condition number, p-vector of the least determined fraction direction)."""
    A, Z = _system(M, w, con)
    B = A if Z is None else A @ Z
    if B.shape[1] == 0:  # one endmember under sum-to-one: nothing to determine
        return 1.0, np.ones(1)
    s, vt = np.linalg.svd(B, full_matrices=False)[1:]
    cond = np.inf if s[-1] == 0 else float(s[0] / s[-1])
    v = vt[-1] if Z is None else Z @ vt[-1]
    return cond, v


def check_endmembers(endmembers, *, constraint="fcls", n_bands=None, names=None, weights=None):
    """Validate an endmember matrix and check that the bands can separate the endmembers.

    Parameters
    ----------
    endmembers : (n_endmembers, n_bands) array_like
        Endmember spectra, one per row [reflectance].
    constraint : Constraint or str
        The constraint the fractions will be estimated under (see :class:`Constraint`).
    n_bands : int, optional
        Band count of the reflectance the endmembers will be used with.
    names : sequence of str, optional
        Endmember names, used in messages.
    weights : (n_bands,) array_like, optional
        Per-band weights of the weighted least squares [1/reflectance**2].

    Returns
    -------
    endmembers : (n_endmembers, n_bands) ndarray of float64
        A validated copy.

    Raises
    ------
    ShapeError
        Not a 2-d array, or ``names`` of the wrong length.
    BandMismatchError
        ``n_bands`` differs from the endmembers' band count.
    InputError
        A non-finite endmember value or a bad weight.
    RankError
        More endmembers than the bands can separate: more than ``n_bands + 1`` under a sum-to-one
        constraint (``"sum-to-one"``, ``"fcls"``), more than ``n_bands`` otherwise; or the system is
        numerically rank deficient (condition number above :data:`RANK_ERROR_CONDITION`, for example two
        identical endmembers, or an all-zero "shade" endmember without sum-to-one).

    Warns
    -----
    CollinearityWarning
        The condition number exceeds :data:`COLLINEARITY_WARN_CONDITION`; the message names the two
        endmembers that carry most of the least determined direction.

    Notes
    -----
    The condition number is the ratio of the largest to the smallest singular value of
    ``sqrt(W) M^T`` (``W`` the diagonal band weights). Under a sum-to-one constraint only differences of
    fractions are free, so the matrix is first multiplied by an orthonormal basis ``Z`` of
    ``{d : sum(d) = 0}``; the count limit ``n_bands + 1`` follows (an affinely independent set of
    endmembers, e.g. a zero shade spectrum beside ``n_bands`` others, is solvable). The "most collinear
    pair" is read off the right singular vector of the smallest singular value: its two largest
    components. For two near-duplicate endmembers that vector is close to ``(e_i - e_j)/sqrt(2)``.

    Examples
    --------
    >>> import numpy as np
    >>> M = np.array([[0.05, 0.08, 0.04, 0.45], [0.20, 0.25, 0.30, 0.35]])
    >>> check_endmembers(M, n_bands=4).shape
    (2, 4)
    """
    con = _as_constraint(constraint)
    M, names = _validate_endmembers(endmembers, n_bands, names)
    p, nb = M.shape
    w = _validate_weights(weights, nb)
    limit = nb + 1 if _has_sum_to_one(con) else nb
    if p > limit:
        rule = "n_bands + 1" if _has_sum_to_one(con) else "n_bands"
        raise RankError(
            f"{p} endmembers cannot be separated with {nb} bands under constraint '{con.value}' (at most "
            f"{rule} = {limit}); use fewer endmembers, more bands, or a sum-to-one constraint"
        )
    cond, v = _conditioning(M, w, con)
    if p >= 2:
        i, j = sorted(np.argsort(-np.abs(v))[:2])
        who = f"endmembers {_label(i, names)} and {_label(j, names)}"
    else:
        who = f"endmember {_label(0, names)}"
    if not cond <= RANK_ERROR_CONDITION:
        hint = (
            "; an all-zero (shade) endmember needs a sum-to-one constraint"
            if not _has_sum_to_one(con) and np.any(np.all(M == 0, axis=1))
            else ""
        )
        raise RankError(
            f"the endmembers are linearly dependent under constraint '{con.value}' (condition number "
            f"{cond:.3g} > {RANK_ERROR_CONDITION:.0e}), mostly through {who}; drop or merge one of "
            f"them{hint}"
        )
    if cond > COLLINEARITY_WARN_CONDITION:
        warnings.warn(
            f"{who} are nearly collinear (condition number {cond:.3g} > "
            f"{COLLINEARITY_WARN_CONDITION:.0e} under constraint '{con.value}'); their fractions are poorly "
            "determined: consider merging them or dropping one",
            CollinearityWarning,
            stacklevel=2,
        )
    return M



def _reflectance(reflectance, name="reflectance"):
    x = np.asarray(reflectance)
    if x.dtype.kind not in "biuf":
        raise InputError(f"{name} must be real numbers, got dtype {x.dtype}")
    if x.ndim < 1:
        raise ShapeError(f"{name} must have the bands on its last axis, got a scalar")
    if x.dtype == np.float32 or x.dtype == np.float16:
        return x.astype(np.float32, copy=False), np.dtype(np.float32)
    return x.astype(np.float64, copy=False), np.dtype(np.float64)



def _project_simplex(y):
    """Euclidean projection of every row of y (..., p) onto {a >= 0, sum(a) = 1} (sort-based)."""
    p = y.shape[-1]
    u = -np.sort(-y, axis=-1)
    css = np.cumsum(u, axis=-1) - 1.0
    k = np.arange(1, p + 1)
    rho = np.sum(u - css / k > 0, axis=-1, keepdims=True)  # the test holds on a prefix
    rho = np.maximum(rho, 1)
    theta = np.take_along_axis(css, rho - 1, axis=-1) / rho
    return np.maximum(y - theta, 0.0)


def kkt_residual(reflectance, endmembers, fractions, *, constraint="fcls", weights=None):
    """How far given fractions are from the optimum of their problem: 0 exactly at the optimum.

    Parameters
    ----------
    reflectance : (..., n_bands) array_like
        Pixel spectra [reflectance].
    endmembers : (n_endmembers, n_bands) array_like
        Endmember spectra [reflectance].
    fractions : (..., n_endmembers) array_like
        Candidate fractions [1], same leading shape as ``reflectance``.
    constraint : Constraint or str, default "fcls"
        The problem the fractions are meant to solve.
    weights : (n_bands,) array_like, optional
        Per-band weights of the least squares [1/reflectance**2].

    Returns
    -------
    residual : (...) ndarray
        Dimensionless residual [1] (float32 for float32 reflectance, else float64); NaN where a
        reflectance band or a fraction is NaN.

    Notes
    -----
    With ``f(a) = 1/2 ||sqrt(W)(x - M^T a)||**2``, gradient ``g = M W (M^T a - x)``, ``C`` the feasible
    set of ``constraint`` (all of R^p, the hyperplane ``sum(a) = 1``, the orthant ``a >= 0`` or the
    simplex) and ``lam`` the largest eigenvalue of ``G = M W M^T``, the residual is the "natural"
    (projected-gradient) residual

        ``r(a) = max_i | a_i - P_C(a - g / lam)_i |``.

    ``r(a) = 0`` holds exactly when ``a`` satisfies the KKT conditions: ``a`` in ``C`` (primal
    feasibility) and ``-g`` in the normal cone of ``C`` at ``a``, i.e. ``g + nu 1 - mu = 0`` with
    ``mu >= 0`` (dual feasibility) and ``mu_i a_i = 0`` (complementarity). Dividing the gradient by
    ``lam`` makes it a fraction, so ``r`` is in fraction units and independent of reflectance scale and
    of the weights' overall scale. For an infeasible ``a``, ``r`` is at least of the order of its
    infeasibility; near the optimum ``r`` is of the order of the distance to the optimum times
    (smallest / largest eigenvalue of ``G``). Expect about 1e-12 for float64 solutions of
    well-conditioned problems and about 1e-7 for float32 fractions.

    References
    ----------
    Bertsekas, D. P. (1999). Nonlinear Programming, 2nd ed., Athena Scientific; section 2.3
    (projection form of the optimality condition; from memory).

    Condat, L. (2016). Fast projection onto the simplex and the l1 ball. Mathematical Programming 158,
    575-585. https://doi.org/10.1007/s10107-015-0946-6

    Examples
    --------
    >>> import numpy as np
    >>> from unmix.solvers import estimate_fractions
    >>> M = np.array([[0.05, 0.08, 0.04, 0.45], [0.20, 0.25, 0.30, 0.35]])
    >>> x = np.array([0.1, 0.1, 0.1, 0.1])
    >>> f, _ = estimate_fractions(x, M)
    >>> bool(kkt_residual(x, M, f) < 1e-10), bool(kkt_residual(x, M, [0.5, 0.5]) > 1e-3)
    (True, True)
    """
    con = _as_constraint(constraint)
    x, out_dtype = _reflectance(reflectance)
    M, _ = _validate_endmembers(endmembers, x.shape[-1], None)
    w = _validate_weights(weights, M.shape[1])
    a = np.asarray(fractions)
    if a.dtype.kind not in "biuf":
        raise InputError(f"fractions must be real numbers, got dtype {a.dtype}")
    a = a.astype(np.float64)
    if a.ndim < 1 or a.shape[-1] != M.shape[0] or a.shape[:-1] != x.shape[:-1]:
        raise ShapeError(
            f"fractions of shape {a.shape} do not fit reflectance {x.shape} and {M.shape[0]} endmembers; "
            f"expected {x.shape[:-1] + (M.shape[0],)}"
        )
    x = x.astype(np.float64)
    MW = M if w is None else M * w[None, :]
    G = MW @ M.T
    lam = float(np.linalg.eigvalsh(G)[-1])
    if not lam > 0:
        lam = 1.0
    g = a @ G - x @ MW.T
    y = a - g / lam
    if con is Constraint.NONE:
        proj = y
    elif con is Constraint.SUM_TO_ONE:
        proj = y - (y.sum(axis=-1, keepdims=True) - 1.0) / y.shape[-1]
    elif con is Constraint.NON_NEGATIVE:
        proj = np.maximum(y, 0.0)
    else:
        proj = _project_simplex(y)
    with np.errstate(invalid="ignore"):
        r = np.max(np.abs(a - proj), axis=-1)
    bad = ~(np.all(np.isfinite(x), axis=-1) & np.all(np.isfinite(a), axis=-1))
    r = np.where(bad, np.nan, r)
    return np.asarray(r, dtype=out_dtype)
