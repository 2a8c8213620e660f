"""Read a modification-rules file (our own plain-text format, see :func:`unmix.trajectory.parse_rules`).

Example file::

    # land-cover modification rules for the trends product
    desertification = green_vegetation:gradual_decrease & sand:gradual_increase
    canopy_thinning = green_vegetation:decrease & (shade:increase | dry_vegetation:increase)
    # cover classes per period (unmix.cover.parse_class_rules): first matching line wins
    class woodland = green_vegetation >= 0.5
    class bare = sand >= 0.6 & green_vegetation < 0.2
"""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path

from ..cover import ClassRule, check_class_names, parse_class_rules
from ..errors import InputError, LibraryFormatError
from ..trajectory import Rule, check_rule_names, parse_rules

__all__ = ["read_rules", "read_class_rules"]


def read_rules(path, endmembers: Sequence[str] | None = None) -> list[Rule]:
    """Read and parse a rules file; optionally check its endmember names against a product.

    Parameters
    ----------
    path : str or Path
        UTF-8 text file, one ``name = expression`` rule per line, ``#`` comments.
    endmembers : sequence of str, optional
        Endmember names of the fractions product; every name a rule uses must be among them.

    Returns
    -------
    list of Rule

    Raises
    ------
    InputError
        The file is missing, unreadable, not UTF-8 text, or holds no rule.
    LibraryFormatError
        A rule breaks the grammar (file, line and column named).
    UnknownNameError
        A rule names an endmember the product does not hold (the available ones are listed).

    Examples
    --------
    >>> import tempfile, os
    >>> p = os.path.join(tempfile.mkdtemp(), "rules.txt")
    >>> _ = open(p, "w").write("loss = gv:decrease\\n")
    >>> [r.name for r in read_rules(p, ["gv", "soil"])]
    ['loss']
    """
    path = Path(path)
    text = _read_text(path)
    rules = parse_rules(text, source=str(path))
    if not rules and not parse_class_rules(text, source=str(path)):
        raise InputError(
            f"rules file {path} holds no rule; write lines such as "
            "'loss = green_vegetation:decrease & soil:increase'"
        )
    if endmembers is not None:
        check_rule_names(rules, endmembers)
    return rules


def read_class_rules(path, endmembers: Sequence[str] | None = None) -> list[ClassRule]:
    """The cover-class lines (``class name = endmember >= 0.5 & ...``) of a rules file.

    Parameters
    ----------
    path : str or Path
        The rules file (:func:`read_rules`).
    endmembers : sequence of str, optional
        Endmember names of the fractions product; every name a class line uses must be among them.

    Returns
    -------
    list of ClassRule
        In file order; empty when the file holds no class line.

    Raises
    ------
    InputError, LibraryFormatError, UnknownNameError
        As :func:`read_rules`.
    """
    path = Path(path)
    rules = parse_class_rules(_read_text(path), source=str(path))
    if endmembers is not None:
        check_class_names(rules, endmembers)
    return rules


def _read_text(path: Path) -> str:
    path = Path(path)
    try:
        return path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise InputError(f"rules file {path} does not exist; check the path given to --rules") from None
    except IsADirectoryError:
        raise InputError(f"rules file {path} is a folder; give the path of a text file") from None
    except UnicodeDecodeError as exc:
        raise LibraryFormatError(
            f"rules file {path} is not UTF-8 text (byte {exc.start}); save it as plain UTF-8 text"
        ) from None
    except OSError as exc:
        raise InputError(f"rules file {path} cannot be read ({exc.strerror}); check its permissions") from None
