"""Provenance: the global attributes every unmix product carries, and attribute values a file can hold.

While ``unmix run`` runs the steps of a plan it sets the plan's normalised text with :func:`recording_plan`;
every product written meanwhile carries it as ``plan`` with its SHA-256 as ``plan_sha256``
(:func:`plan_attrs`), so the run can be repeated from any of its products.
"""

from __future__ import annotations

import contextlib
import contextvars
import datetime as _dt
import hashlib
import json
import os
from collections.abc import Iterator, Mapping, Sequence
from pathlib import Path
from typing import Any

import numpy as np

from ... import __version__

__all__ = ["CAUTION", "provenance_attrs", "recording_plan", "plan_attrs"]

CAUTION = (
    "Fractions are model estimates; validate in the field before they inform land-management "
    "decisions; defer to local regulations and licensed practice."
)


# the plan text of the running `unmix run` (None outside one): a context variable, so a run in another
# thread or task does not see it
_PLAN: contextvars.ContextVar[str | None] = contextvars.ContextVar("unmix_plan", default=None)


@contextlib.contextmanager
def recording_plan(text: str) -> Iterator[None]:
    """While the block runs, every product records the plan ``text`` (see :func:`plan_attrs`)."""
    token = _PLAN.set(text)
    try:
        yield
    finally:
        _PLAN.reset(token)


def plan_attrs() -> dict[str, str]:
    """``plan`` (the normalised TOML text) and ``plan_sha256`` of the running plan; empty outside a plan run.

    Examples
    --------
    >>> with recording_plan("x = 1\\n"):
    ...     plan_attrs()["plan_sha256"][:12]
    '9e26bf369911'
    >>> plan_attrs()
    {}
    """
    text = _PLAN.get()
    if text is None:
        return {}
    return {"plan": text, "plan_sha256": hashlib.sha256(text.encode("utf-8")).hexdigest()}


def _attr_value(value: Any) -> Any:
    """Turn a Python value into something a NetCDF attribute can hold (None -> dropped)."""
    if value is None:
        return None
    if isinstance(value, bool | np.bool_):
        return int(value)
    if isinstance(value, str | int | float | np.number):
        return value
    if isinstance(value, Path):
        return str(value)
    if isinstance(value, Mapping):
        return json.dumps(value, default=str, sort_keys=True)
    if isinstance(value, np.ndarray):
        if value.dtype.kind in "iuf":
            return value
        return ", ".join(str(v) for v in value.ravel())
    if isinstance(value, Sequence):
        items = list(value)
        if items and all(isinstance(v, int | float | np.number) and not isinstance(v, bool) for v in items):
            return np.asarray(items)
        return ", ".join(str(v) for v in items)
    return str(value)


def _clean_attrs(attrs: Mapping[str, Any]) -> dict[str, Any]:
    out = {}
    for key, value in attrs.items():
        cleaned = _attr_value(value)
        if cleaned is not None:
            out[str(key)] = cleaned
    return out


def provenance_attrs(
    *,
    command: str | None = None,
    parameters: Mapping[str, Any] | None = None,
    input_files: Sequence[str | os.PathLike] | None = None,
    endmember_names: Sequence[str] | None = None,
    title: str | None = None,
) -> dict[str, Any]:
    """Global attributes every unmix product carries.

    Parameters
    ----------
    command : str, optional
        The command line or function call that made the product.
    parameters : mapping, optional
        Settings of the run; stored as JSON.
    input_files : sequence of path, optional
        Files read; stored comma-separated.
    endmember_names : sequence of str, optional
    title : str, optional

    Returns
    -------
    dict
        ``Conventions``, ``title``, ``unmix_version``, ``command``, ``parameters``,
        ``endmember_names``, ``input_files``, ``created``, ``history``, ``caution``; inside
        :func:`recording_plan` also ``plan`` and ``plan_sha256``.

    Examples
    --------
    >>> attrs = provenance_attrs(command="unmix fractions stack/", parameters={"constraint": "fcls"})
    >>> attrs["parameters"]
    '{"constraint": "fcls"}'
    """
    created = _dt.datetime.now(_dt.timezone.utc).replace(microsecond=0).isoformat().replace("+00:00", "Z")
    command = command or "unmix (Python API)"
    attrs: dict[str, Any] = {
        "Conventions": "CF-1.8",
        "title": title or "unmix product",
        "unmix_version": __version__,
        "command": command,
        "parameters": json.dumps(dict(parameters or {}), default=str, sort_keys=True),
        "created": created,
        "history": f"{created} {command} (unmix {__version__})",
        "caution": CAUTION,
    }
    attrs.update(plan_attrs())
    if endmember_names is not None:
        attrs["endmember_names"] = ", ".join(str(n) for n in endmember_names)
    if input_files is not None:
        attrs["input_files"] = ", ".join(str(p) for p in input_files)
    return attrs
