"""Tests of the unmix.mesma package layout (layers, public names)."""

from __future__ import annotations


def test_kernel_package_imports_no_upper_layer():
    # House rule (DEVELOPERS.md, layers): a kernel package imports no xarray/dask/rasterio/click/matplotlib.
    import subprocess
    import sys

    code = (
        "import sys, unmix.mesma.selection, unmix.mesma.models; "
        "bad = sorted(m for m in ('xarray', 'dask', 'rasterio', 'click', 'matplotlib') if m in sys.modules); "
        "print(','.join(bad))"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == ""


def test_public_names_stay_importable_from_the_package():
    # The package split (one topic module per method) keeps every public name at its old place.
    import importlib

    pkg = importlib.import_module("unmix.mesma")
    for name in pkg.__all__:
        obj = getattr(pkg, name)
        home = getattr(obj, "__module__", None)  # None for the float constants
        if home is not None:
            assert home.startswith(pkg.__name__ + ".")
            assert getattr(importlib.import_module(home), name) is obj
    import unmix

    assert unmix.mesma is pkg.mesma  # the top-level name is the function, the package stays importable
