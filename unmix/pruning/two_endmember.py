"""The two-endmember model (candidate + shade) that every pruning score rests on.

Every pruning score rests on this model: a candidate spectrum ``e_i`` models another
spectrum ``x_j`` together with photometric shade ``s`` (zero reflectance unless a ``shade`` spectrum is
given) and fractions summing to one,

    x̂_ij = f_ij e_i + (1 - f_ij) s,    f_ij = (e_i - s)·(x_j - s) / |e_i - s|²,

the least-squares fraction without bounds (fraction limits only enter :func:`cob`). With zero shade
the model is simply ``f_ij e_i``. From it:

* ``RMSE_ij = |x_j - x̂_ij| / sqrt(n_bands)`` [reflectance],
* ``angle_ij`` = spectral angle between ``x_j`` and ``x̂_ij`` [rad]; with zero shade the model is a
  multiple of ``e_i``, so this is the angle between ``x_j`` and ``e_i`` (also where ``f_ij = 0``).

All pairs are computed at once from the Gram matrix (no loop over spectra), so a library of a few
thousand spectra is pruned in well under a second.
"""

from __future__ import annotations

from typing import Any, NamedTuple

import numpy as np

from ..errors import InputError, ShapeError

__all__ = ["two_endmember_models"]


def _check(spectra: Any, classes: Any, shade: Any) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    s = np.asarray(spectra, dtype=np.float64)
    if s.ndim != 2:
        raise ShapeError(f"spectra must be (n_spectra, n_bands), got shape {s.shape}")
    if not np.isfinite(s).all():
        raise InputError("spectra hold NaN or infinite values; a library for pruning must be complete")
    labels = np.asarray([None if c is None else str(c) for c in classes], dtype=object)
    if labels.shape != (s.shape[0],):
        raise ShapeError(f"{labels.size} class labels for {s.shape[0]} spectra; give one label per spectrum")
    missing = [i for i, c in enumerate(labels) if c is None or c == ""]
    if missing:
        raise InputError(
            f"{len(missing)} spectra (first: row {missing[0]}) have no class label; pruning needs a class "
            "(bundle) for every spectrum: set it in the library's JSON sidecar under spectra.<name>.class"
        )
    sh = np.zeros(s.shape[1]) if shade is None else np.asarray(shade, dtype=np.float64)
    if sh.shape != (s.shape[1],):
        raise ShapeError(f"shade has shape {sh.shape}; it must be one spectrum of {s.shape[1]} bands")
    return s, labels, sh


class _Models(NamedTuple):
    fraction: np.ndarray  # (n, n) f[i, j]: candidate i modelling spectrum j
    rmse: np.ndarray  # (n, n)
    angle: np.ndarray  # (n, n) [rad]


def two_endmember_models(spectra: np.ndarray, shade: np.ndarray | None = None) -> _Models:
    """Every spectrum modelled by every other one plus shade (see the module docstring).

    Parameters
    ----------
    spectra : (n, n_bands) ndarray
        Reflectance [0..1].
    shade : (n_bands,) ndarray, optional
        Shade spectrum (default zero reflectance, i.e. photometric shade).

    Returns
    -------
    fraction, rmse, angle : (n, n) ndarray
        Row ``i`` is the candidate, column ``j`` the modelled spectrum. A candidate equal to shade
        has fraction 0 (the model is all shade). ``angle`` [rad] falls back to the angle between
        the two spectra where the model is zero; NaN only for an all-zero spectrum.

    References
    ----------
    Dennison, P. E. & Roberts, D. A. (2003). Endmember selection for multiple endmember spectral
    mixture analysis using endmember average RMSE. Remote Sensing of Environment 87:123-135.
    doi:10.1016/S0034-4257(03)00135-4

    Examples
    --------
    >>> m = two_endmember_models(np.array([[0.2, 0.2], [0.1, 0.1]]))
    >>> m.fraction.round(2).tolist(), m.rmse.round(6).tolist()
    ([[1.0, 0.5], [2.0, 1.0]], [[0.0, 0.0], [0.0, 0.0]])
    """
    s = np.asarray(spectra, dtype=np.float64)
    sh = np.zeros(s.shape[1]) if shade is None else np.asarray(shade, dtype=np.float64)
    d = s - sh  # spectra relative to shade
    g = d @ d.T  # g[i, j] = d_i . d_j
    nrm2 = np.diag(g).copy()
    with np.errstate(divide="ignore", invalid="ignore"):
        f = np.where(nrm2[:, None] > 0, g / nrm2[:, None], 0.0)
    # |d_j - f d_i|^2 = |d_j|^2 - 2 f g_ij + f^2 |d_i|^2
    resid2 = nrm2[None, :] - 2 * f * g + f * f * nrm2[:, None]
    rmse = np.sqrt(np.clip(resid2, 0.0, None) / s.shape[1])
    # spectral angle between the spectra themselves (the model's direction under zero shade)
    norms = np.linalg.norm(s, axis=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        angle = np.arccos(np.clip((s @ s.T) / np.outer(norms, norms), -1.0, 1.0))
    if np.any(sh != 0):
        # angle between x_j and its model x̂_ij = s + f_ij d_i
        model = sh[None, None, :] + f[:, :, None] * d[:, None, :]
        dot = np.einsum("ijb,jb->ij", model, s)
        with np.errstate(divide="ignore", invalid="ignore"):
            cos = dot / (np.linalg.norm(model, axis=2) * norms[None, :])
        model_angle = np.arccos(np.clip(cos, -1.0, 1.0))
        angle = np.where(np.isfinite(model_angle), model_angle, angle)
    return _Models(f, rmse, angle)


def _in_class_mean(values: np.ndarray, labels: np.ndarray) -> np.ndarray:
    same = labels[:, None] == labels[None, :]
    np.fill_diagonal(same, False)
    n_other = same.sum(axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        out = np.where(n_other > 0, np.where(same, values, 0.0).sum(axis=1) / n_other, np.nan)
    return out

