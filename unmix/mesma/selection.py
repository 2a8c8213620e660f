"""Multiple endmember spectral mixture analysis (MESMA): the selection rule and the entry points.

Each pixel is unmixed with many small candidate models -- at most one member from each
endmember class (bundle), plus photometric shade when given -- and the simplest model that fits
is kept (Roberts et al. 1998). This lets the endmembers change from pixel to pixel, which a single
fixed endmember set cannot do.

Selection rule (applied to every pixel):

1. Candidate models use 1, 2, ... up to ``max_classes`` classes, one member per class, and always
   include shade when a shade spectrum is given.
2. Each model is solved by least squares with the fractions (shade included) summing to one
   (``constraint="sum-to-one"``, the original formulation: shade takes the complement), or with
   non-negative fractions summing to one (``constraint="fcls"``).
3. A model is **accepted** when its rmse <= ``max_rmse``, every class fraction lies within
   ``fraction_bounds`` and the shade fraction lies within ``[fraction_bounds[0], max_shade]``
   (limits of Roberts et al. 1998). Under ``"fcls"`` a model in which a class gets fraction 0
   (an active bound) is not accepted: its fit is that of the smaller model without the class,
   which is a candidate of its own, and the class is not present in the pixel.
4. Among the accepted models with the same number of classes the lowest rmse wins (ties: first in
   enumeration order). Sizes are then visited from small to large: the smallest size with an
   accepted model gives the first choice, and a larger size replaces the current choice only when
   its rmse is lower by more than ``min_rmse_gain``. Roberts et al. (1998) keep the simplest model
   that meets the limits (``min_rmse_gain=inf``); later work lets a more complex model in only for
   a minimum rmse gain (Franke et al. 2009 use a fixed gain threshold; its value, about 0.007
   reflectance, is from memory). The default, 0.001 reflectance, is set against noise: adding a
   class that is absent lowers the residual sum of squares by about sigma^2 chi^2_1, i.e. the rmse
   by about sigma^2 chi^2_1 / (2 n rmse); with n = 6 bands, 3 fitted endmembers and 40 dB noise
   on 0.25 reflectance (sigma = 0.0025) the 95th percentile (chi^2_1 = 3.84) is about 0.001. So
   fitting noise alone rarely earns a larger model, and with 100+ bands far less so. On invented
   bundles at 40 dB this default keeps a wrongly added class below 2 % (hyperspectral) to 6 %
   (6 bands) of absent classes, while a 0.0025 gain already drops some classes covering 30 % of
   a pixel when their spectra resemble a mix of the others. Raise it for data whose library
   mismatch exceeds the noise.

A pixel with a NaN band is *no data*: NaN fractions and rmse, members -1, ``unmodelled`` False.
A valid pixel that no model fits is *unmodelled*: NaN fractions and rmse, members -1,
``unmodelled`` True.

References
----------
Roberts, D. A., Gardner, M., Church, R., Ustin, S., Scheer, G., Green, R. O. (1998). Mapping
chaparral in the Santa Monica Mountains using multiple endmember spectral mixture models. Remote
Sensing of Environment 65(3), 267-279. https://doi.org/10.1016/S0034-4257(98)00037-6

Franke, J., Roberts, D. A., Halligan, K., Menz, G. (2009). Hierarchical multiple endmember
spectral mixture analysis (MESMA) of hyperspectral imagery for urban environments. Remote Sensing
of Environment 113(8), 1712-1723. https://doi.org/10.1016/j.rse.2009.03.018

Heinz, D. C., Chang, C.-I. (2001). Fully constrained least squares linear spectral mixture
analysis method for material quantification in hyperspectral imagery. IEEE Transactions on
Geoscience and Remote Sensing 39(3), 529-545. https://doi.org/10.1109/36.911111
"""

from __future__ import annotations

import enum
from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np

from ..errors import InputError
from . import _select_numba as _nb
from .models import _Models, _prepare_models

__all__ = ["MesmaConstraint", "MesmaResult", "MesmaModels", "mesma", "mesma_models"]


class MesmaConstraint(enum.StrEnum):
    """How each candidate model is solved."""

    SUM_TO_ONE = "sum-to-one"
    """Least squares with fractions (shade included) summing to one (Roberts et al. 1998)."""
    FCLS = "fcls"
    """Non-negative fractions summing to one (Heinz & Chang 2001) within each model."""


@dataclass(frozen=True)
class MesmaResult:
    """Per-pixel outcome of :func:`mesma`.

    Attributes
    ----------
    fractions : (..., n_classes [+ 1]) ndarray
        Fraction of each class of the chosen model, 0 for classes absent from it, shade last when a
        shade spectrum was given; NaN where no model fits or the input has no data [-].
    names : tuple of str
        Names of the fraction columns: the class names in bundle order, then ``"shade"``.
    members : (..., n_classes) ndarray of int16
        Index of the chosen member within each class bundle; -1 where the class is absent from the
        chosen model, where no model fits, or where the input has no data.
    rmse : (...) ndarray
        Root mean square residual of the chosen model over the bands (unweighted, also when band
        weights were given, as in :func:`unmix.solvers.estimate_fractions`) [reflectance]; NaN
        where no model fits or no data.
    unmodelled : (...) ndarray of bool
        True for valid pixels that no candidate model fits (False for no-data pixels).
    n_models : int
        Number of candidate models evaluated for each pixel.
    """

    fractions: np.ndarray
    names: tuple[str, ...]
    members: np.ndarray
    rmse: np.ndarray
    unmodelled: np.ndarray
    n_models: int

    @property
    def classes(self) -> tuple[str, ...]:
        """Class names (``names`` without shade)."""
        return self.names[: self.members.shape[-1]]


@dataclass(frozen=True)
class MesmaModels:
    """Every candidate model's solution, from :func:`mesma_models`.

    Attributes
    ----------
    fractions : (..., n_models, n_classes [+ 1]) ndarray
        Fractions of each model in the column layout of :class:`MesmaResult` (0 for classes the
        model does not use) [-].
    rmse : (..., n_models) ndarray
        Root mean square residual of each model [reflectance].
    members : (n_models, n_classes) ndarray of int16
        Member index of each class in each model, -1 where the model does not use the class.
    names : tuple of str
        Fraction column names (classes, then ``"shade"``).
    """

    fractions: np.ndarray
    rmse: np.ndarray
    members: np.ndarray
    names: tuple[str, ...]



# --------------------------------------------------------------------------------------------
# validation and model tables


def _check_reflectance(reflectance) -> np.ndarray:
    x = np.asarray(reflectance)
    if x.ndim < 1:
        raise InputError("reflectance must have at least one dimension (..., n_bands); got a scalar")
    if x.dtype not in (np.float32, np.float64):
        if x.dtype.kind not in "biuf":
            raise InputError(f"reflectance must be numeric; got dtype {x.dtype}")
        x = x.astype(np.float64)
    return x



def _check_limits(max_rmse, fraction_bounds, max_shade, min_rmse_gain):
    if not (np.isfinite(max_rmse) and max_rmse > 0):
        raise InputError(f"max_rmse must be a positive reflectance, e.g. 0.025; got {max_rmse!r}")
    try:
        lo, hi = (float(v) for v in fraction_bounds)
    except (TypeError, ValueError):
        raise InputError(f"fraction_bounds must be a pair (low, high), e.g. (-0.05, 1.05); got {fraction_bounds!r}") from None
    if not (np.isfinite(lo) and np.isfinite(hi) and lo < hi):
        raise InputError(f"fraction_bounds must be finite with low < high, e.g. (-0.05, 1.05); got {fraction_bounds!r}")
    if not (np.isfinite(max_shade) and max_shade > lo):
        raise InputError(f"max_shade must be finite and above fraction_bounds[0] ({lo}); got {max_shade!r}")
    if not (min_rmse_gain >= 0):  # also rejects NaN; inf keeps the simplest accepted model
        raise InputError(f"min_rmse_gain must be >= 0 (inf keeps the simplest accepted model); got {min_rmse_gain!r}")
    return float(max_rmse), lo, hi, float(max_shade), float(min_rmse_gain)


def _constraint(constraint) -> MesmaConstraint:
    try:
        return MesmaConstraint(constraint)
    except ValueError:
        known = ", ".join(repr(c.value) for c in MesmaConstraint)
        raise InputError(f"constraint {constraint!r} is not known for MESMA; use one of {known}") from None


def _run_mesma(x: np.ndarray, models: _Models, constraint: MesmaConstraint, max_rmse, lo, hi,
               max_shade, min_rmse_gain):
    """Kernel call on prepared models; returns (fractions, members, rmse, unmodelled)."""
    lead = x.shape[:-1]
    # one compiled specialisation (float64 in and out) keeps the first-call compile time down;
    # the kernel computes in float64 anyway
    X = np.ascontiguousarray(x.reshape(-1, x.shape[-1]), dtype=np.float64)
    n_pix = X.shape[0]
    n_out = len(models.names)
    frac = np.zeros((n_pix, n_out))
    mem = np.full((n_pix, models.n_classes), -1, dtype=np.int16)
    rmse = np.empty(n_pix)
    unmod = np.zeros(n_pix, dtype=np.bool_)
    if n_pix:
        _nb.mesma_select(
            X, models.sw, models.Ew, models.GE, models.E, models.GEu, models.weighted,
            models.idx, models.nq, models.A, models.c, models.size_start, models.pool_slot,
            models.pool_mem, models.n_classes, models.has_shade,
            constraint is MesmaConstraint.FCLS, max_rmse * max_rmse * models.n_bands, lo, hi,
            max_shade, min_rmse_gain, frac, mem, rmse, unmod,
        )
    return (frac.astype(x.dtype, copy=False).reshape(lead + (n_out,)),
            mem.reshape(lead + (models.n_classes,)),
            rmse.astype(x.dtype, copy=False).reshape(lead), unmod.reshape(lead))


# --------------------------------------------------------------------------------------------
# public entry points


def mesma(
    reflectance,
    bundles: Mapping[str, np.ndarray],
    *,
    shade=None,
    max_rmse: float = 0.025,
    fraction_bounds: tuple[float, float] = (-0.05, 1.05),
    max_shade: float = 0.8,
    constraint: MesmaConstraint | str = MesmaConstraint.SUM_TO_ONE,
    max_classes: int | None = None,
    min_rmse_gain: float = 0.001,
    weights=None,
) -> MesmaResult:
    """Multiple endmember spectral mixture analysis: per-pixel choice of endmembers (Roberts et al. 1998).

    Every pixel is unmixed with every candidate model -- at most one member of each class, with
    shade always included when given -- and the selection rule of the module docstring picks
    one model per pixel. All models are evaluated in one compiled, parallel pass; the work per
    model does not grow with the band count.

    Parameters
    ----------
    reflectance : (..., n_bands) ndarray
        Surface reflectance [0..1]; NaN (or inf) marks no data. float32 gives float32 outputs
        (computed in float64).
    bundles : mapping of str to (n_members, n_bands) ndarray
        Endmember spectra of each class [0..1]; insertion order is the output class order.
    shade : (n_bands,) ndarray, optional
        Photometric shade spectrum (often zero or a dark-water spectrum), part of every model.
    max_rmse : float
        Largest accepted model rmse [reflectance].
    fraction_bounds : (float, float)
        Accepted range of each class fraction (and lower limit of shade) [-].
    max_shade : float
        Largest accepted shade fraction [-].
    constraint : {"sum-to-one", "fcls"}
        Solve each model with the sum-to-one constraint (shade takes the complement), or with
        non-negative fractions summing to one.
    max_classes : int, optional
        Most classes in one model (default: all).
    min_rmse_gain : float
        A model with more classes replaces the current choice only when its rmse is lower by
        more than this [reflectance]; ``np.inf`` keeps the simplest accepted model.
    weights : (n_bands,) ndarray, optional
        Positive band weights of each model's least squares, e.g. inverse noise variance
        [1/reflectance**2]; the rmse used for acceptance stays the unweighted one.

    Returns
    -------
    MesmaResult
        ``fractions (..., n_classes [+1])``, ``names``, ``members (..., n_classes)`` int16,
        ``rmse (...)``, ``unmodelled (...)`` bool, ``n_models``.

    Raises
    ------
    InputError
        Empty or non-finite bundle, unknown constraint, limits out of range.
    BandMismatchError
        A bundle, the shade spectrum or the weights do not have the reflectance's band count.
    RankError
        Models with more endmembers than the bands can separate.

    Warns
    -----
    CollinearityWarning
        Some candidate models have (nearly) collinear endmembers; they are skipped.

    References
    ----------
    Roberts, D. A., et al. (1998). Mapping chaparral in the Santa Monica Mountains using multiple
    endmember spectral mixture models. Remote Sensing of Environment 65(3), 267-279.
    https://doi.org/10.1016/S0034-4257(98)00037-6

    Franke, J., et al. (2009). Hierarchical multiple endmember spectral mixture analysis (MESMA) of
    hyperspectral imagery for urban environments. Remote Sensing of Environment 113(8), 1712-1723.
    https://doi.org/10.1016/j.rse.2009.03.018

    Examples
    --------
    >>> import numpy as np
    >>> from unmix.mesma import mesma
    >>> bundles = {  # 6 bands, blue to SWIR-2
    ...     "vegetation": np.array([[0.03, 0.06, 0.04, 0.45, 0.25, 0.12],
    ...                             [0.04, 0.08, 0.06, 0.35, 0.22, 0.11]]),
    ...     "soil": np.array([[0.12, 0.18, 0.24, 0.30, 0.38, 0.34],
    ...                       [0.08, 0.12, 0.16, 0.22, 0.30, 0.32]])}
    >>> pixel = 0.6 * bundles["vegetation"][1] + 0.3 * bundles["soil"][0]  # 10 % shade
    >>> res = mesma(pixel.astype(np.float32), bundles, shade=np.zeros(6))
    >>> res.names, res.members.tolist()
    (('vegetation', 'soil', 'shade'), [1, 0])
    >>> [round(float(f), 3) for f in res.fractions]
    [0.6, 0.3, 0.1]
    """
    x = _check_reflectance(reflectance)
    limits = _check_limits(max_rmse, fraction_bounds, max_shade, min_rmse_gain)
    cons = _constraint(constraint)
    models = _prepare_models(bundles, shade, x.shape[-1], max_classes=max_classes, weights=weights)
    frac, mem, rmse, unmod = _run_mesma(x, models, cons, *limits)
    return MesmaResult(fractions=frac, names=models.names, members=mem, rmse=rmse,
                       unmodelled=unmod, n_models=models.n_models)


def mesma_models(
    reflectance,
    bundles: Mapping[str, np.ndarray],
    *,
    shade=None,
    constraint: MesmaConstraint | str = MesmaConstraint.SUM_TO_ONE,
    max_classes: int | None = None,
    weights=None,
) -> MesmaModels:
    """Solve every candidate MESMA model for every pixel, without selection (diagnostics).

    Uses the same compiled solvers as :func:`mesma`; memory grows as pixels x models, so use it
    on samples.

    Parameters
    ----------
    reflectance : (..., n_bands) ndarray
        Surface reflectance [0..1]; NaN marks no data.
    bundles, shade, constraint, max_classes, weights
        As in :func:`mesma`.

    Returns
    -------
    MesmaModels
        ``fractions (..., n_models, n_classes [+1])``, ``rmse (..., n_models)``,
        ``members (n_models, n_classes)``, ``names``.

    References
    ----------
    Roberts, D. A., et al. (1998). Remote Sensing of Environment 65(3), 267-279.
    https://doi.org/10.1016/S0034-4257(98)00037-6

    Examples
    --------
    >>> import numpy as np
    >>> from unmix.mesma import mesma_models
    >>> bundles = {"a": np.array([[0.1, 0.2, 0.3]]), "b": np.array([[0.3, 0.2, 0.1]])}
    >>> fits = mesma_models(np.array([0.2, 0.2, 0.2]), bundles)
    >>> fits.members.tolist()
    [[0, -1], [-1, 0], [0, 0]]
    >>> np.round(fits.fractions[-1], 3).tolist()
    [0.5, 0.5]
    """
    x = _check_reflectance(reflectance)
    cons = _constraint(constraint)
    models = _prepare_models(bundles, shade, x.shape[-1], max_classes=max_classes, weights=weights)
    lead = x.shape[:-1]
    X = np.ascontiguousarray(x.reshape(-1, x.shape[-1]), dtype=np.float64)
    n_out = len(models.names)
    frac = np.zeros((X.shape[0], models.n_models, n_out))
    rmse = np.empty((X.shape[0], models.n_models))
    if X.shape[0]:
        _nb.mesma_all_models(
            X, models.sw, models.Ew, models.GE, models.E, models.GEu, models.weighted,
            models.idx, models.nq, models.A, models.c, models.pool_slot,
            cons is MesmaConstraint.FCLS, frac, rmse,
        )
    return MesmaModels(
        fractions=frac.astype(x.dtype, copy=False).reshape(lead + (models.n_models, n_out)),
        rmse=rmse.astype(x.dtype, copy=False).reshape(lead + (models.n_models,)),
        members=models.members,
        names=models.names,
    )
