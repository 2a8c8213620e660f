"""Tests of the layout of the kernel packages split by method (layers, public names).

House rules (DEVELOPERS.md): a kernel package imports no xarray/dask/rasterio/click/matplotlib, and
the split into one topic module per method keeps every public name at its old import path.
"""

from __future__ import annotations

import importlib
import subprocess
import sys

import pytest

#: kernel package -> the modules whose import must not pull in an upper layer
KERNEL_MODULES = {
    "unmix.accuracy": ("unmix.accuracy",),
    "unmix.extraction": ("unmix.extraction", "unmix.extraction.count", "unmix.extraction.matching"),
    "unmix.mesma": ("unmix.mesma.selection", "unmix.mesma.models"),
    "unmix.pruning": ("unmix.pruning.selection",),
    "unmix.solvers": ("unmix.solvers.fcls", "unmix.solvers.diagnostics", "unmix.solvers.shade"),
}

#: package -> (public names may be defined in the package's __init__, float constants may be exported)
EXPORT_RULES = {
    "unmix.accuracy": (False, True),  # DEFAULT_MIN_PER_CLASS is a constant
    "unmix.extraction": (True, False),  # extract lives in __init__
    "unmix.mesma": (False, True),
    "unmix.pruning": (False, True),
    "unmix.solvers": (False, True),
}


@pytest.mark.parametrize("package", sorted(KERNEL_MODULES))
def test_kernel_package_imports_no_upper_layer(package):
    code = (
        f"import sys, {', '.join(KERNEL_MODULES[package])}; "
        "bad = sorted(m for m in ('xarray', 'dask', 'rasterio', 'click', 'matplotlib') if m in sys.modules); "
        "print(','.join(bad))"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == ""


@pytest.mark.parametrize("package", sorted(EXPORT_RULES))
def test_public_names_stay_importable_from_the_package(package):
    in_init, constants = EXPORT_RULES[package]
    pkg = importlib.import_module(package)
    for name in pkg.__all__:
        obj = getattr(pkg, name)
        home = getattr(obj, "__module__", None)
        if home is None:  # a float constant has no home module
            assert constants, name
            continue
        assert (in_init and home == package) or home.startswith(package + ".")
        assert getattr(importlib.import_module(home), name) is obj


def test_top_level_names_are_the_package_functions():
    import unmix

    mesma = importlib.import_module("unmix.mesma")
    assert unmix.mesma is mesma.mesma  # the top-level name is the function, the package stays importable
    solvers = importlib.import_module("unmix.solvers")
    assert unmix.estimate_fractions is solvers.estimate_fractions is importlib.import_module(
        "unmix.solvers.fcls").estimate_fractions


def test_stack_sampling_is_not_in_the_kernel_package():
    assert not hasattr(importlib.import_module("unmix.extraction"), "sample_stack")  # unmix.cube.extraction
