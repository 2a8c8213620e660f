"""Claim and temporary files of runs that are gone: how they are recognised and removed.

A killed run (SIGKILL, power loss) leaves ``.<name>.claim`` and ``.<name>.<host>.<pid>.<random>[.tag].partial``
files beside its products (see :mod:`unmix.io.products.claim`). They are stale when written on this
host by a process that no longer runs (pid gone, or reused by a process started later, told apart by
the start time Linux keeps in ``/proc``), or written on another host and not touched for
:data:`STALE_AFTER_S` (another host's processes cannot be checked; a running unmix touches its files
every ten minutes).
"""

from __future__ import annotations

import contextlib
import errno
import json
import os
import re
import socket
import time
import uuid
from pathlib import Path

from .write_errors import write_error as _write_error

__all__ = ["STALE_AFTER_S", "remove_stale", "probe_folder"]

#: Age [s] after which a claim or temporary file written on another host counts as abandoned. A running
#: unmix touches its files every ``_HEARTBEAT_S``, so the age is the time since its last sign of life.
STALE_AFTER_S = 24 * 3600
#: Age [s] after which an unreadable claim (not written by this version) counts as abandoned.
_UNREADABLE_AFTER_S = 60

_PARTIAL = re.compile(r"^\.(?P<name>.+)\.(?P<host>[A-Za-z0-9-]+)\.(?P<pid>\d+)\.(?P<rand>[0-9a-f]{8})"
                      r"(?:\.[a-z]+)?\.partial$")


def _host() -> str:
    return re.sub(r"[^A-Za-z0-9-]", "-", socket.gethostname())[:40] or "host"


def _process_start(pid: int) -> str | None:
    """Start time of process ``pid`` in clock ticks since boot (Linux ``/proc``), None elsewhere."""
    try:
        with open(f"/proc/{pid}/stat", encoding="ascii", errors="replace") as f:
            return f.read().rsplit(")", 1)[1].split()[19]
    except (OSError, IndexError):
        return None


def _alive(pid: int, start: str | None) -> bool:
    """Is process ``pid`` (started at ``start``, when known) still running on this host?"""
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:  # another user's process: it exists
        pass
    if start is not None:
        now = _process_start(pid)
        if now is not None and now != start:  # the pid was reused by a later process
            return False
    return True


def _holder(claim: Path) -> dict | None:
    try:
        return json.loads(claim.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None


def _age(path: Path) -> float:
    try:
        return time.time() - path.stat().st_mtime
    except OSError:
        return 0.0


def _is_stale(path: Path, host: str) -> bool:
    """Was ``path`` (a claim or a temporary file) left by a run that is gone?"""
    if path.name.endswith(".claim"):
        info = _holder(path)
        if not isinstance(info, dict) or "pid" not in info:
            return _age(path) > _UNREADABLE_AFTER_S
        their_host, pid, start = str(info.get("host")), int(info["pid"]), info.get("pid_start")
    else:
        m = _PARTIAL.match(path.name)
        if m is None:  # an older unmix's temporary name: age only
            return _age(path) > STALE_AFTER_S
        their_host, pid, start = m["host"], int(m["pid"]), None
    if their_host == host:
        return pid != os.getpid() and not _alive(pid, start)
    return _age(path) > STALE_AFTER_S


def remove_stale(folder: str | os.PathLike) -> list[Path]:
    """Remove the ``.partial`` and ``.claim`` files of dead runs from ``folder``; return what was removed."""
    host, removed = _host(), []
    try:
        entries = list(os.scandir(folder))
    except OSError:
        return removed
    for entry in entries:
        name = entry.name
        if not name.startswith(".") or not (name.endswith(".partial") or name.endswith(".claim")):
            continue
        path = Path(entry.path)
        if _is_stale(path, host):
            with contextlib.suppress(FileNotFoundError):
                path.unlink()
                removed.append(path)
    return removed


def probe_folder(folder: str | os.PathLike) -> None:
    """Check that files can be created in ``folder`` (or, if it does not exist yet, in the nearest
    existing folder above it) by creating and removing a hidden probe file; removes stale temporary
    and claim files of dead runs on the way. Raises :class:`~unmix.errors.ProductWriteError`."""
    folder = Path(folder).absolute()
    existing = folder
    while not os.path.lexists(existing) and existing != existing.parent:
        existing = existing.parent
    if not existing.is_dir():
        raise _write_error(folder, NotADirectoryError(errno.ENOTDIR, os.strerror(errno.ENOTDIR)),
                           f"create a folder under the file {existing} for", before=True)
    probe = existing / f".unmix-probe.{_host()}.{os.getpid()}.{uuid.uuid4().hex[:8]}.partial"
    try:
        os.close(os.open(probe, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o600))
        os.unlink(probe)
    except OSError as exc:
        raise _write_error(existing, exc, "create files in", before=True) from None
    if existing == folder:
        remove_stale(folder)
