"""Shared synthetic scenes and angle measures for the tests of unmix.extraction (tests/test_extraction_*.py)."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import optimize

from unmix.io.library import read_shipped_library

# ------------------------------------------------------------------------------------------------
# data made in the tests
# ------------------------------------------------------------------------------------------------


def smooth_spectra(n: int, n_bands: int, rng: np.random.Generator) -> np.ndarray:
    """Random smooth reflectance spectra: an offset plus four Gaussian bumps, clipped to 0.01..0.95."""
    wl = np.linspace(0.0, 1.0, n_bands)
    out = np.empty((n, n_bands))
    for i in range(n):
        s = np.full(n_bands, rng.uniform(0.05, 0.3))
        for _ in range(4):
            s += rng.uniform(0, 0.3) * np.exp(-((wl - rng.uniform(0, 1)) ** 2) / (2 * rng.uniform(0.05, 0.3) ** 2))
        out[i] = s
    return np.clip(out, 0.01, 0.95)


def mixed_scene(em: np.ndarray, n: int, snr_db: float, rng: np.random.Generator):
    """(pixels float32, abundances, rows of the pure pixels)."""
    p = em.shape[0]
    a = rng.dirichlet(np.ones(p), n)
    pure_rows = rng.choice(n, size=p, replace=False)
    a[pure_rows] = np.eye(p)
    x = a @ em
    sigma = np.sqrt(np.mean(x**2) / 10 ** (snr_db / 10))
    return (x + rng.normal(0.0, sigma, x.shape)).astype(np.float32), a, pure_rows


def angles_deg(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    a = np.asarray(a, dtype=np.float64)
    b = np.asarray(b, dtype=np.float64)
    cos = a @ b.T / np.outer(np.linalg.norm(a, axis=1), np.linalg.norm(b, axis=1))
    return np.degrees(np.arccos(np.clip(cos, -1, 1)))


def mean_matched_angle(est: np.ndarray, truth: np.ndarray) -> float:
    """Mean spectral angle after optimal one-to-one matching (scipy's Hungarian solver)."""
    ang = angles_deg(est, truth)
    r, c = optimize.linear_sum_assignment(ang)
    return float(ang[r, c].mean())


@pytest.fixture(scope="module", name="demo")
def demo_fixture():
    return read_shipped_library("demo_library")


@pytest.fixture(scope="module", name="demo_s2")
def demo_s2_fixture():
    return read_shipped_library("demo_library_sentinel-2a-msi")


BRIGHT4 = ["green_vegetation", "dry_vegetation", "bright_soil", "sand"]
FIVE = ["green_vegetation", "dry_vegetation", "dark_soil", "sand", "water"]
