"""Agreement of estimated cover fractions with reference fractions at points (plots, interpreted images)."""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import pandas as pd

from ..errors import InputError, ShapeError

__all__ = ["fraction_agreement"]


def fraction_agreement(estimated, reference, *, endmembers: Sequence[str] | None = None) -> pd.DataFrame:
    """Mean absolute error, RMSE, bias and R^2 of estimated against reference fractions, per endmember.

    Parameters
    ----------
    estimated, reference : (n_points, n_endmembers) array_like of float
        Estimated and reference fractions [0..1] at the same points. A pair with NaN on either side is
        left out of that endmember's figures.
    endmembers : sequence of str, optional
        Names of the columns (default ``endmember_0`` ...).

    Returns
    -------
    pandas.DataFrame
        One row per endmember: ``n`` (pairs used), ``mae = mean|e - r|``, ``rmse = sqrt(mean (e - r)^2)``,
        ``bias = mean(e - r)`` (positive: estimates too high), ``r2`` (squared Pearson correlation,
        the R^2 of the least-squares line of estimate on reference), ``r2_identity``
        (``1 - sum (e - r)^2 / sum (r - mean r)^2``, agreement with the 1:1 line; negative when the
        estimates are further from the references than the references' mean is), ``slope`` and
        ``intercept`` of that least-squares line. NaN where fewer than 2 pairs (or no spread of
        the references) leave a value undefined.

    References
    ----------
    Willmott, C. J., & Matsuura, K. (2005). Advantages of the mean absolute error (MAE) over the root
    mean square error (RMSE) in assessing average model performance. Climate Research 30, 79-82.
    https://doi.org/10.3354/cr030079
    Pineiro, G., Perelman, S., Guerschman, J. P., & Paruelo, J. M. (2008). How to evaluate models:
    observed vs. predicted or predicted vs. observed? Ecological Modelling 216, 316-322.
    https://doi.org/10.1016/j.ecolmodel.2008.05.006

    Examples
    --------
    >>> t = fraction_agreement([[0.2], [0.5], [0.9]], [[0.1], [0.5], [0.8]], endmembers=["soil"])
    >>> round(float(t.loc["soil", "bias"]), 4), round(float(t.loc["soil", "mae"]), 4)
    (0.0667, 0.0667)
    """
    e = np.asarray(estimated, dtype=float)
    r = np.asarray(reference, dtype=float)
    if e.ndim == 1 and r.ndim == 1:  # one endmember
        e, r = e[:, None], r[:, None]
    if e.shape != r.shape or e.ndim != 2:
        raise ShapeError(f"estimated and reference fractions need the same (points, endmembers) shape, got "
                         f"{e.shape} and {r.shape}")
    names = [str(n) for n in endmembers] if endmembers is not None else [f"endmember_{i}" for i in range(e.shape[1])]
    if len(names) != e.shape[1]:
        raise ShapeError(f"{len(names)} endmember names for {e.shape[1]} columns of fractions")
    if np.any(np.isinf(e)) or np.any(np.isinf(r)):
        raise InputError("fractions must be finite numbers or NaN (no data); infinite values found")
    rows = []
    for j in range(e.shape[1]):
        ok = np.isfinite(e[:, j]) & np.isfinite(r[:, j])
        ej, rj = e[ok, j], r[ok, j]
        n = int(ok.sum())
        d = ej - rj
        row = {"n": n, "mae": np.nan, "rmse": np.nan, "bias": np.nan, "r2": np.nan, "r2_identity": np.nan,
               "slope": np.nan, "intercept": np.nan}
        if n >= 1:
            row.update(mae=float(np.mean(np.abs(d))), rmse=float(np.sqrt(np.mean(d ** 2))), bias=float(np.mean(d)))
        sxx = float(np.sum((rj - rj.mean()) ** 2)) if n else 0.0
        if n >= 2 and sxx > 0:
            syy = float(np.sum((ej - ej.mean()) ** 2))
            sxy = float(np.sum((rj - rj.mean()) * (ej - ej.mean())))
            slope = sxy / sxx
            row.update(slope=slope, intercept=float(ej.mean() - slope * rj.mean()),
                       r2=(sxy * sxy / (sxx * syy)) if syy > 0 else np.nan,
                       r2_identity=1.0 - float(np.sum(d ** 2)) / sxx)
        rows.append(row)
    table = pd.DataFrame(rows, index=pd.Index(names, name="endmember"))
    table["n"] = table["n"].astype(np.int64)
    return table
