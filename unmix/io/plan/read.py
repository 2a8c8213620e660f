"""Read and check a plan file: every problem is one :class:`~unmix.errors.PlanError` naming the key.

A plan is TOML (:mod:`tomllib`). Unknown sections and keys are errors (with the closest known key
suggested), values are checked against :func:`unmix.io.plan.schema.schema` (type, range, choice), required
keys must be there, paths must exist (relative paths start at the plan file's folder), and choices that
exclude each other are named together. The checked plan is normalised: defaults filled in, paths made
absolute, the running unmix version recorded. Its TOML text (:func:`unmix.io.plan.toml.dumps`) and the
SHA-256 of that text are what the products store, so running the stored text again repeats the run.
"""

from __future__ import annotations

import datetime as _dt
import difflib
import glob
import hashlib
import math
import os
import re
import tomllib
import warnings
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from ... import __version__
from ...errors import PlanError, PlanVersionWarning
from .schema import ENDMEMBER_SOURCES, Key, Section, all_dotted_keys, schema
from .toml import dumps, format_value

__all__ = ["Plan", "read_plan", "parse_plan"]


@dataclass(frozen=True)
class Plan:
    """A checked, normalised plan.

    Attributes
    ----------
    data : dict
        Section -> key -> value, defaults filled in, paths absolute; ``data["endmembers"]`` holds the one
        chosen source: ``{"library": {...}}``, ``{"extraction": {...}}`` or ``{"bundles": {...}}``.
    text : str
        The normalised plan as TOML (what the products store).
    sha256 : str
        SHA-256 of ``text`` (UTF-8), hex.
    source : str
        Where the plan came from (file name, for messages).
    """

    data: dict
    text: str
    sha256: str
    source: str

    @property
    def endmember_source(self) -> str:
        return next(iter(self.data["endmembers"]))


def read_plan(path: str | os.PathLike, *, out: str | os.PathLike | None = None,
              overwrite: bool | None = None) -> Plan:
    """Read and check the plan file ``path``; ``out`` / ``overwrite`` replace ``[outputs]`` folder / overwrite.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> d = pathlib.Path(tempfile.mkdtemp()); (d / "stack").mkdir(); (d / "lib.csv").write_text("x")
    1
    >>> _ = (d / "plan.toml").write_text('[inputs]\\nstack = "stack"\\n[endmembers.library]\\nfile = "lib.csv"\\n'
    ...                                  '[outputs]\\nfolder = "out"\\n')
    >>> read_plan(d / "plan.toml").data["outputs"]["folder"] == str(d / "out")
    True
    """
    path = Path(path)
    if not path.is_file():
        raise PlanError(f"plan file {path} not found; write one with 'unmix plan template {path}'")
    try:
        text = path.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise PlanError(f"cannot read plan file {path}: {exc}") from None
    return parse_plan(text, base=path.resolve().parent, source=str(path), out=out, overwrite=overwrite)


def parse_plan(text: str, *, base: str | os.PathLike, source: str = "plan", out: str | os.PathLike | None = None,
               overwrite: bool | None = None) -> Plan:
    """Check the plan ``text``; relative paths are taken from folder ``base``. See :func:`read_plan`."""
    try:
        raw = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise PlanError(f"{source}: not a valid TOML file: {exc}") from None
    checker = _Checker(Path(base), source)
    data = checker.plan(raw)
    if out is not None:
        data["outputs"]["folder"] = os.path.abspath(os.fspath(out))
    if overwrite is not None:
        data["outputs"]["overwrite"] = bool(overwrite)
    checker.conflicts(data)
    normalised = dumps(data)
    return Plan(data=data, text=normalised, sha256=hashlib.sha256(normalised.encode("utf-8")).hexdigest(),
                source=source)


def _closest(word: str, known: list[str]) -> str:
    near = difflib.get_close_matches(word, known, n=1, cutoff=0.6)
    return f"; did you mean {near[0]!r}?" if near else ""


_TOP = ("unmix_version",)


class _Checker:
    def __init__(self, base: Path, source: str):
        self.base = base
        self.source = source
        self.sections = {s.name: s for s in schema()}

    def fail(self, key: str, what: str) -> None:
        raise PlanError(f"{self.source}: {key}: {what}")

    # -- structure ---------------------------------------------------------------------------------------------
    def plan(self, raw: dict) -> dict:
        tops = [n for n in self.sections if "." not in n]
        for name, value in raw.items():
            if name in _TOP:
                continue
            if name not in tops:
                self._unknown(name, [*tops, *_TOP], "the top level")
            if not isinstance(value, dict):
                self.fail(name, f"must be a section [{name}], got the value {value!r}")
        version = raw.get("unmix_version")
        if version is not None:
            if not isinstance(version, str):
                self.fail("unmix_version", f"expected a string, got {version!r}")
            if version != __version__:
                warnings.warn(PlanVersionWarning(
                    f"{self.source} was run with unmix {version}; this is unmix {__version__}: results may differ "
                    f"(install unmix {version} to repeat the run exactly)"), stacklevel=3)
        data: dict[str, Any] = {"unmix_version": __version__}
        for section in schema():
            if section.name == "endmembers":
                data["endmembers"] = self._endmembers(raw.get("endmembers"))
            elif "." not in section.name:
                given = raw.get(section.name)
                if given is None and not section.optional:
                    required = [k.name for k in section.keys if k.required]
                    self.fail(section.name, f"missing section [{section.name}] ({section.help.rstrip('.')}; "
                                            f"needs {', '.join(required)})")
                data[section.name] = self._section(section, given or {})
        return data

    def _endmembers(self, given: dict | None) -> dict:
        if not given:
            self.fail("endmembers", "missing; add exactly one of [endmembers.library], [endmembers.extraction] or "
                                    "[endmembers.bundles]")
        for name, value in given.items():
            if name not in ENDMEMBER_SOURCES:
                self._unknown(f"endmembers.{name}", [f"endmembers.{s}" for s in ENDMEMBER_SOURCES],
                              "[endmembers] (library, extraction or bundles)")
            if not isinstance(value, dict):
                self.fail(f"endmembers.{name}", f"must be a section [endmembers.{name}], got the value {value!r}")
        if len(given) > 1:
            names = " and ".join(f"[endmembers.{n}]" for n in given)
            self.fail("endmembers", f"{names} exclude each other: the endmembers come from one source; keep one")
        (name, table), = given.items()
        return {name: self._section(self.sections[f"endmembers.{name}"], table)}

    def _unknown(self, dotted: str, allowed: list[str], where: str) -> None:
        hint = _closest(dotted, allowed) or _closest(dotted, all_dotted_keys())
        raise PlanError(f"{self.source}: unknown key {dotted!r}{hint} (keys of {where}: {', '.join(allowed)})")

    def _section(self, section: Section, given: dict) -> dict:
        known = [k.name for k in section.keys]
        for name in given:
            if name not in known:
                self._unknown(f"{section.name}.{name}", [f"{section.name}.{k}" for k in known], f"[{section.name}]")
        out = {}
        for key in section.keys:
            dotted = f"{section.name}.{key.name}"
            if key.name in given:
                out[key.name] = self.value(dotted, key, given[key.name])
            elif key.required:
                self.fail(dotted, f"missing required key ({key.help} Expected {key.expected()}, e.g. "
                                  f"{key.name} = {format_value(key.example)})")
            elif key.default is not None:
                out[key.name] = key.default
        return out

    # -- values ------------------------------------------------------------------------------------------------
    def value(self, dotted: str, key: Key, v: Any) -> Any:
        bad = f"expected {key.expected()}, got {v!r}"
        kind = key.kind
        if kind == "bool":
            if not isinstance(v, bool):
                self.fail(dotted, bad)
            return v
        if kind in ("int", "float"):
            ok = isinstance(v, int) if kind == "int" else isinstance(v, int | float)
            if isinstance(v, bool) or not ok or not math.isfinite(v):
                self.fail(dotted, bad)
            self._limits(dotted, key, v, bad)
            return float(v) if kind == "float" else v
        if kind == "count":
            if isinstance(v, str) and v.strip().lower() == "auto":
                return "auto"
            if isinstance(v, bool) or not isinstance(v, int):
                self.fail(dotted, bad)
            self._limits(dotted, key, v, bad)
            return v
        if kind == "date":
            if isinstance(v, _dt.datetime) or not isinstance(v, _dt.date | str):
                self.fail(dotted, bad)
            if isinstance(v, str):
                try:
                    v = _dt.date.fromisoformat(v.strip())
                except ValueError:
                    self.fail(dotted, bad)
            return v
        if kind in ("names", "ints", "pair", "floats4", "range"):
            return self._list(dotted, key, v, bad)
        if kind == "paths":
            items = [v] if isinstance(v, str) else v
            if not isinstance(items, list) or not items or not all(isinstance(i, str) and i.strip() for i in items):
                self.fail(dotted, bad)
            return [self._existing(dotted, i, allow_glob=True) for i in items]
        if not isinstance(v, str) or (kind != "str" and not v.strip()):
            if kind == "qa" and isinstance(v, int) and not isinstance(v, bool) and v >= 1:
                return str(v)
            self.fail(dotted, bad)
        if kind == "choice":
            if v not in key.choices:
                self.fail(dotted, f"{v!r} is not allowed{_closest(v, list(key.choices))} (allowed: "
                                  f"{', '.join(key.choices)})")
            return v
        if kind == "pattern":
            if not re.fullmatch(key.pattern or "", v.replace(" ", "")):
                self.fail(dotted, bad)
            return v.replace(" ", "")
        if kind == "path":
            return self._existing(dotted, v)
        if kind == "out":
            folder = self._resolve(v)
            if folder.exists() and not folder.is_dir():
                self.fail(dotted, f"{v!r} ({folder}) is a file, not a folder; name a folder for the products")
            return str(folder)
        if kind == "qa":
            candidate = self._resolve(v)
            return str(candidate) if candidate.exists() else v
        return v

    def _limits(self, dotted: str, key: Key, v: float, bad: str) -> None:
        if key.low is not None and (v < key.low or (key.low_open and v == key.low)):
            self.fail(dotted, bad)
        if key.high is not None and (v > key.high or (key.high_open and v == key.high)):
            self.fail(dotted, bad)

    def _list(self, dotted: str, key: Key, v: Any, bad: str) -> Any:
        kind = key.kind
        if kind == "range" and v is False:
            return False
        if not isinstance(v, list) or not v:
            self.fail(dotted, bad)
        if kind == "names":
            if not all(isinstance(i, str) and i.strip() for i in v):
                self.fail(dotted, bad)
            return [i.strip() for i in v]
        numbers = all(isinstance(i, int | float) and not isinstance(i, bool) for i in v)
        whole = all(isinstance(i, int) and not isinstance(i, bool) for i in v)
        size = {"pair": 2, "floats4": 4, "range": 2}.get(kind)
        if (kind in ("ints", "pair") and not whole) or not numbers or (size is not None and len(v) != size):
            self.fail(dotted, bad)
        if kind in ("ints", "pair"):
            for i in v:
                self._limits(dotted, key, i, bad)
            return list(v)
        values = [float(i) for i in v]
        if not all(abs(i) < float("inf") for i in values):
            self.fail(dotted, bad)
        if kind == "range" and not values[0] < values[1]:
            self.fail(dotted, f"low must be below high, got {v!r}")
        if kind == "floats4" and not (values[0] < values[2] and values[1] < values[3]):
            self.fail(dotted, f"left must be below right and bottom below top, got {v!r}")
        return values

    def _resolve(self, text: str) -> Path:
        p = Path(os.path.expanduser(text.strip()))
        return Path(os.path.abspath(p if p.is_absolute() else self.base / p))

    def _existing(self, dotted: str, text: str, allow_glob: bool = False) -> str:
        p = self._resolve(text)
        if p.exists():
            return str(p)
        if allow_glob and any(c in text for c in "*?[") and glob.glob(str(p), recursive=True):
            return str(p)
        where = "" if Path(text).is_absolute() else f" (relative paths start at the plan's folder {self.base})"
        self.fail(dotted, f"{text!r} does not exist: {p}{where}; correct the path")
        return ""

    # -- choices that exclude each other ------------------------------------------------------------------------
    def conflicts(self, d: dict) -> None:
        def both(a: str, b: str, why: str) -> None:
            sa, ka = a.split(".", 1)
            sb, kb = b.split(".", 1)
            if d[sa].get(ka) not in (None, False) and d[sb].get(kb) not in (None, False):
                self.fail(f"{a} and {b}", f"exclude each other ({why}); keep one")

        both("inputs.sensor", "inputs.response", "a built-in sensor or a response table")
        both("sample.total", "sample.per_class", "a total shared by area, or the same size per class")
        both("compute.workers", "compute.scheduler", "a local cluster, or a running one")
        grid = [k for k in ("crs", "resolution", "bounds") if k in d["grid"]]
        if grid and len(grid) < 3:
            self.fail("grid." + ", grid.".join(grid), "grid.crs, grid.resolution and grid.bounds go together (or "
                                                      "use grid.file)")
        if "qa_bits" in d["masks"] and "qa" not in d["masks"]:
            self.fail("masks.qa_bits", "needs masks.qa (the QA band or the folder of mask files)")
        window = [k for k in ("doy_window", "years", "first_date", "last_date") if k in d["dates"]]
        if "composite" in d["dates"] and not window:
            self.fail("dates.composite", "needs a window to composite within: dates.doy_window, dates.years, "
                                         "dates.first_date or dates.last_date")
        if "target_doy" in d["dates"] and d["dates"].get("composite") != "closest":
            self.fail("dates.target_doy", "is the day of dates.composite = 'closest'; set that, or drop target_doy")
        source, table = next(iter(d["endmembers"].items()))
        if source == "extraction":
            read_with = [f"{s}.{k}" for s, k in (("inputs", "scale"), ("inputs", "offset"), ("inputs", "dates"),
                                                 ("inputs", "roles"), ("masks", "qa"), ("masks", "names"),
                                                 ("grid", "file"), ("grid", "crs"), ("grid", "align"))
                         if d[s].get(k) not in (None, False)]
            if d["inputs"].get("band_adjustment"):
                read_with.append("inputs.band_adjustment")
            if read_with:
                self.fail("endmembers.extraction", f"reads a plain stack as stored, so {', '.join(read_with)} would "
                                                   "give the endmembers and the fractions different reflectance; "
                                                   "drop them, or use [endmembers.library]")
        if source == "bundles" and d["unmixing"]["constraint"] not in ("fcls", "sum-to-one"):
            self.fail("unmixing.constraint", f"bundles (MESMA) solve each model under fcls or sum-to-one, not "
                                             f"{d['unmixing']['constraint']!r}")
        if not d["trends"]["run"]:
            needing = [n for n, on in (("report.run", d["report"]["run"]), ("sample.run", d["sample"]["run"]),
                                       ("rules.file", "file" in d["rules"]), ("zones.file", "file" in d["zones"]),
                                       ("zones.cover_change", d["zones"]["cover_change"] or "periods" in d["zones"]))
                       if on]
            if needing:
                self.fail("trends.run", f"is false, but {', '.join(needing)} need the trends; set trends.run = true "
                                        "or switch them off")
        for step in ("report", "sample"):
            folder = d[step]["folder"]
            if not folder.strip() or Path(folder).is_absolute() or ".." in Path(folder).parts:
                self.fail(f"{step}.folder", f"expected a folder name inside outputs.folder, got {folder!r}")
