"""Shared synthetic spectra, scenes and references for the tests of unmix.mesma (tests/test_mesma_*.py)."""

from __future__ import annotations

import itertools

import numpy as np
import pytest

# --------------------------------------------------------------------------------------------
# synthetic spectra and scenes


def smooth_spectra(rng, n, n_bands, base=None, amp=0.1, n_harm=6):
    """Random smooth reflectance spectra (n, n_bands): a sum of a few low-frequency sines."""
    wl = np.linspace(0.0, 1.0, n_bands)
    k = np.arange(1, n_harm + 1)
    coef = rng.normal(0.0, 1.0, (n, n_harm)) / k
    s = amp * (coef @ np.sin(np.pi * np.outer(k, wl)))
    if base is None:
        base = 0.25 + np.zeros(n_bands)
    return np.clip(base + s, 0.01, 0.9)


def make_bundles(rng, n_classes, n_members, n_bands, within=0.03):
    """Classes that differ strongly, members that differ mildly (within-class variability)."""
    out = {}
    for c in range(n_classes):
        base = smooth_spectra(rng, 1, n_bands, amp=0.12)[0]
        out[f"class{c}"] = smooth_spectra(rng, n_members, n_bands, base=base, amp=within)
    return out


def make_scene(rng, bundles, shade, n_pix, snr_db=40.0, n_classes_in_pixel=None):
    """Pixels with one random member per class, Dirichlet fractions, shade, noise at snr_db.

    Returns reflectance (n_pix, n_bands), true member indices (n_pix, n_classes) and true
    fractions (n_pix, n_classes + 1) (shade last). Noise: white Gaussian with
    sigma = rms(signal) / 10**(snr/20) (signal-to-noise ratio in power, common practice).
    """
    names = list(bundles)
    nc = len(names)
    n_bands = shade.shape[0]
    members = np.stack([rng.integers(0, bundles[c].shape[0], n_pix) for c in names], axis=1)
    frac = rng.dirichlet(np.ones(nc + 1), n_pix)
    if n_classes_in_pixel is not None:  # keep only that many classes per pixel
        for i in range(n_pix):
            drop = rng.choice(nc, nc - n_classes_in_pixel, replace=False)
            frac[i, drop] = 0.0
        frac /= frac.sum(axis=1, keepdims=True)
    spectra = np.stack([bundles[c][members[:, k]] for k, c in enumerate(names)], axis=1)
    x = np.einsum("pk,pkb->pb", frac[:, :nc], spectra) + frac[:, nc:] * shade[None, :]
    sigma = np.sqrt(np.mean(x**2, axis=1, keepdims=True)) / 10 ** (snr_db / 20)
    x = x + rng.normal(0.0, 1.0, x.shape) * sigma
    assert x.shape == (n_pix, n_bands)
    return x, members, frac


# --------------------------------------------------------------------------------------------
# slow, obvious reference of the selection rule (per pixel, per model, in Python)


def candidate_models(counts, max_classes):
    """(class, member) tuples, smallest size first, in the documented enumeration order."""
    out = []
    for size in range(1, max_classes + 1):
        for cls in itertools.combinations(range(len(counts)), size):
            for mem in itertools.product(*(range(counts[k]) for k in cls)):
                out.append(tuple(zip(cls, mem)))
    return out


def kkt_sum_to_one(x, M, w=None):
    """Sum-to-one least squares by numpy's solve of the KKT system (Heinz & Chang 2001)."""
    w = np.ones(M.shape[1]) if w is None else np.asarray(w, float)
    G = (M * w) @ M.T
    q = M.shape[0]
    K = np.zeros((q + 1, q + 1))
    K[:q, :q] = G
    K[:q, q] = K[q, :q] = 1.0
    rhs = np.concatenate([(M * w) @ x, [1.0]])
    return np.linalg.solve(K, rhs)[:q]


@pytest.fixture(name="hand_bundles")
def hand_bundles_fixture():
    # Six-band spectra shaped like green vegetation, dry vegetation and soil (invented values).
    return {
        "green": np.array([[0.03, 0.06, 0.04, 0.45, 0.25, 0.12], [0.04, 0.08, 0.06, 0.35, 0.22, 0.11]]),
        "dry": np.array([[0.08, 0.11, 0.15, 0.24, 0.36, 0.30]]),
        "soil": np.array([[0.12, 0.18, 0.24, 0.30, 0.38, 0.34], [0.06, 0.10, 0.14, 0.20, 0.26, 0.30]]),
    }
