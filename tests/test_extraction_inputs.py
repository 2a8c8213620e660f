"""Tests of unmix.extraction input checking (bad input)."""

from __future__ import annotations

import numpy as np
import pytest

from unmix import extraction as ex
from unmix.errors import InputError, RankError, ShapeError, UnknownNameError

# ------------------------------------------------------------------------------------------------
# bad input
# ------------------------------------------------------------------------------------------------


def test_bad_input():
    x = np.random.default_rng(0).uniform(0, 1, (100, 5))
    with pytest.raises(RankError, match="at most 5"):
        ex.extract(x, 6)
    with pytest.raises(InputError, match="at least 2"):
        ex.extract(x, 1)
    with pytest.raises(UnknownNameError, match="vca"):
        ex.extract(x, 3, method="simplex")
    with pytest.raises(UnknownNameError, match="hysime"):
        ex.estimate_count(x, method="guess")
    with pytest.raises(ShapeError, match="2-D"):
        ex.extract(x[0], 2)
    with pytest.raises(InputError, match="no pixel without NaN"):
        ex.extract(np.full((10, 5), np.nan), 2)
    with pytest.raises(InputError, match="n_restarts|see help"):
        ex.extract(x, 3, method="vca", n_restarts=3)
    with pytest.raises(InputError, match="false_alarm"):
        ex.hfc(x, false_alarm=0.7)
