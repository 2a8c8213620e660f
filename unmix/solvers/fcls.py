"""Fractions by exact (constrained) least squares: :func:`estimate_fractions` under each
:class:`~unmix.solvers.Constraint`, up to the fully constrained (FCLS) solution.

The per-pixel work runs in one compiled (numba) loop, see :mod:`unmix.solvers._fcls_numba`; the
operators it applies are precomputed here once per endmember set.
"""

from __future__ import annotations

import functools

import numpy as np

from . import _fcls_numba as _nb
from .constraints import Constraint, _as_constraint
from .diagnostics import _reflectance, _system, _validate_weights, check_endmembers

__all__ = ["estimate_fractions"]

# Up to this many endmembers the solution operator of every support (2**p - 1 of them) is
# precomputed; above it the active-set subproblems are solved on the fly.
_TABLE_MAX_ENDMEMBERS = 10

# Pixels per work unit of the parallel loop.
_BLOCK = 2048


_MODES = {
    Constraint.NONE: _nb.MODE_NONE,
    Constraint.SUM_TO_ONE: _nb.MODE_SUM_TO_ONE,
    Constraint.NON_NEGATIVE: _nb.MODE_NON_NEGATIVE,
    Constraint.FCLS: _nb.MODE_FCLS,
}



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
