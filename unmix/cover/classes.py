"""Cover classes from fractions: the dominant endmember, or threshold rules the analyst writes.

Class rules sit in the same rules file as the modification rules (:mod:`unmix.trajectory.rules`),
on lines that start with the word ``class``::

    class woodland = green_vegetation >= 0.5
    class bare     = sand >= 0.6 & green_vegetation < 0.2
    class bare     = rock >= 0.6            # a second line for a class: either line may match

A condition is ``endmember OP number`` with OP one of ``>=``, ``>``, ``<=``, ``<`` and the number a
fraction; conditions are joined by ``&``. Lines are tried in file order and the first one whose
conditions all hold gives the pixel its class; a pixel no line matches is ``unclassified``.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

import numpy as np

from ..errors import LibraryFormatError, ShapeError, UnknownNameError

__all__ = ["NODATA_CLASS", "ClassRule", "parse_class_rules", "is_class_line", "dominant_class",
           "rule_classes", "class_names_of"]

#: Class code of a pixel without fractions (any endmember NaN).
NODATA_CLASS = -1

_CLASS_LINE = re.compile(r"\s*class\s+(?=[A-Za-z_])")
_NAME = re.compile(r"[A-Za-z_][A-Za-z0-9_]*\Z")
_COND = re.compile(r"\s*(?P<em>[A-Za-z_][A-Za-z0-9_.\-]*)\s*(?P<op>>=|<=|>|<)\s*"
                   r"(?P<num>[-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)\s*\Z")
_OPS = {">=": np.greater_equal, ">": np.greater, "<=": np.less_equal, "<": np.less}


@dataclass(frozen=True)
class ClassRule:
    """One line of class conditions: ``name`` where every ``(endmember, op, value)`` holds."""

    name: str
    conditions: tuple[tuple[str, str, float], ...]
    text: str
    source: str = "<string>"
    line: int = 0


def is_class_line(line: str) -> bool:
    """True for a rules-file line that defines a cover class (starts with the word ``class``)."""
    return bool(_CLASS_LINE.match(line))


def parse_class_rules(text: str, *, source: str = "<string>") -> list[ClassRule]:
    """The cover-class lines of a rules file, in file order (other lines are skipped).

    Parameters
    ----------
    text : str
        Rules-file text (see the module docstring for the format).
    source : str
        Name used in error messages (the file name).

    Returns
    -------
    list of ClassRule

    Raises
    ------
    LibraryFormatError
        A class line breaks the format (source, line and column named).

    Examples
    --------
    >>> [r.conditions for r in parse_class_rules("class wood = gv >= 0.5 & soil < 0.3")]
    [(('gv', '>=', 0.5), ('soil', '<', 0.3))]
    """
    rules: list[ClassRule] = []
    for lineno, raw in enumerate(text.splitlines(), start=1):
        line = raw.split("#", 1)[0]
        m = _CLASS_LINE.match(line)
        if not m:
            continue

        def fail(col: int, what: str):
            raise LibraryFormatError(
                f"{source}, line {lineno}, column {col + 1}: {what}. Class lines read "
                "'class name = endmember >= 0.5 & endmember < 0.2'")

        body = line[m.end():]
        if "=" not in body.replace(">=", "").replace("<=", ""):
            fail(m.end(), "expected 'class name = conditions' (no '=' found)")
        eq = re.search(r"(?<![<>])=", body).start()
        name = body[:eq].strip()
        if not _NAME.match(name):
            fail(m.end(), f"class name {name!r} must start with a letter or underscore and hold only letters, "
                          "digits and underscores")
        if name == "unclassified":
            fail(m.end(), "'unclassified' is the class of pixels no line matches; choose another name")
        expr = body[eq + 1:]
        conditions = []
        col = m.end() + eq + 1
        for part in expr.split("&"):
            c = _COND.match(part)
            if not c:
                fail(col + len(part) - len(part.lstrip()), f"expected 'endmember OP number', found {part.strip()!r}")
            conditions.append((c.group("em"), c.group("op"), float(c.group("num"))))
            col += len(part) + 1
        rules.append(ClassRule(name, tuple(conditions), expr.strip(), source, lineno))
    return rules


def class_names_of(rules: list[ClassRule]) -> list[str]:
    """Class names in order of first appearance, then ``unclassified``: code i is ``names[i]``."""
    names: list[str] = []
    for r in rules:
        if r.name not in names:
            names.append(r.name)
    return names + ["unclassified"]


def _check(fractions, endmembers) -> np.ndarray:
    fractions = np.asarray(fractions)
    if fractions.ndim < 1 or fractions.shape[-1] != len(endmembers):
        raise ShapeError(f"fractions must have the endmember axis last with {len(endmembers)} entries "
                         f"({', '.join(endmembers)}); got shape {fractions.shape}")
    return fractions


def dominant_class(fractions) -> np.ndarray:
    """Code of the endmember with the largest fraction; :data:`NODATA_CLASS` where any fraction is NaN.

    Parameters
    ----------
    fractions : (..., endmember) float ndarray

    Returns
    -------
    (...) int16 ndarray
        Index of the dominant endmember (ties: the first one), or -1.

    Examples
    --------
    >>> dominant_class(np.array([[0.2, 0.8], [np.nan, 0.1]])).tolist()
    [1, -1]
    """
    fractions = np.asarray(fractions)
    missing = np.isnan(fractions).any(axis=-1)
    codes = np.argmax(np.where(np.isnan(fractions), -np.inf, fractions), axis=-1).astype(np.int16)
    codes[missing] = NODATA_CLASS
    return codes


def rule_classes(fractions, rules: list[ClassRule], endmembers) -> np.ndarray:
    """Class of each pixel by the first rule whose conditions all hold.

    Parameters
    ----------
    fractions : (..., endmember) float ndarray
    rules : list of ClassRule
    endmembers : sequence of str
        Names along the last axis.

    Returns
    -------
    (...) int16 ndarray
        Index into :func:`class_names_of` ``(rules)``; the last index (``unclassified``) where no
        rule holds; :data:`NODATA_CLASS` where any fraction is NaN.

    Raises
    ------
    UnknownNameError
        A rule names an endmember not in ``endmembers`` (they are listed).

    Examples
    --------
    >>> rules = parse_class_rules("class wood = gv >= 0.5")
    >>> rule_classes(np.array([[0.6, 0.4], [0.3, 0.7]]), rules, ["gv", "soil"]).tolist()
    [0, 1]
    """
    endmembers = [str(e) for e in endmembers]
    fractions = _check(fractions, endmembers)
    check_class_names(rules, endmembers)
    names = class_names_of(rules)
    index = {e: i for i, e in enumerate(endmembers)}
    codes = np.full(fractions.shape[:-1], len(names) - 1, dtype=np.int16)
    open_ = np.ones(fractions.shape[:-1], dtype=bool)
    for rule in rules:
        hit = open_.copy()
        for em, op, value in rule.conditions:
            hit &= _OPS[op](fractions[..., index[em]], value)
        codes[hit] = names.index(rule.name)
        open_ &= ~hit
    codes[np.isnan(fractions).any(axis=-1)] = NODATA_CLASS
    return codes


def check_class_names(rules: list[ClassRule], endmembers) -> None:
    """Raise :class:`UnknownNameError` if a class line names an endmember not in ``endmembers``."""
    available = [str(e) for e in endmembers]
    for rule in rules:
        for em, _, _ in rule.conditions:
            if em not in available:
                raise UnknownNameError(
                    f"{rule.source}, line {rule.line}: class {rule.name!r} names endmember {em!r}, which the "
                    f"product does not hold; available: {', '.join(available)}")
