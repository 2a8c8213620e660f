"""Candidate MESMA models: bundle validation, enumeration of the models (at most one member per
class, shade always included when given, smallest size first) and each model's sum-to-one solution
operator, precomputed once per bundle set for the compiled kernels.
"""

from __future__ import annotations

import itertools
import math
import warnings
from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np

from ..errors import BandMismatchError, CollinearityWarning, InputError, RankError

SHADE = "shade"
_MAX_MODELS = 2_000_000
# Models whose endmember differences have a condition number above this are dropped: their
# fractions are not determined by the data (and the Gram-based solve loses accuracy there).
_MAX_COND = 1e6


@dataclass(frozen=True)
class _Models:
    """Candidate-model tables shared by the kernels (built once per bundle set)."""

    names: tuple[str, ...]
    n_classes: int
    has_shade: bool
    n_bands: int
    sw: np.ndarray  # (n_bands,) sqrt of band weights (mean weight 1)
    Ew: np.ndarray  # (n_end, n_bands) weighted pool of endmembers
    GE: np.ndarray  # (n_end, n_end) Gram matrix of the weighted pool
    E: np.ndarray  # (n_end, n_bands) unweighted pool (the rmse is unweighted)
    GEu: np.ndarray  # (n_end, n_end) its Gram matrix
    weighted: bool
    pool_slot: np.ndarray  # (n_end,) output column of each pool endmember
    pool_mem: np.ndarray  # (n_end,) member index within the class, -1 for shade
    idx: np.ndarray  # (n_models, qmax) pool index of each model column
    nq: np.ndarray  # (n_models,)
    A: np.ndarray  # (n_models, qmax + 1, qmax): [a; lam] = A b_M + c
    c: np.ndarray  # (n_models, qmax + 1)
    size_start: np.ndarray  # (n_sizes + 1,)
    members: np.ndarray  # (n_models, n_classes) int16

    @property
    def n_models(self) -> int:
        return int(self.idx.shape[0])



def _check_bundles(bundles, shade, n_bands: int, weights):
    if not isinstance(bundles, Mapping) or len(bundles) == 0:
        raise InputError(
            "bundles must be a non-empty mapping of class name -> (n_members, n_bands) array, "
            "e.g. {'green_vegetation': gv, 'soil': soil}"
        )
    names, arrays = [], []
    for name, arr in bundles.items():
        if not isinstance(name, str) or not name:
            raise InputError(f"bundle names must be non-empty strings; got {name!r}")
        if shade is not None and name == SHADE:
            raise InputError(
                f"bundle {name!r} clashes with the shade spectrum given separately; rename the class "
                "or pass the shade spectrum only as `shade=`"
            )
        e = np.asarray(arr, dtype=np.float64)
        if e.ndim == 1:
            e = e[None, :]
        if e.ndim != 2:
            raise InputError(
                f"bundle {name!r} must be a (n_members, n_bands) array; got shape {np.shape(arr)}"
            )
        if e.shape[0] == 0:
            raise InputError(f"bundle {name!r} is empty (0 members); give it at least one spectrum or drop the class")
        if e.shape[0] > np.iinfo(np.int16).max:
            raise InputError(f"bundle {name!r} has {e.shape[0]} members; at most 32767 are supported, prune it first")
        if e.shape[1] != n_bands:
            raise BandMismatchError(
                f"bundle {name!r} has {e.shape[1]} bands but the reflectance has {n_bands}; resample "
                "the library to the sensor's bands first"
            )
        if not np.all(np.isfinite(e)):
            raise InputError(f"bundle {name!r} holds NaN or infinite values; remove or repair those members")
        names.append(name)
        arrays.append(e)
    s = None
    if shade is not None:
        s = np.asarray(shade, dtype=np.float64)
        if s.ndim != 1:
            raise InputError(f"shade must be one (n_bands,) spectrum; got shape {s.shape}")
        if s.shape[0] != n_bands:
            raise BandMismatchError(
                f"the shade spectrum has {s.shape[0]} bands but the reflectance has {n_bands}; "
                "resample it to the sensor's bands"
            )
        if not np.all(np.isfinite(s)):
            raise InputError("the shade spectrum holds NaN or infinite values")
    if weights is None:
        w = np.ones(n_bands)
    else:
        w = np.asarray(weights, dtype=np.float64)
        if w.shape != (n_bands,):
            raise BandMismatchError(f"weights must have one value per band ({n_bands}); got shape {w.shape}")
        bad = np.flatnonzero(~(np.isfinite(w) & (w > 0)))
        if bad.size:
            raise InputError(
                f"weights must be positive and finite; band {bad[0]} has weight {w[bad[0]]}; give "
                "every band a positive weight (e.g. 1 / noise variance) or drop the band"
            )
        w = w / w.mean()
    return names, arrays, s, w


def _enumerate_models(counts: list[int], max_classes: int):
    """Yield (n_classes_used, ((class, member), ...)) for every candidate, smallest size first."""
    n = len(counts)
    for size in range(1, max_classes + 1):
        for classes in itertools.combinations(range(n), size):
            for mems in itertools.product(*(range(counts[k]) for k in classes)):
                yield size, tuple(zip(classes, mems))


def _prepare_models(bundles, shade, n_bands: int, *, max_classes=None, weights=None) -> _Models:
    """Validate the bundles and precompute every candidate model's sum-to-one operator."""
    names, arrays, s, w = _check_bundles(bundles, shade, n_bands, weights)
    n_classes = len(names)
    has_shade = s is not None
    if max_classes is None:
        max_classes = n_classes
    if isinstance(max_classes, bool) or not isinstance(max_classes, (int, np.integer)) or not (
        1 <= max_classes <= n_classes
    ):
        raise InputError(f"max_classes must be an integer from 1 to {n_classes} (the number of bundles); got {max_classes!r}")
    max_classes = int(max_classes)
    counts = [a.shape[0] for a in arrays]
    n_total = sum(
        math.prod(counts[k] for k in cl)
        for size in range(1, max_classes + 1)
        for cl in itertools.combinations(range(n_classes), size)
    )
    if n_total > _MAX_MODELS:
        raise InputError(
            f"{n_total} candidate models (bundle sizes {counts}, max_classes={max_classes}) exceed "
            f"{_MAX_MODELS}; prune the bundles or lower max_classes"
        )
    qmax = max_classes + int(has_shade)
    if qmax - 1 > n_bands:
        raise RankError(
            f"models of {qmax} endmembers (max_classes={max_classes}{' + shade' if has_shade else ''}) need "
            f"at least {qmax - 1} bands under the sum-to-one constraint; the data have {n_bands}. "
            "Lower max_classes."
        )

    pool = np.concatenate(arrays + ([s[None, :]] if has_shade else []), axis=0)
    offsets = np.concatenate([[0], np.cumsum(counts)])
    pool_slot = np.concatenate([np.full(cnt, k, np.int64) for k, cnt in enumerate(counts)]
                               + ([np.array([n_classes])] if has_shade else []))
    pool_mem = np.concatenate([np.arange(cnt, dtype=np.int64) for cnt in counts]
                              + ([np.array([-1])] if has_shade else []))
    sw = np.sqrt(w)
    Ew = pool * sw
    GE = Ew @ Ew.T

    idx = np.full((n_total, qmax), -1, dtype=np.int32)
    nq = np.empty(n_total, dtype=np.int32)
    sizes = np.empty(n_total, dtype=np.int64)
    members = np.full((n_total, n_classes), -1, dtype=np.int16)
    for m, (size, combo) in enumerate(_enumerate_models(counts, max_classes)):
        cols = [offsets[k] + j for k, j in combo]
        if has_shade:
            cols.append(pool.shape[0] - 1)
        idx[m, : len(cols)] = cols
        nq[m] = len(cols)
        sizes[m] = size
        for k, j in combo:
            members[m, k] = j

    # Sum-to-one operator per model from the bordered KKT matrix [[G, 1], [1', 0]], which is
    # invertible whenever the endmember differences are independent (a zero shade is fine).
    A = np.zeros((n_total, qmax + 1, qmax))
    c = np.zeros((n_total, qmax + 1))
    keep = np.ones(n_total, dtype=bool)
    for q in np.unique(nq):
        sel = np.flatnonzero(nq == q)
        cols = idx[sel, :q]
        if q > 1:
            diffs = Ew[cols[:, :-1]] - Ew[cols[:, -1:]]  # (n, q-1, n_bands)
            sv = np.linalg.svd(diffs, compute_uv=False)
            ok = sv[:, -1] > sv[:, 0] / _MAX_COND
            keep[sel[~ok]] = False
            sel, cols = sel[ok], cols[ok]
        if sel.size == 0:
            continue
        K = np.zeros((sel.size, q + 1, q + 1))
        K[:, :q, :q] = GE[cols[:, :, None], cols[:, None, :]]
        K[:, :q, q] = 1.0
        K[:, q, :q] = 1.0
        Kinv = np.linalg.inv(K)
        A[sel, : q + 1, :q] = Kinv[:, :, :q]  # fractions, then the multiplier
        c[sel, : q + 1] = Kinv[:, :, q]
    if not keep.all():
        bad = np.flatnonzero(~keep)
        ex = ", ".join(f"{names[k]}[{j}]" for k, j in enumerate(members[bad[0]]) if j >= 0)
        warnings.warn(
            f"{bad.size} of {n_total} candidate models have (nearly) collinear endmembers and are "
            f"skipped (e.g. {ex}{' + shade' if has_shade else ''}); remove near-duplicate spectra "
            "from the bundles",
            CollinearityWarning,
            stacklevel=3,
        )
        if bad.size == n_total:
            raise RankError("every candidate model has collinear endmembers; the bundles cannot be separated with these bands")
        idx, nq, sizes, members, A, c = (v[keep] for v in (idx, nq, sizes, members, A, c))
    size_start = np.searchsorted(sizes, np.arange(1, max_classes + 2)).astype(np.int64)
    return _Models(
        names=tuple(names) + ((SHADE,) if has_shade else ()),
        n_classes=n_classes,
        has_shade=has_shade,
        n_bands=n_bands,
        sw=sw,
        Ew=np.ascontiguousarray(Ew),
        GE=np.ascontiguousarray(GE),
        E=np.ascontiguousarray(pool) if weights is not None else np.ascontiguousarray(Ew),
        GEu=pool @ pool.T if weights is not None else np.ascontiguousarray(GE),
        weighted=weights is not None,
        pool_slot=pool_slot,
        pool_mem=pool_mem,
        idx=np.ascontiguousarray(idx),
        nq=nq,
        A=np.ascontiguousarray(A),
        c=np.ascontiguousarray(c),
        size_start=size_start,
        members=members,
    )
