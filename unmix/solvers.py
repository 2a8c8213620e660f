"""Linear spectral unmixing: fractions of endmembers by (constrained) least squares.

A pixel spectrum ``x`` (n_bands) is modelled as a mixture ``x ~ M^T a`` of the endmember spectra
``M`` (n_endmembers, n_bands) with fractions ``a`` (n_endmembers). :func:`estimate_fractions`
returns, per pixel, the exact minimiser of the (optionally band-weighted) squared residual under one
of four constraint sets (:class:`Constraint`):

``"none"``
    unconstrained least squares;
``"sum-to-one"``
    fractions sum to one (closed form of Heinz & Chang 2001);
``"non-negative"``
    fractions are non-negative (NNLS, Lawson & Hanson 1974);
``"fcls"``
    fully constrained: non-negative and summing to one (Heinz & Chang 2001).

:func:`kkt_residual` certifies a solution (it is zero exactly at the optimum),
:func:`shade_normalize` removes a shade endmember, :func:`check_endmembers` validates an endmember
matrix and its conditioning.

The per-pixel work runs in one compiled (numba) loop, see :mod:`unmix._solvers_numba`.
"""

from __future__ import annotations

import enum
import functools
import warnings

import numpy as np

from . import _solvers_numba as _nb
from .errors import (
    BandMismatchError,
    CollinearityWarning,
    InputError,
    RankError,
    ShapeError,
    UnknownNameError,
)

__all__ = [
    "Constraint",
    "estimate_fractions",
    "kkt_residual",
    "shade_normalize",
    "check_endmembers",
    "COLLINEARITY_WARN_CONDITION",
    "RANK_ERROR_CONDITION",
]

#: Condition number of the (weighted, under sum-to-one projected) mixing system above which
#: :class:`~unmix.errors.CollinearityWarning` is issued: reflectance errors may be amplified this
#: many times in the fractions.
COLLINEARITY_WARN_CONDITION = 1e4

#: Condition number above which the system counts as rank deficient (:class:`~unmix.errors.RankError`).
#: The solver works on the normal equations, whose condition number is the square of this one, so
#: beyond about 1/sqrt(machine epsilon) the fractions are not determined in double precision.
RANK_ERROR_CONDITION = 1e8

# Up to this many endmembers the solution operator of every support (2**p - 1 of them) is
# precomputed; above it the active-set subproblems are solved on the fly.
_TABLE_MAX_ENDMEMBERS = 10

# Pixels per work unit of the parallel loop.
_BLOCK = 2048


class Constraint(str, enum.Enum):
    """Constraint set of the fractions in :func:`estimate_fractions`."""

    NONE = "none"
    SUM_TO_ONE = "sum-to-one"
    NON_NEGATIVE = "non-negative"
    FCLS = "fcls"

    def __str__(self) -> str:
        return self.value


_MODES = {
    Constraint.NONE: _nb.MODE_NONE,
    Constraint.SUM_TO_ONE: _nb.MODE_SUM_TO_ONE,
    Constraint.NON_NEGATIVE: _nb.MODE_NON_NEGATIVE,
    Constraint.FCLS: _nb.MODE_FCLS,
}


def _as_constraint(constraint) -> Constraint:
    if isinstance(constraint, Constraint):
        return constraint
    if isinstance(constraint, str):
        key = constraint.strip().lower().replace("_", "-")
        for c in Constraint:
            if c.value == key:
                return c
    valid = ", ".join(repr(c.value) for c in Constraint)
    raise UnknownNameError(f"unknown constraint {constraint!r}; use one of {valid}")


def _has_sum_to_one(con: Constraint) -> bool:
    return con in (Constraint.SUM_TO_ONE, Constraint.FCLS)


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


# --------------------------------------------------------------------------------------------------
# precomputed operators
# --------------------------------------------------------------------------------------------------


def _support_tables(Gs, eq):
    """Solution operators of every support: z_S = P[mask] b_S + q[mask] (indices in ascending order)."""
    p = Gs.shape[0]
    nmask = 1 << p
    P = np.zeros((nmask, p, p))
    qv = np.zeros((nmask, p))
    masks = np.arange(1, nmask)
    bits = (masks[:, None] >> np.arange(p)) & 1
    sizes = bits.sum(axis=1)
    for k in range(1, p + 1):
        sel = masks[sizes == k]
        idx = np.nonzero(bits[sizes == k])[1].reshape(-1, k)
        Gsub = Gs[idx[:, :, None], idx[:, None, :]]
        if eq:
            K = np.zeros((len(sel), k + 1, k + 1))
            K[:, :k, :k] = Gsub
            K[:, :k, k] = 1.0
            K[:, k, :k] = 1.0
            Kinv = np.linalg.inv(K)
            P[sel, :k, :k] = Kinv[:, :k, :k]
            qv[sel, :k] = Kinv[:, :k, k]
        else:
            P[sel, :k, :k] = np.linalg.inv(Gsub)
    return P, qv


@functools.lru_cache(maxsize=16)
def _operators_cached(mbytes, shape, wbytes, con, table_max):
    M = np.frombuffer(mbytes, dtype=np.float64).reshape(shape)
    p, nb = shape
    w = None if wbytes is None else np.frombuffer(wbytes, dtype=np.float64)
    sw = np.ones(nb) if w is None else np.sqrt(w)
    A, Z = _system(M, w, con)
    if Z is None:
        L = np.linalg.pinv(A) * sw[None, :]
        q = np.zeros(p)
    else:
        a0 = np.full(p, 1.0 / p)
        B = Z @ np.linalg.pinv(A @ Z) if p > 1 else np.zeros((p, nb))
        L = B * sw[None, :]
        q = a0 - B @ (A @ a0)
    G = A.T @ A
    scale = np.trace(G) / p
    if not scale > 0:
        scale = 1.0
    Gs = G / scale
    MWs = (M * (sw * sw)[None, :]) / scale
    mode = _MODES[con]
    # the full-support closed form as a function of b (normal equations), for many-band NNLS/FCLS
    if mode == _nb.MODE_FCLS:
        K = np.zeros((p + 1, p + 1))
        K[:p, :p] = Gs
        K[:p, p] = K[p, :p] = 1.0
        Kinv = np.linalg.inv(K)
        Pb, qb = Kinv[:p, :p].copy(), Kinv[:p, p].copy()
    elif mode == _nb.MODE_NON_NEGATIVE:
        Pb, qb = np.linalg.inv(Gs), np.zeros(p)
    else:
        Pb, qb = np.zeros((p, p)), np.zeros(p)
    via_b = bool(mode >= _nb.MODE_NON_NEGATIVE and nb > 2 * p)
    if mode >= _nb.MODE_NON_NEGATIVE and p <= table_max:
        Ptab, qtab = _support_tables(Gs, mode == _nb.MODE_FCLS)
        use_table = True
    else:
        Ptab, qtab = np.zeros((1, 1, 1)), np.zeros((1, 1))
        use_table = False
    out = (
        np.ascontiguousarray(M), np.ascontiguousarray(L), q, np.ascontiguousarray(MWs), Pb, qb, via_b, Gs,
        Ptab, qtab, use_table,
    )  # fmt: skip
    for arr in out:
        if isinstance(arr, np.ndarray):
            arr.flags.writeable = False
    return out


def _operators(M, w, con):
    return _operators_cached(
        np.ascontiguousarray(M).tobytes(), M.shape, None if w is None else w.tobytes(), con, _TABLE_MAX_ENDMEMBERS
    )


def _reflectance(reflectance, name="reflectance"):
    x = np.asarray(reflectance)
    if x.dtype.kind not in "biuf":
        raise InputError(f"{name} must be real numbers, got dtype {x.dtype}")
    if x.ndim < 1:
        raise ShapeError(f"{name} must have the bands on its last axis, got a scalar")
    if x.dtype == np.float32 or x.dtype == np.float16:
        return x.astype(np.float32, copy=False), np.dtype(np.float32)
    return x.astype(np.float64, copy=False), np.dtype(np.float64)


# --------------------------------------------------------------------------------------------------
# public kernels
# --------------------------------------------------------------------------------------------------


def estimate_fractions(reflectance, endmembers, *, constraint="fcls", weights=None, names=None):
    """Endmember fractions of every pixel by exact (constrained) least squares.

    Per pixel, minimise ``sum_b w_b (x_b - sum_i a_i M_ib)**2`` over the fractions ``a`` subject to
    ``constraint``, and report the root mean square of the (unweighted) residual.

    Parameters
    ----------
    reflectance : (..., n_bands) array_like
        Pixel spectra, bands on the last axis [reflectance, 0..1]. A pixel with a NaN (or infinite)
        band is "no data": its fractions and RMSE are NaN.
    endmembers : (n_endmembers, n_bands) array_like
        Endmember spectra, one per row, finite [reflectance].
    constraint : Constraint or str, default "fcls"
        ``"none"`` (unconstrained), ``"sum-to-one"``, ``"non-negative"`` or ``"fcls"`` (both).
    weights : (n_bands,) array_like, optional
        Positive, finite per-band weights, e.g. inverse noise variance [1/reflectance**2]. Default:
        all ones (ordinary least squares).
    names : sequence of str, optional
        Endmember names, used in warning and error messages only.

    Returns
    -------
    fractions : (..., n_endmembers) ndarray
        Fractions [1], float32 for float32 (or float16) input, float64 otherwise (integers included).
    rmse : (...) ndarray
        ``sqrt(mean_b (x_b - sum_i a_i M_ib)**2)`` [reflectance], same dtype.

    Raises
    ------
    BandMismatchError, RankError, InputError, ShapeError, UnknownNameError
        See :func:`check_endmembers`; ``UnknownNameError`` for an unknown ``constraint``.

    Warns
    -----
    CollinearityWarning
        Nearly collinear endmembers (see :func:`check_endmembers`).

    Notes
    -----
    Each returned solution is the exact optimum of its problem up to float64 rounding, also for pixels
    far outside the simplex spanned by the endmembers (no penalty weight is involved). With
    ``G = M W M^T`` and ``b = M W x`` the problem is ``min 1/2 a^T G a - b^T a``:

    * ``"none"``: ``a = G^-1 b``, applied as the pseudo-inverse of ``sqrt(W) M^T``;
    * ``"sum-to-one"``: the closed form of Heinz & Chang (2001),
      ``a = a_LS + G^-1 1 (1 - 1^T a_LS) / (1^T G^-1 1)`` (applied in a null-space form that also
      holds when ``n_endmembers = n_bands + 1``);
    * ``"non-negative"`` / ``"fcls"``: the closed form above is tried first; where a fraction comes out
      negative, the negative ones are dropped and the rest re-solved until all are positive (a common
      heuristic, on its own not always optimal), and from that feasible
      start a primal active-set method (Lawson & Hanson 1974, with the sum-to-one equality for FCLS)
      reaches the exact KKT point in finitely many steps. Its subproblems use precomputed solution
      operators of every support (up to 10 endmembers) or a small dense solve.

    Inputs are computed in float64. The work runs in one compiled loop over pixels, parallel over
    threads; memory beyond the outputs is a few small arrays per thread plus, with up to 10 endmembers,
    the ``2**n_endmembers`` support operators (under 1 MB).

    References
    ----------
    Heinz, D. C. & Chang, C.-I. (2001). Fully constrained least squares linear spectral mixture analysis
    method for material quantification in hyperspectral imagery. IEEE Transactions on Geoscience and
    Remote Sensing 39(3), 529-545. https://doi.org/10.1109/36.911111

    Lawson, C. L. & Hanson, R. J. (1974). Solving Least Squares Problems. Prentice-Hall (SIAM reprint
    1995). https://doi.org/10.1137/1.9781611971217

    Keshava, N. & Mustard, J. F. (2002). Spectral unmixing. IEEE Signal Processing Magazine 19(1),
    44-57. https://doi.org/10.1109/79.974727

    Examples
    --------
    >>> import numpy as np
    >>> M = np.array([[0.04, 0.08, 0.05, 0.50, 0.25, 0.12],   # green vegetation
    ...               [0.12, 0.16, 0.22, 0.28, 0.38, 0.34],   # soil
    ...               [0.00, 0.00, 0.00, 0.00, 0.00, 0.00]])  # shade
    >>> x = np.array([0.6, 0.3, 0.1]) @ M
    >>> f, rmse = estimate_fractions(x, M, constraint="fcls")
    >>> np.round(f, 6).tolist(), bool(rmse < 1e-12)
    ([0.6, 0.3, 0.1], True)
    """
    con = _as_constraint(constraint)
    x, out_dtype = _reflectance(reflectance)
    M = check_endmembers(endmembers, constraint=con, n_bands=x.shape[-1], names=names, weights=weights)
    w = _validate_weights(weights, M.shape[1])
    p, nb = M.shape
    lead = x.shape[:-1]
    frac = np.empty(lead + (p,), dtype=out_dtype)
    rmse = np.empty(lead, dtype=out_dtype)
    n = int(np.prod(lead, dtype=np.int64))
    if n == 0:
        return frac, rmse
    x2 = np.ascontiguousarray(x.reshape(n, nb))
    _nb.unmix_pixels(
        x2, *_operators(M, w, con), _MODES[con],
        frac.reshape(n, p), rmse.reshape(n), _BLOCK,
    )  # fmt: skip
    return frac, rmse


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


def shade_normalize(fractions, shade):
    """Fractions of the non-shade endmembers rescaled to sum as if there were no shade.

    Parameters
    ----------
    fractions : (..., n_endmembers) array_like
        Fractions including a shade endmember [1].
    shade : int
        Index of the shade endmember on the last axis (negative counts from the end).

    Returns
    -------
    normalized : (..., n_endmembers - 1) ndarray
        ``f_i / (1 - f_shade)`` for every other endmember, in their original order [1]; NaN where
        ``f_shade >= 1`` (nothing but shade) and where an input is NaN. float32 stays float32,
        anything else gives float64.

    References
    ----------
    Adams, J. B., Sabol, D. E., Kapos, V., Almeida Filho, R., Roberts, D. A., Smith, M. O. &
    Gillespie, A. R. (1995). Classification of multispectral images based on fractions of endmembers:
    application to land-cover change in the Brazilian Amazon. Remote Sensing of Environment 52,
    137-154. https://doi.org/10.1016/0034-4257(94)00098-8 (from memory)

    Examples
    --------
    >>> shade_normalize([0.45, 0.25, 0.30], shade=2).round(6).tolist()
    [0.642857, 0.357143]
    """
    f = np.asarray(fractions)
    if f.dtype.kind not in "biuf":
        raise InputError(f"fractions must be real numbers, got dtype {f.dtype}")
    if f.ndim < 1 or f.shape[-1] < 2:
        raise ShapeError(
            f"fractions must have at least two endmembers on the last axis, got shape {f.shape}"
        )
    f = f.astype(np.float32 if f.dtype == np.float32 else np.float64, copy=False)
    p = f.shape[-1]
    if isinstance(shade, (bool, np.bool_)) or not isinstance(shade, (int, np.integer)):
        raise InputError(f"shade must be the integer index of the shade endmember, got {shade!r}")
    if not -p <= int(shade) < p:
        raise InputError(f"shade index {int(shade)} is out of range for {p} endmembers (use 0..{p - 1})")
    s = int(shade) % p
    fs = f[..., s]
    others = np.delete(f, s, axis=-1)
    with np.errstate(divide="ignore", invalid="ignore"):
        out = others / (1 - fs)[..., None]
    out[fs >= 1] = np.nan
    return out
