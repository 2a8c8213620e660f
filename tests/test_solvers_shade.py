"""Tests of unmix.solvers.shade_normalize (shade normalisation).

References used: the CHECKS.md values for shade normalisation.
"""

from __future__ import annotations

import numpy as np
import pytest

from unmix.errors import InputError
from unmix.solvers import shade_normalize

# ------------------------------------------------------------------------------------------------
# shade normalisation
# ------------------------------------------------------------------------------------------------


def test_shade_normalize_checks_value():
    # CHECKS.md "Linear unmixing": GV 0.45, soil 0.25, shade 0.30 -> 0.642857, 0.357143
    out = shade_normalize(np.array([0.45, 0.25, 0.30]), shade=2)
    np.testing.assert_allclose(out, [0.642857, 0.357143], atol=5e-7)
    out = shade_normalize(np.array([0.30, 0.45, 0.25], np.float32), shade=0)
    assert out.dtype == np.float32
    np.testing.assert_allclose(out, [0.642857, 0.357143], atol=5e-7)
    np.testing.assert_allclose(shade_normalize([0.45, 0.25, 0.30], shade=-1), [0.642857, 0.357143], atol=5e-7)


def test_shade_normalize_shapes_and_full_shade():
    f = np.array([[[0.2, 0.3, 0.5], [0.0, 0.0, 1.0]], [[0.1, 0.1, 0.8], [np.nan, 0.5, 0.5]]])
    out = shade_normalize(f, shade=2)
    assert out.shape == (2, 2, 2)
    np.testing.assert_allclose(out[0, 0], [0.4, 0.6])  # 0.2/0.5, 0.3/0.5 (arithmetic)
    assert np.all(np.isnan(out[0, 1]))  # only shade: undefined
    assert np.isnan(out[1, 1, 0]) and out[1, 1, 1] == 1.0
    with pytest.raises(InputError, match="shade index 3"):
        shade_normalize(f, shade=3)
    with pytest.raises(InputError):
        shade_normalize(f, shade="shade")
