"""unmix: sub-pixel land-cover fractions from image time series, and their trends."""

from __future__ import annotations

from importlib.metadata import PackageNotFoundError, version

try:
    __version__ = version("unmix")
except PackageNotFoundError:  # running from a source tree that was not installed
    __version__ = "0+unknown"

__all__ = ["__version__"]
