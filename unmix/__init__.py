"""unmix: sub-pixel land-cover fractions from image time series, and their trends.

The most used functions are available at the top level:

- :func:`unmix.estimate_fractions` (none / sum-to-one / non-negative / fcls least squares),
  :func:`unmix.kkt_residual`, :func:`unmix.shade_normalize`;
- :func:`unmix.mesma`, multiple endmember spectral mixture analysis.

Topic modules hold the rest: :mod:`unmix.solvers`, :mod:`unmix.spectra`, :mod:`unmix.sensors`,
:mod:`unmix.extraction`, :mod:`unmix.pruning`, :mod:`unmix.trend`, :mod:`unmix.trajectory`,
:mod:`unmix.cube` (xarray/dask), :mod:`unmix.io` (files).
"""

from __future__ import annotations

from importlib.metadata import PackageNotFoundError, version

try:
    __version__ = version("unmix")
except PackageNotFoundError:  # running from a source tree that was not installed
    __version__ = "0+unknown"

# ``unmix.mesma`` is the function; its package stays importable as ``from unmix.mesma import
# MesmaResult`` (the import system finds it in sys.modules).
from .mesma import mesma  # noqa: E402
from .solvers import estimate_fractions, kkt_residual, shade_normalize  # noqa: E402

__all__ = ["__version__", "estimate_fractions", "kkt_residual", "mesma", "shade_normalize"]
