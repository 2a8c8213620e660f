"""The constraint family of the fractions: none, sum-to-one, non-negative, fully constrained (FCLS)."""

from __future__ import annotations

import enum

from ..errors import UnknownNameError

__all__ = ["Constraint"]


class Constraint(str, enum.Enum):
    """Constraint set of the fractions in :func:`estimate_fractions`."""

    NONE = "none"
    SUM_TO_ONE = "sum-to-one"
    NON_NEGATIVE = "non-negative"
    FCLS = "fcls"

    def __str__(self) -> str:
        return self.value



def _as_constraint(constraint) -> Constraint:
    if isinstance(constraint, Constraint):
        return constraint
    if isinstance(constraint, str):
        key = constraint.strip().lower().replace("_", "-")
        for c in Constraint:
            if c.value == key:
                return c
    valid = ", ".join(repr(c.value) for c in Constraint)
    raise UnknownNameError(f"unknown constraint {constraint!r}; use one of {valid}")


def _has_sum_to_one(con: Constraint) -> bool:
    return con in (Constraint.SUM_TO_ONE, Constraint.FCLS)

