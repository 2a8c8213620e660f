"""Modification rules across endmembers: the rules grammar, its parser and evaluation.

Rules written by the analyst (see :func:`parse_rules`) combine the trajectory labels of several
endmembers of the same pixel into named modification maps ("green vegetation decreasing while sand
increases"). The format is our own plain text; :func:`unmix.io.rules.read_rules` reads a file.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

import numpy as np

from ..errors import LibraryFormatError, ShapeError, UnknownNameError
from .labels import Trajectory

__all__ = ["STATE_WORDS", "Rule", "parse_rules", "check_rule_names", "evaluate_rules"]

#: Words a rule may use after ``endmember:`` and the trajectory codes each one matches.
STATE_WORDS: dict[str, tuple[Trajectory, ...]] = {
    **{m.label: (m,) for m in Trajectory if m is not Trajectory.INSUFFICIENT_DATA},
    "increase": (Trajectory.GRADUAL_INCREASE, Trajectory.ABRUPT_INCREASE),
    "decrease": (Trajectory.GRADUAL_DECREASE, Trajectory.ABRUPT_DECREASE),
    "gradual": (Trajectory.GRADUAL_INCREASE, Trajectory.GRADUAL_DECREASE),
    "abrupt": (Trajectory.ABRUPT_INCREASE, Trajectory.ABRUPT_DECREASE),
    "change": (
        Trajectory.GRADUAL_INCREASE,
        Trajectory.GRADUAL_DECREASE,
        Trajectory.ABRUPT_INCREASE,
        Trajectory.ABRUPT_DECREASE,
    ),
}


@dataclass(frozen=True)
class _Term:
    endmember: str
    state: str
    column: int


@dataclass(frozen=True)
class _Not:
    operand: object


@dataclass(frozen=True)
class _And:
    left: object
    right: object


@dataclass(frozen=True)
class _Or:
    left: object
    right: object


@dataclass(frozen=True)
class Rule:
    """One parsed modification rule.

    Attributes
    ----------
    name : str
        Rule name (becomes a product variable name).
    text : str
        The expression as written.
    tree : object
        Abstract syntax tree of ``_Term``, ``_Not``, ``_And``, ``_Or`` nodes.
    source : str
        Where the rule came from (file name, or ``<string>``).
    line : int
        1-based line number in the source.
    """

    name: str
    text: str
    tree: object
    source: str = "<string>"
    line: int = 0

    @property
    def endmembers(self) -> tuple[str, ...]:
        """Endmember names the rule refers to, in order of first appearance."""
        seen: list[str] = []

        def walk(node):
            if isinstance(node, _Term):
                if node.endmember not in seen:
                    seen.append(node.endmember)
            elif isinstance(node, _Not):
                walk(node.operand)
            else:
                walk(node.left)
                walk(node.right)

        walk(self.tree)
        return tuple(seen)


_TOKEN = re.compile(r"\s*(?:(?P<name>[A-Za-z_][A-Za-z0-9_.\-]*)|(?P<op>[&|!():]))")
_RULE_NAME = re.compile(r"[A-Za-z_][A-Za-z0-9_]*\Z")
_CLASS_LINE = re.compile(r"\s*class\s+(?=[A-Za-z_])")


class _Parser:
    """Recursive-descent parser: ``or := and ('|' and)*``, ``and := not ('&' not)*``,
    ``not := '!' not | atom``, ``atom := '(' or ')' | NAME ':' NAME``."""

    def __init__(self, text: str, offset: int, source: str, line: int):
        self.text, self.offset, self.source, self.line = text, offset, source, line
        self.tokens: list[tuple[str, str, int]] = []
        pos = 0
        while pos < len(text):
            if text[pos:].strip() == "":
                break
            m = _TOKEN.match(text, pos)
            if not m:
                col = pos + len(text[pos:]) - len(text[pos:].lstrip())
                self.fail(col, f"unexpected character {text[col]!r}")
            kind = "name" if m.group("name") else "op"
            self.tokens.append((kind, m.group(kind), m.start(kind)))
            pos = m.end()
        self.i = 0

    def fail(self, col: int, what: str):
        raise LibraryFormatError(
            f"{self.source}, line {self.line}, column {self.offset + col + 1}: {what}. Rules read "
            "'name = endmember:state & (endmember:state | !endmember:state)'; states are "
            + ", ".join(STATE_WORDS)
        )

    def peek(self):
        return self.tokens[self.i] if self.i < len(self.tokens) else ("end", "", len(self.text))

    def take(self, value: str | None = None, kind: str | None = None):
        tok = self.peek()
        if (value is not None and tok[1] != value) or (kind is not None and tok[0] != kind) or tok[0] == "end":
            want = repr(value) if value else ("a name" if kind == "name" else "more")
            found = "end of line" if tok[0] == "end" else repr(tok[1])
            self.fail(tok[2], f"expected {want}, found {found}")
        self.i += 1
        return tok

    def parse(self):
        if not self.tokens:
            self.fail(0, "empty rule expression")
        node = self.parse_or()
        if self.i < len(self.tokens):
            tok = self.peek()
            self.fail(tok[2], f"unexpected {tok[1]!r} (missing '&' or '|'?)")
        return node

    def parse_or(self):
        node = self.parse_and()
        while self.peek()[1] == "|":
            self.i += 1
            node = _Or(node, self.parse_and())
        return node

    def parse_and(self):
        node = self.parse_not()
        while self.peek()[1] == "&":
            self.i += 1
            node = _And(node, self.parse_not())
        return node

    def parse_not(self):
        if self.peek()[1] == "!":
            self.i += 1
            return _Not(self.parse_not())
        return self.parse_atom()

    def parse_atom(self):
        tok = self.peek()
        if tok[1] == "(":
            self.i += 1
            node = self.parse_or()
            self.take(")")
            return node
        if tok[0] != "name":
            self.fail(tok[2], f"expected an endmember name or '(', found {'end of line' if tok[0] == 'end' else repr(tok[1])}")
        self.i += 1
        self.take(":")
        state_tok = self.take(kind="name")
        if state_tok[1] not in STATE_WORDS:
            self.fail(state_tok[2], f"unknown state {state_tok[1]!r}")
        return _Term(tok[1], state_tok[1], self.offset + tok[2] + 1)


def parse_rules(text: str, *, source: str = "<string>") -> list[Rule]:
    """Parse modification rules, one per line.

    Format (our own, plain text, UTF-8)::

        # comments start with '#'; blank lines are ignored
        desertification = green_vegetation:gradual_decrease & sand:gradual_increase
        canopy_thinning = green_vegetation:decrease & (shade:increase | dry_vegetation:increase)

    Lines that start with the word ``class`` define cover classes and are skipped here
    (:func:`unmix.cover.parse_class_rules`). A rule is ``NAME = EXPRESSION``. ``NAME`` is a letter or underscore then letters, digits,
    underscores. The expression combines terms ``endmember:state`` with ``!`` (not, binds tightest),
    ``&`` (and) and ``|`` (or, loosest) and parentheses. A state is one of the trajectory labels
    (``stable``, ``gradual_increase``, ``gradual_decrease``, ``abrupt_increase``,
    ``abrupt_decrease``) or a group: ``increase`` (gradual or abrupt), ``decrease``, ``gradual``
    (either direction), ``abrupt``, ``change`` (any of the four changes).

    Parameters
    ----------
    text : str
        The rules.
    source : str
        Name used in error messages (the file name).

    Returns
    -------
    list of Rule

    Raises
    ------
    LibraryFormatError
        Naming the source, line and column.

    Examples
    --------
    >>> rules = parse_rules("thinning = gv:decrease & !soil:stable")
    >>> rules[0].name, rules[0].endmembers
    ('thinning', ('gv', 'soil'))
    """
    rules: list[Rule] = []
    names: set[str] = set()
    for lineno, raw in enumerate(text.splitlines(), start=1):
        line = raw.split("#", 1)[0]
        if not line.strip() or _CLASS_LINE.match(line):  # cover-class lines: unmix.cover.parse_class_rules
            continue
        if "=" not in line:
            col = len(line) - len(line.lstrip())
            raise LibraryFormatError(
                f"{source}, line {lineno}, column {col + 1}: expected 'name = expression' (no '=' found)"
            )
        head, expr = line.split("=", 1)
        name = head.strip()
        if not _RULE_NAME.match(name):
            col = len(head) - len(head.lstrip())
            raise LibraryFormatError(
                f"{source}, line {lineno}, column {col + 1}: rule name {name!r} must start with a letter or "
                "underscore and hold only letters, digits and underscores"
            )
        if name in names:
            raise LibraryFormatError(f"{source}, line {lineno}, column 1: rule {name!r} is defined twice; rename one")
        offset = len(head) + 1
        tree = _Parser(expr, offset, source, lineno).parse()
        rules.append(Rule(name=name, text=expr.strip(), tree=tree, source=source, line=lineno))
        names.add(name)
    return rules


def check_rule_names(rules: list[Rule], endmembers) -> None:
    """Raise :class:`UnknownNameError` if a rule names an endmember not in ``endmembers`` (listed)."""
    available = list(endmembers)
    for rule in rules:
        for em in rule.endmembers:
            if em not in available:
                raise UnknownNameError(
                    f"{rule.source}, line {rule.line}: rule {rule.name!r} names endmember {em!r}, which the "
                    f"product does not hold; available: {', '.join(available)}"
                )


def evaluate_rules(rules: list[Rule], trajectory, endmembers) -> dict[str, np.ndarray]:
    """Evaluate rules on trajectory codes; one uint8 map per rule (1 true, 0 false, 255 no data).

    A pixel is no data for a rule where any endmember the rule names has ``insufficient_data``.

    Parameters
    ----------
    rules : list of Rule
    trajectory : (..., endmember) int ndarray
        :class:`Trajectory` codes, endmember axis last.
    endmembers : sequence of str
        Names along the last axis.

    Returns
    -------
    dict of str to (...) uint8 ndarray

    Raises
    ------
    UnknownNameError
        A rule names an endmember that is not in ``endmembers`` (the message lists them).

    Examples
    --------
    >>> import numpy as np
    >>> codes = np.array([[2, 1], [0, 1]], dtype=np.int8)  # (pixel, endmember)
    >>> rules = parse_rules("d = gv:gradual_decrease & sand:increase")
    >>> evaluate_rules(rules, codes, ["gv", "sand"])["d"]
    array([1, 0], dtype=uint8)
    """
    trajectory = np.asarray(trajectory)
    endmembers = list(endmembers)
    if trajectory.ndim < 1 or trajectory.shape[-1] != len(endmembers):
        raise ShapeError(
            f"trajectory must have the endmember axis last with {len(endmembers)} entries "
            f"({', '.join(endmembers)}); got shape {trajectory.shape}"
        )
    check_rule_names(rules, endmembers)
    index = {name: i for i, name in enumerate(endmembers)}

    def ev(node):
        if isinstance(node, _Term):
            codes = np.array([int(c) for c in STATE_WORDS[node.state]], dtype=trajectory.dtype)
            return np.isin(trajectory[..., index[node.endmember]], codes)
        if isinstance(node, _Not):
            return ~ev(node.operand)
        if isinstance(node, _And):
            return ev(node.left) & ev(node.right)
        return ev(node.left) | ev(node.right)

    out: dict[str, np.ndarray] = {}
    for rule in rules:
        result = ev(rule.tree).astype(np.uint8)
        missing = np.zeros(trajectory.shape[:-1], dtype=bool)
        for em in rule.endmembers:
            missing |= trajectory[..., index[em]] == Trajectory.INSUFFICIENT_DATA
        result[missing] = 255
        out[rule.name] = result
    return out
