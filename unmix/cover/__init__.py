"""Cover classes from fractions (kernels on numpy arrays).

A class per pixel and period, either the dominant endmember or the first threshold rule that holds
(``class`` lines of the rules file): :func:`dominant_class`, :func:`rule_classes`,
:func:`parse_class_rules`. The per-period medians, the class maps and the from-to tables over a
product live in :mod:`unmix.cube.cover`.
"""

from __future__ import annotations

from .classes import (
    NODATA_CLASS,
    ClassRule,
    check_class_names,
    class_names_of,
    dominant_class,
    is_class_line,
    parse_class_rules,
    rule_classes,
)

__all__ = ["NODATA_CLASS", "ClassRule", "check_class_names", "class_names_of", "dominant_class",
           "is_class_line", "parse_class_rules", "rule_classes"]
