"""Plan text: the normalised plan as TOML (:func:`dumps`), and the commented template (:func:`template_text`).

Python reads TOML (:mod:`tomllib`) but does not write it; a plan holds only strings, numbers, booleans,
dates and flat lists of them, which :func:`format_value` writes in TOML's basic forms.
"""

from __future__ import annotations

import datetime as _dt
import json
from typing import Any

from .schema import ENDMEMBER_SOURCES, Key, schema

__all__ = ["dumps", "format_value", "template_text"]


def format_value(value: Any) -> str:
    """One value in TOML syntax (strings as basic strings, floats with a decimal point, dates bare).

    Examples
    --------
    >>> format_value([1.0, "a\\"b", True])
    '[1.0, "a\\\\"b", true]'
    """
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        return repr(value)  # '0.5', '1e-05', '2.0': all TOML floats (finite values only reach here)
    if isinstance(value, _dt.date):
        return value.isoformat()
    if isinstance(value, str):
        # JSON's escapes are TOML's basic-string escapes; DEL must be escaped in TOML, not in JSON
        return json.dumps(value, ensure_ascii=False).replace("\x7f", "\\u007f")
    if isinstance(value, list | tuple):
        return "[" + ", ".join(format_value(v) for v in value) + "]"
    raise TypeError(f"a plan value cannot be {type(value).__name__}: {value!r}")


def dumps(data: dict) -> str:
    """The normalised plan as TOML text: top-level keys, then each section in the template's order."""
    lines = [f"{k} = {format_value(v)}" for k, v in data.items() if not isinstance(v, dict)]
    for section in schema():
        if "." in section.name or section.name not in data:
            continue
        tables = (data["endmembers"].items() if section.name == "endmembers"
                  else [(None, data[section.name])])
        for sub, table in tables:
            if not table:
                continue
            name = section.name if sub is None else f"{section.name}.{sub}"
            lines += ["", f"[{name}]"] + [f"{k} = {format_value(v)}" for k, v in table.items()]
    return "\n".join(lines) + "\n"


def _comment(key: Key) -> str:
    text = f"# {key.help} Takes {key.expected()}."
    if key.required:
        text += " Required."
    elif key.default is not None:
        text += f" Default: {format_value(key.default)}."
    return text


def _wrap(comment: str, width: int = 100) -> list[str]:
    words, lines, line = comment[2:].split(), [], "#"
    for w in words:
        if len(line) + 1 + len(w) > width and line != "#":
            lines.append(line)
            line = "#"
        line += " " + w
    return lines + [line]


def template_text() -> str:
    """A commented plan: every key with what it takes and its default; keys without a default commented out.

    The three endmember sources exclude each other: the template uses ``[endmembers.library]`` and shows the
    other two commented out. Fill in the paths (relative paths start at the plan file's folder) and check
    the plan with ``unmix plan check PLAN.toml``.
    """
    from ... import __version__

    out = [
        "# unmix plan: the whole run from one file ('unmix run PLAN.toml'; 'unmix run --dry-run PLAN.toml' shows the",
        "# commands). Relative paths start at this file's folder. Unknown keys are errors. A commented-out key",
        "# has no default: remove the '# ' before it to set it. The products store the checked plan (defaults",
        "# filled in, paths absolute) with its SHA-256, so 'unmix plan extract PRODUCT' gives it back to repeat",
        "# the run.",
        "",
        "# Version of unmix the plan was written for; another version warns that results may differ.",
        f"unmix_version = {format_value(__version__)}",
    ]
    first = f"endmembers.{ENDMEMBER_SOURCES[0]}"
    for section in schema():
        other = section.name.startswith("endmembers.") and section.name != first
        lead = "# " if other else ""
        how = (f" To use it instead of [{first}]: remove the '# ' before its section line and keys, and comment "
               f"out [{first}]." if other else "")
        out += [""] + _wrap(f"# {section.help}{how}")
        if section.name == "endmembers":
            continue
        out.append(f"{lead}[{section.name}]")
        for key in section.keys:
            out += _wrap(_comment(key))
            value = key.default if key.default is not None else key.example
            if key.kind == "date" and isinstance(value, str):
                value = _dt.date.fromisoformat(value)
            active = key.required or key.default is not None
            out.append(f"{lead if active else '# '}{key.name} = {format_value(value)}")
    return "\n".join(out) + "\n"
