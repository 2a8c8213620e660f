"""Relative radiometric normalisation of one date against a reference from pseudo-invariant pixels.

The invariant pixels are chosen by the iteratively re-weighted multivariate alteration detection
(IR-MAD) transformation; each band is then fitted by orthogonal (total least squares) regression.

References
----------
Nielsen, A. A. (2007). The regularized iteratively reweighted MAD method for change detection in multi-
and hyperspectral data. IEEE Transactions on Image Processing 16(2), 463-478. doi:10.1109/TIP.2006.888195
Canty, M. J. and Nielsen, A. A. (2008). Automatic radiometric normalization of multitemporal satellite
imagery with the iteratively re-weighted MAD transformation. Remote Sensing of Environment 112(3),
1025-1036. doi:10.1016/j.rse.2007.07.013
Canty, M. J., Nielsen, A. A. and Schmidt, M. (2004). Automatic radiometric normalization of
multitemporal satellite imagery. Remote Sensing of Environment 91(3-4), 441-451.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import linalg, special

from ._blas import one_blas_thread

__all__ = ["MadResult", "RadiometricFit", "irmad", "invariant_pixels", "orthogonal_regression", "normalise",
           "fit_flag", "fit_date", "MIN_R2", "GAIN_TOLERANCE", "IRMAD_TOL", "IRMAD_FIT_PIXELS"]

#: A fit whose coefficient of determination is below this is flagged as poor (a choice of this package).
MIN_R2 = 0.8
#: A gain further than this from 1 is flagged (default of the normalisation check).
GAIN_TOLERANCE = 0.05


@dataclass(frozen=True)
class MadResult:
    """IR-MAD of two dates: ``mad`` (n_pixels, n_bands) variates, ordered from the least correlated
    canonical pair; ``chi2`` (n_pixels,) the sum of squared standardised variates; ``no_change``
    (n_pixels,) the probability of no change; ``rho`` (n_bands,) canonical correlations; ``iterations``;
    ``transform`` (2 n_bands, n_bands) and ``offset`` (n_bands,): ``mad = [x, y] @ transform - offset``."""

    mad: np.ndarray
    chi2: np.ndarray
    no_change: np.ndarray
    rho: np.ndarray
    iterations: int
    converged: bool = True
    transform: np.ndarray | None = None
    offset: np.ndarray | None = None


@dataclass(frozen=True)
class RadiometricFit:
    """Per-band normalisation of one date: ``reference ~ offset + gain * date``.

    Arrays are per band; ``flag`` is '' when the fit is fine, otherwise the reason (poor fit, gain far
    from 1, too few invariant pixels).
    """

    gain: np.ndarray
    offset: np.ndarray
    gain_se: np.ndarray
    offset_se: np.ndarray
    r2: np.ndarray
    n: int
    flag: str = ""


def _weighted_cov(z: np.ndarray, w: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    sw = w.sum()
    zw = z * (w / sw)[:, None]
    mean = zw.sum(axis=0)
    # E_w[z z'] - mean mean': one product, no centred copy (z is reflectance of order 1, so the
    # difference loses nothing that matters in double precision)
    return mean, zw.T @ z - np.outer(mean, mean)


def _check_conditioning(*covariances: np.ndarray, rcond: float = 1e-10) -> None:
    """Raise LinAlgError when a band covariance is (numerically) singular: linearly dependent bands, such as
    noise-free mixtures of fewer endmembers than bands, have no canonical variates."""
    for c in covariances:
        d = np.sqrt(np.clip(np.diag(c), 0.0, None))
        if not np.all(np.isfinite(c)) or np.any(d == 0):
            raise np.linalg.LinAlgError("a band is constant or not finite on these pixels")
        eig = np.linalg.eigvalsh(c / np.outer(d, d))  # of the correlation matrix: scale-free
        if eig[0] < rcond * eig[-1]:
            raise np.linalg.LinAlgError("linearly dependent bands (singular covariance)")


#: Convergence of IR-MAD: the largest change of a canonical correlation between two iterations. On
#: related dates (benchmarks/bench_comparability.py) 0.001 chose the same invariant pixels at the 0.95
#: level as 0.0001 (54 of 54, 51 of 51, 49 of 48 in 10 000) in about 14 iterations instead of 20
#: (a choice of this package).
IRMAD_TOL = 1e-3
#: Pixels :func:`fit_date` iterates IR-MAD on (then scores all): a 12 x 12 covariance (six bands) from
#: 5 000 pixels has entries to about 2 % (relative standard error near sqrt(2 / n); Anderson 2003, from
#: memory); iterating on all 20 000 sampled pixels cost 4 times as much for the same invariant pixels.
IRMAD_FIT_PIXELS = 5000


def irmad(x: np.ndarray, y: np.ndarray, *, max_iter: int = 50, tol: float = IRMAD_TOL,
          fit_pixels: int | None = None) -> MadResult:
    """Iteratively re-weighted MAD transformation of two dates.

    Canonical correlation of the two dates (weighted covariances, generalised symmetric eigenproblem by
    :func:`scipy.linalg.eigh`); the differences of the canonical variates are the MAD variates, whose
    standardised squares sum to a chi-square statistic with ``n_bands`` degrees of freedom for unchanged
    pixels. Each iteration weights pixels by their no-change probability until the canonical
    correlations change by less than ``tol``.

    Parameters
    ----------
    x, y : (n_pixels, n_bands) ndarray
        The same pixels on two dates, all finite.
    max_iter : int
        Most iterations.
    tol : float
        Convergence: largest change of a canonical correlation between iterations.
    fit_pixels : int, optional
        Iterate on every k-th pixel only, about ``fit_pixels`` of them, then score every pixel with the
        settled transformation (MAD variates, chi-square, no-change probability). The canonical
        transformation of 2 x bands variables is set by a few thousand pixels; scoring all of them keeps
        every candidate invariant pixel. Default: iterate on all.

    Returns
    -------
    MadResult

    References
    ----------
    Nielsen, A. A. (2007). doi:10.1109/TIP.2006.888195
    Canty, M. J. and Nielsen, A. A. (2008). doi:10.1016/j.rse.2007.07.013

    Examples
    --------
    >>> import numpy as np
    >>> rng = np.random.default_rng(0)
    >>> x = rng.random((2000, 3))
    >>> y = 1.1 * x + 0.02 + rng.normal(0, 0.01, x.shape)
    >>> y[:200] = rng.random((200, 3))          # changed pixels
    >>> res = irmad(x, y)
    >>> bool(res.no_change[:200].max() < 1e-6 < 0.1 < res.no_change[200:].mean())
    True
    """
    x = np.asarray(x, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    if x.ndim != 2 or x.shape != y.shape:
        raise ValueError(f"x and y must be (n_pixels, n_bands) of one shape, got {x.shape} and {y.shape}")
    n, p = x.shape
    if n <= 2 * p:
        raise ValueError(f"IR-MAD needs more pixels than 2 x bands ({2 * p}), got {n}")
    with one_blas_thread():
        if fit_pixels is None or n <= fit_pixels:
            return _irmad(x, y, max_iter, tol)
        step = int(np.ceil(n / fit_pixels))
        fit = _irmad(x[::step], y[::step], max_iter, tol)
        z = np.concatenate([x, y], axis=1)
        mad = z @ fit.transform - fit.offset
        chi2 = _chi2(mad, fit.rho)
        return MadResult(mad, chi2, special.chdtrc(p, chi2), fit.rho, fit.iterations, fit.converged)


def _chi2(mad: np.ndarray, rho: np.ndarray) -> np.ndarray:
    """Sum of the standardised squared MAD variates (variance of a MAD variate: 2 (1 - rho))."""
    return (mad * mad) @ (1.0 / np.maximum(2.0 * (1.0 - rho), 1e-12))


def _irmad(x: np.ndarray, y: np.ndarray, max_iter: int, tol: float) -> MadResult:
    # tall-and-thin products on one BLAS thread: on a busy machine, BLAS threads waiting for a core made
    # them several times slower than a single thread
    n, p = x.shape
    z = np.concatenate([x, y], axis=1)
    w = np.ones(n)
    rho_old = np.full(p, np.inf)
    converged = False
    for it in range(1, max_iter + 1):
        mean, s = _weighted_cov(z, w)
        s11, s22, s12 = s[:p, :p], s[p:, p:], s[:p, p:]
        _check_conditioning(s11, s22)
        s22_inv_s21 = linalg.solve(s22, s12.T, assume_a="pos")
        # s12 s22^-1 s21 a = rho^2 s11 a; eigh normalises a' s11 a = 1 (unit variance of u = a'x)
        rho2, a = linalg.eigh(s12 @ s22_inv_s21, s11)
        rho = np.sqrt(np.clip(rho2, 0.0, 1.0))
        b = s22_inv_s21 @ a / np.where(rho > 0, rho, 1.0)  # unit variance of v = b'y, corr(u, v) = rho
        ab = np.concatenate([a, -b])  # mad = a'(x - mean_x) - b'(y - mean_y) in one product
        mad = z @ ab - mean @ ab
        chi2 = _chi2(mad, rho)
        w = special.chdtrc(p, chi2)  # chi-square survival function: P(chi2_p > chi2)
        if np.max(np.abs(rho - rho_old)) < tol:
            converged = True
            break
        rho_old = rho
    return MadResult(mad, chi2, w, rho, it, converged, ab, mean @ ab)


def invariant_pixels(x: np.ndarray, y: np.ndarray, *, threshold: float = 0.95, **irmad_kw) -> np.ndarray:
    """Boolean mask (n_pixels,) of pseudo-invariant pixels: IR-MAD no-change probability above ``threshold``.

    References
    ----------
    Canty, M. J. and Nielsen, A. A. (2008). doi:10.1016/j.rse.2007.07.013

    Examples
    --------
    >>> import numpy as np
    >>> rng = np.random.default_rng(0)
    >>> x = rng.random((500, 2))
    >>> y = 0.9 * x + 0.01 + rng.normal(0, 1e-3, x.shape)
    >>> y[:100] += 0.3                           # changed pixels
    >>> keep = invariant_pixels(x, y)
    >>> bool(keep[:100].any()), bool(keep[100:].any())
    (False, True)
    """
    return irmad(x, y, **irmad_kw).no_change > threshold


def orthogonal_regression(x: np.ndarray, y: np.ndarray) -> tuple[float, float, float, float, float, int]:
    """Orthogonal (total least squares) regression ``y ~ offset + gain * x``.

    The line is the first principal axis of the (x, y) covariance. Standard errors are those of
    Canty, Nielsen and Schmidt (2004, eqs. 9-11, after Kendall and Stuart):
    ``sigma^2 = n (s_yy - 2 b s_xy + b^2 s_xx) / ((n - 2)(1 + b^2))``, ``tau = sigma^2 b / ((1 + b^2) s_xy)``,
    ``se_b^2 = sigma^2 b (1 + b^2)(1 + tau) / (n s_xy)`` and
    ``se_a^2 = sigma^2 b (1 + b^2)(xbar^2 (1 + tau) + s_xy / b) / (n s_xy)``.

    Parameters
    ----------
    x, y : (n,) ndarray
        Finite values of the date to normalise (x) and the reference date (y).

    Returns
    -------
    gain, offset, gain_se, offset_se, r2, n
        ``r2`` is the squared Pearson correlation.

    References
    ----------
    Canty, M. J., Nielsen, A. A. and Schmidt, M. (2004). Remote Sensing of Environment 91(3-4), 441-451.
    Canty, M. J. and Nielsen, A. A. (2008). doi:10.1016/j.rse.2007.07.013

    Examples
    --------
    >>> import numpy as np
    >>> x = np.linspace(0, 1, 50)
    >>> g, o, *_ = orthogonal_regression(x, 2 * x + 1)
    >>> round(g, 6), round(o, 6)
    (2.0, 1.0)
    """
    x = np.asarray(x, dtype=np.float64).ravel()
    y = np.asarray(y, dtype=np.float64).ravel()
    n = x.size
    if n < 3:
        return np.nan, np.nan, np.nan, np.nan, np.nan, n
    xm, ym = x.mean(), y.mean()
    s = np.cov(np.stack([x, y]), bias=True)
    sxx, syy, sxy = s[0, 0], s[1, 1], s[0, 1]
    _, vec = linalg.eigh(s)
    e = vec[:, -1]  # first principal axis
    if e[0] == 0 or sxy == 0:
        return np.nan, np.nan, np.nan, np.nan, np.nan, n
    b = e[1] / e[0]
    a = ym - b * xm
    sigma2 = n * (syy - 2 * b * sxy + b * b * sxx) / ((n - 2) * (1 + b * b))
    tau = sigma2 * b / ((1 + b * b) * sxy)
    se_b = np.sqrt(max(sigma2 * b * (1 + b * b) * (1 + tau) / (n * sxy), 0.0))
    se_a = np.sqrt(max(sigma2 * b * (1 + b * b) * (xm * xm * (1 + tau) + sxy / b) / (n * sxy), 0.0))
    r2 = sxy * sxy / (sxx * syy) if sxx > 0 and syy > 0 else np.nan
    return float(b), float(a), float(se_b), float(se_a), float(r2), n


def normalise(values: np.ndarray, gain: np.ndarray, offset: np.ndarray) -> np.ndarray:
    """Apply a normalisation: ``offset + gain * values`` with gain and offset per band (last axis).

    Examples
    --------
    >>> normalise(np.array([[0.1, 0.2]]), np.array([2.0, 1.0]), np.array([0.0, 0.5]))
    array([[0.2, 0.7]])
    """
    values = np.asarray(values)
    dtype = values.dtype if np.issubdtype(values.dtype, np.floating) else np.float64
    out = np.asarray(offset) + np.asarray(gain) * values
    return out.astype(dtype, copy=False)


def fit_flag(gain: np.ndarray, r2: np.ndarray, *, min_r2: float = MIN_R2,
             gain_tolerance: float = GAIN_TOLERANCE, band_names=None) -> str:
    """Reason string for a date's fit: '' when fine, else which bands fit poorly or have a gain far from 1."""
    names = list(band_names) if band_names is not None else [str(i) for i in range(len(gain))]
    reasons = []
    poor = [f"{nm} (R2 {v:.2f})" for nm, v in zip(names, r2) if not (v >= min_r2)]
    if poor:
        reasons.append(f"poor fit, R2 below {min_r2}: " + ", ".join(poor))
    off = [f"{nm} ({g:.3f})" for nm, g in zip(names, gain) if np.isfinite(g) and abs(g - 1) > gain_tolerance]
    if off:
        reasons.append(f"gain departs from 1 by more than {gain_tolerance}: " + ", ".join(off))
    return "; ".join(reasons)


def fit_date(x: np.ndarray, y: np.ndarray, *, threshold: float = 0.95, min_pixels: int = 50,
             min_r2: float = MIN_R2, gain_tolerance: float = GAIN_TOLERANCE, band_names=None,
             fit_pixels: int | None = IRMAD_FIT_PIXELS) -> RadiometricFit:
    """Normalisation of one date ``x`` to the reference ``y`` from their pseudo-invariant pixels.

    Parameters
    ----------
    x, y : (n_pixels, n_bands) ndarray
        The same pixels on the date and on the reference; rows with any NaN are dropped.
    threshold : float
        No-change probability above which a pixel is invariant (:func:`invariant_pixels`).
    min_pixels : int
        Fewest invariant pixels for a fit; fewer gives NaN coefficients and a flag saying so.
    min_r2, gain_tolerance
        Flag levels (:func:`fit_flag`).
    fit_pixels : int or None
        Pixels IR-MAD iterates on before scoring all (:func:`irmad`; :data:`IRMAD_FIT_PIXELS`).

    Returns
    -------
    RadiometricFit

    References
    ----------
    Canty, M. J. and Nielsen, A. A. (2008). doi:10.1016/j.rse.2007.07.013

    Examples
    --------
    >>> import numpy as np
    >>> x = np.random.default_rng(0).random((1000, 3))
    >>> fit = fit_date(x, 1.1 * x + 0.02)
    >>> np.round(fit.gain, 3).tolist(), fit.flag[:9]
    ([1.1, 1.1, 1.1], 'gain depa')
    """
    x = np.asarray(x, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    p = x.shape[1]
    nan = np.full(p, np.nan)
    ok = np.isfinite(x).all(axis=1) & np.isfinite(y).all(axis=1)
    x, y = x[ok], y[ok]
    if x.shape[0] <= max(2 * p, min_pixels):
        return RadiometricFit(nan, nan, nan, nan, nan, int(x.shape[0]),
                              f"too few pixels valid on both dates: {x.shape[0]}, at least {max(2 * p, min_pixels) + 1} needed")
    try:
        mad = irmad(x, y, fit_pixels=fit_pixels)
    except np.linalg.LinAlgError:
        # linearly dependent bands (e.g. noise-free mixtures of fewer endmembers than bands): no canonical
        # variates, so no invariant pixels can be chosen; flagged, never passed as measured
        return RadiometricFit(nan, nan, nan, nan, nan, int(x.shape[0]),
                              "not measured: the bands are linearly dependent on these pixels (singular covariance)")
    keep = mad.no_change > threshold
    n = int(keep.sum())
    if n < min_pixels:
        return RadiometricFit(nan, nan, nan, nan, nan, n,
                              f"too few invariant pixels: {n} of {x.shape[0]}, at least {min_pixels} needed")
    cols = np.array([orthogonal_regression(x[keep, k], y[keep, k])[:5] for k in range(p)]).T
    gain, offset, gain_se, offset_se, r2 = cols
    flag = fit_flag(gain, r2, min_r2=min_r2, gain_tolerance=gain_tolerance, band_names=band_names)
    if not mad.converged:
        note = f"invariant pixels uncertain: IR-MAD did not settle in {mad.iterations} iterations"
        flag = f"{flag}; {note}" if flag else note
    return RadiometricFit(gain, offset, gain_se, offset_se, r2, n, flag)
