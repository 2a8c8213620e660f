"""Endmembers from the image: how many, which pixels, and which library spectra they resemble.

Every function here is a kernel on plain arrays with the band axis last: ``pixels`` is
``(n_pixels, n_bands)`` reflectance [0..1]; rows holding any NaN are no data and are never chosen.
Extraction returns spectra copied from the data (rows of ``pixels``, same dtype) together with their
row indices into the array that was passed in, so a caller can always trace an endmember back to its
pixel.

Heavy products (band Gram matrix, projections) are computed in float64 over chunks of rows, so a
million-pixel, 200-band float32 array is never copied whole; the searches themselves (VCA, N-FINDR,
ATGP, PPI) are matrix-vector products with BLAS over all pixels, no Python loop over pixels.

One topic module per published method: :mod:`.count` (HySime, HFC, :func:`estimate_count`),
:mod:`.vca`, :mod:`.nfindr`, :mod:`.atgp`, :mod:`.ppi`, :mod:`.matching` (:func:`match_library`);
:func:`extract` here dispatches on :class:`ExtractionMethod`. Drawing pixel-dates from a lazy
(time, band, y, x) stack is cube-layer work: :mod:`unmix.cube.extraction`.
"""

from __future__ import annotations

import enum
from typing import Any

import numpy as np

from ..errors import InputError
from ._common import _as_method
from .atgp import atgp
from .count import CountMethod, estimate_count, hfc, hysime
from .matching import LibraryMatch, match_library
from .nfindr import nfindr
from .ppi import ppi, ppi_counts
from .vca import vca

__all__ = [
    "CountMethod",
    "ExtractionMethod",
    "estimate_count",
    "hysime",
    "hfc",
    "extract",
    "vca",
    "nfindr",
    "atgp",
    "ppi",
    "ppi_counts",
    "LibraryMatch",
    "match_library",
]


class ExtractionMethod(str, enum.Enum):
    """Which pixels are taken as endmembers."""

    VCA = "vca"
    NFINDR = "nfindr"
    ATGP = "atgp"
    PPI = "ppi"


_EXTRACTORS = {
    ExtractionMethod.VCA: vca,
    ExtractionMethod.NFINDR: nfindr,
    ExtractionMethod.ATGP: atgp,
    ExtractionMethod.PPI: ppi,
}


def extract(
    pixels: np.ndarray,
    count: int,
    *,
    method: ExtractionMethod | str = ExtractionMethod.VCA,
    seed: int = 0,
    sample: int | None = None,
    **options: Any,
) -> tuple[np.ndarray, np.ndarray]:
    """Take ``count`` endmember spectra from the data.

    Parameters
    ----------
    pixels : (n_pixels, n_bands) ndarray
        Reflectance [0..1]; rows with NaN are never chosen.
    count : int
        Number of endmembers, 2..n_bands (see :func:`estimate_count`).
    method : {"vca", "nfindr", "atgp", "ppi"}
        :func:`vca` (default), :func:`nfindr`, :func:`atgp` or :func:`ppi`.
    seed : int
        Seed of every random choice; the same seed gives the same endmembers.
    sample : int or None
        Work on this many valid rows drawn at random with ``seed`` (None: all rows).
    **options
        Passed on to the method (``snr_db``; ``n_restarts``, ``max_sweeps``; ``n_skewers``,
        ``merge_angle_deg``).

    Returns
    -------
    spectra : (count, n_bands) ndarray
        Rows of ``pixels`` (same dtype).
    indices : (count,) int64 ndarray
        Their row indices in ``pixels``: ``pixels[indices] == spectra``.

    References
    ----------
    See the method functions.

    Examples
    --------
    >>> rng = np.random.default_rng(0)
    >>> em = rng.uniform(0.05, 0.6, (3, 10)).astype(np.float32)
    >>> x = np.vstack([em, rng.dirichlet(np.ones(3), 500).astype(np.float32) @ em])
    >>> spectra, idx = extract(x, 3, method="nfindr")
    >>> spectra.dtype, bool((x[idx] == spectra).all())
    (dtype('float32'), True)
    """
    method = _as_method(method, ExtractionMethod, "extraction method")
    func = _EXTRACTORS[method]
    try:
        return func(pixels, count, seed=seed, sample=sample, **options)
    except TypeError as exc:
        if "unexpected keyword" in str(exc):
            raise InputError(f"{exc}; see help(unmix.extraction.{func.__name__})") from None
        raise
