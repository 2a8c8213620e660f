"""Tests of the unmix.extraction package layout (layers, public names)."""

from __future__ import annotations


def test_kernel_package_imports_no_upper_layer():
    # House rule (DEVELOPERS.md, layers): a kernel package imports no xarray/dask/rasterio/click/matplotlib.
    import subprocess
    import sys

    code = (
        "import sys, unmix.extraction, unmix.extraction.count, unmix.extraction.matching; "
        "bad = sorted(m for m in ('xarray', 'dask', 'rasterio', 'click', 'matplotlib') if m in sys.modules); "
        "print(','.join(bad))"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == ""


def test_public_names_stay_importable_from_the_package():
    # The package split (one topic module per method) keeps every public name at its old place.
    import importlib

    pkg = importlib.import_module("unmix.extraction")
    for name in pkg.__all__:
        obj = getattr(pkg, name)
        home = obj.__module__
        assert home == pkg.__name__ or home.startswith(pkg.__name__ + ".")
        assert getattr(importlib.import_module(home), name) is obj
    assert not hasattr(pkg, "sample_stack")  # cube-layer work: unmix.cube.extraction
