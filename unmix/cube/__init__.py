"""xarray/dask layer: maps the kernels over lazy labelled cubes. No paths, no printing.

The mapping functions are imported on first use, so a command that needs one of them does not
pay for importing the others (the trend machinery, MESMA).
"""

from __future__ import annotations

import importlib
from typing import Any

__all__ = ["mesma_cube", "trend_cube", "unmix_cube"]

_HOMES = {"unmix_cube": ".fractions", "mesma_cube": ".mesma", "trend_cube": ".trends"}


def __getattr__(name: str) -> Any:
    if name in _HOMES:
        return getattr(importlib.import_module(_HOMES[name], __name__), name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")


def __dir__() -> list[str]:
    return sorted(list(globals()) + __all__)
