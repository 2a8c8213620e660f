"""Tests of the unmix.trend package namespace."""

from __future__ import annotations

from unmix.trend import fdr, mann_kendall


def test_package_exports_functions_not_their_modules():
    # unmix.trend is a package whose method modules share their function's name: the package
    # namespace must hold the functions (re-exported in __init__), as the flat module did
    import types

    import unmix.trend as trend

    for name in trend.__all__:
        assert not isinstance(getattr(trend, name), types.ModuleType), name
    assert trend.mann_kendall is mann_kendall and trend.fdr is fdr
