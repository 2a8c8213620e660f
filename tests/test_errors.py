"""The error hierarchy and the top-level API."""

from __future__ import annotations

import inspect

import numpy as np
import pytest

import unmix
from unmix import errors


def test_every_error_has_the_root_and_a_builtin():
    for name in errors.__all__:
        cls = getattr(errors, name)
        if issubclass(cls, Warning):
            assert issubclass(cls, errors.UnmixWarning)
            continue
        assert issubclass(cls, errors.UnmixError), name
        if cls is not errors.UnmixError:
            builtins = [b for b in inspect.getmro(cls) if b.__module__ == "builtins" and b not in (object, BaseException, Exception)]
            assert builtins, f"{name} should also inherit the builtin it resembles"


def test_unknown_name_error_message_is_not_quoted():
    # KeyError would show repr(message); ours shows the text as written.
    assert str(errors.UnknownNameError("unknown sensor 'x'; known: a, b")) == "unknown sensor 'x'; known: a, b"


def test_top_level_functions():
    from unmix.mesma import MesmaResult  # the module stays importable beside the function
    from unmix.solvers import estimate_fractions

    assert unmix.estimate_fractions is estimate_fractions
    assert callable(unmix.mesma)
    # An exact two-endmember mixture is recovered (Keshava & Mustard 2002: linear mixing model).
    M = np.array([[0.05, 0.08, 0.04, 0.45, 0.25, 0.12], [0.25, 0.30, 0.35, 0.40, 0.45, 0.40]])
    x = 0.3 * M[0] + 0.7 * M[1]
    f, rmse = unmix.estimate_fractions(x, M)
    np.testing.assert_allclose(f, [0.3, 0.7], atol=1e-10)
    res = unmix.mesma(x, {"gv": M[:1], "soil": M[1:]})
    assert isinstance(res, MesmaResult)
    np.testing.assert_allclose(res.fractions[:2], [0.3, 0.7], atol=1e-8)


@pytest.mark.parametrize("exc", [errors.RankError, errors.BandMismatchError, errors.LibraryFormatError])
def test_value_errors_are_catchable_as_value_error(exc):
    with pytest.raises(ValueError):
        raise exc("message")
