"""Exclusive claims on product paths, hidden temporary files, and a set of products committed together.

How a command writes its products (``fractions.nc`` and its COGs, ``trends.nc``, a report folder):

1. **Claim** every product path before any input is read: a small file ``.<name>.claim`` beside the
   product, holding host, pid, process start and start time, is created with a hard link (never
   check-then-create), so of two runs started together exactly one gets the claim; the other stops
   at once with one line naming the product and the run that holds it
   (:class:`~unmix.errors.ProductClaimedError`). Creating the claim is also the proof that the
   folder is writable (:class:`~unmix.errors.ProductWriteError` otherwise).
2. **Write** each product into a hidden temporary file beside it,
   ``.<name>.<host>.<pid>.<random>.partial``.
3. **Commit** the whole set when every product is complete: each temporary file is flushed to
   disk, then linked to its final name with ``os.link`` (which fails if the name exists, so a
   product is never replaced without ``overwrite``) or, with ``overwrite``, renamed over it with
   ``os.replace`` after a hard-link backup of the old file. If one step fails, the products already
   committed are taken back (the old files restored), so either the whole new set appears or none
   of it does.
4. **Release** the claims; temporary files are removed on any failure, Ctrl-C or SIGTERM.

A run killed with SIGKILL cannot clean up: its ``.partial`` and ``.claim`` files stay. The next run
that claims a product in that folder removes them when they are stale (:mod:`.stale`).

Limits (POSIX gives no atomic rename of several files): the commit itself is a handful of links or
renames; a SIGKILL or power loss during those microseconds can leave part of a set (each file
complete). Claims exclude other unmix runs, not other programs writing the same names.
"""

from __future__ import annotations

import contextlib
import errno
import json
import os
import socket
import threading
import time
import uuid
from collections.abc import Iterable, Iterator
from pathlib import Path

from ...errors import OutputExistsError, ProductClaimedError, UnmixError
from .stale import STALE_AFTER_S, _holder, _host, _process_start, probe_folder, remove_stale
from .write_errors import is_write_failure
from .write_errors import write_error as _write_error

__all__ = ["ProductSet", "STALE_AFTER_S", "remove_stale", "probe_folder"]

#: How often [s] a running set touches its claim and temporary files (see :data:`STALE_AFTER_S`).
_HEARTBEAT_S = 600
# errors of os.link on file systems without hard links: fall back to an exclusive create / rename
_NO_LINKS = {errno.EPERM, errno.ENOTSUP, errno.EOPNOTSUPP, errno.ENOSYS}


class ProductSet:
    """Products of one command, claimed together at the start and committed together at the end.

    Parameters
    ----------
    paths : iterable of path
        Final names of the products.
    overwrite : bool
        Replace existing products (else :class:`~unmix.errors.OutputExistsError` at claim time).
    command : str, optional
        Shown to a second run that finds the claim.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> folder = pathlib.Path(tempfile.mkdtemp())
    >>> with ProductSet([folder / "a.txt", folder / "b.txt"]) as products:
    ...     for name in ("a.txt", "b.txt"):
    ...         with products.writing(folder / name) as tmp:
    ...             _ = tmp.write_text(name)
    >>> sorted(p.name for p in folder.iterdir())
    ['a.txt', 'b.txt']
    """

    def __init__(self, paths: Iterable[str | os.PathLike], *, overwrite: bool = False,
                 command: str | None = None) -> None:
        self.paths = list(dict.fromkeys(Path(p).absolute() for p in paths))
        self.overwrite = bool(overwrite)
        self.command = command
        self._host, self._pid = _host(), os.getpid()
        self._claims: list[Path] = []
        self._temps: dict[Path, Path] = {}
        self._done: set[Path] = set()
        self._scratch: set[Path] = set()
        self._heartbeat: threading.Event | None = None

    # -- claiming ---------------------------------------------------------------------------------
    def __enter__(self) -> ProductSet:
        self.claim()
        return self

    def __exit__(self, exc_type, exc, tb) -> None:
        if exc_type is None:
            self.commit()
        else:
            self.abort()

    def claim(self) -> None:
        """Claim every path (see the module docstring); on any failure nothing stays claimed."""
        self._claim_paths(self.paths)

    def claim_more(self, paths: Iterable[str | os.PathLike]) -> None:
        """Add products to a claimed set (for names known only after some work, e.g. one COG per endmember)."""
        new = [p for p in dict.fromkeys(Path(p).absolute() for p in paths) if p not in self.paths]
        self.paths.extend(new)
        self._claim_paths(new)

    def _claim_paths(self, paths: list[Path]) -> None:
        if self._heartbeat is None:
            self._heartbeat = _keep_fresh(self)
        try:
            for folder in dict.fromkeys(p.parent for p in paths):
                try:
                    folder.mkdir(parents=True, exist_ok=True)
                except OSError as exc:
                    raise _write_error(folder, exc, "create the output folder", before=True) from None
                remove_stale(folder)
            for path in paths:
                self._claim_one(path)
        except BaseException:
            self.abort()
            raise

    def _claim_one(self, path: Path) -> None:
        if path.is_dir():
            raise OutputExistsError(f"{path} is a folder; choose another name or --out for the product")
        self._check_absent(path)
        info = {"host": socket.gethostname(), "pid": self._pid, "pid_start": _process_start(self._pid),
                "started": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()), "command": self.command}
        claim = path.with_name(f".{path.name}.claim")
        staged = self._scratch_name(path, "claim")
        try:
            staged.write_text(json.dumps(info), encoding="utf-8")
        except OSError as exc:
            with contextlib.suppress(OSError):
                staged.unlink()
            raise _write_error(path.parent, exc, "write in the output folder", before=True) from None
        try:
            _link_new(staged, claim)
        except FileExistsError:
            holder = _holder(claim) or {}
            who = (f"host {holder.get('host')}, pid {holder.get('pid')}, started {holder.get('started')}"
                   if holder else "an unknown run")
            raise ProductClaimedError(
                f"{path} is being written by another run ({who}); wait for it to finish, or delete {claim} "
                "if that run is gone"
            ) from None
        except OSError as exc:
            raise _write_error(path.parent, exc, "write in the output folder", before=True) from None
        finally:
            with contextlib.suppress(OSError):
                staged.unlink()
        self._claims.append(claim)
        self._check_absent(path)  # a run that held the claim may have committed just before

    def _check_absent(self, path: Path) -> None:
        if not self.overwrite and os.path.lexists(path):
            raise OutputExistsError(f"{path} exists already; pass --overwrite (overwrite=True) to replace it")

    # -- writing ----------------------------------------------------------------------------------
    def _scratch_name(self, path: Path, tag: str | None = None) -> Path:
        suffix = f".{tag}" if tag else ""
        return path.with_name(f".{path.name}.{self._host}.{self._pid}.{uuid.uuid4().hex[:8]}{suffix}.partial")

    def _owned(self, path: str | os.PathLike) -> Path:
        path = Path(path).absolute()
        if path not in self.paths:
            raise ValueError(f"{path} is not one of the claimed products {', '.join(map(str, self.paths))}")
        return path

    def scratch(self, path: str | os.PathLike, tag: str) -> Path:
        """A further temporary name beside ``path`` (intermediate files), removed at the end."""
        name = self._scratch_name(self._owned(path), tag)
        self._scratch.add(name)
        return name

    def staged(self, path: str | os.PathLike) -> Path:
        """Where the finished, not yet committed product ``path`` is (to read it back before the commit)."""
        path = self._owned(path)
        if path not in self._done:
            raise ValueError(f"{path} has not been written yet")
        return self._temps[path]

    @contextlib.contextmanager
    def writing(self, path: str | os.PathLike) -> Iterator[Path]:
        """Yield the temporary file for product ``path``; it joins the set when the block succeeds.

        A file-system failure inside the block (full disk, size limit, permissions) becomes one
        :class:`~unmix.errors.ProductWriteError` naming the product.
        """
        path = self._owned(path)
        if not self._claims:
            raise RuntimeError("claim the products first (use the ProductSet as a context manager)")
        old = self._temps.pop(path, None)
        if old is not None:
            self._done.discard(path)
            with contextlib.suppress(OSError):
                old.unlink()
        tmp = self._temps[path] = self._scratch_name(path)
        try:
            yield tmp
            if not tmp.exists():
                raise RuntimeError(f"nothing was written to the temporary file of {path}")
            _fsync(tmp)
        except BaseException as exc:
            with contextlib.suppress(OSError):
                tmp.unlink()
            self._temps.pop(path, None)
            if isinstance(exc, Exception) and is_write_failure(exc):
                raise _write_error(path, exc, "write") from exc
            raise
        self._done.add(path)

    # -- committing -------------------------------------------------------------------------------
    def commit(self) -> list[Path]:
        """Put every written product in place, all or none; then release the claims."""
        done = [p for p in self.paths if p in self._done]
        backups: dict[Path, Path] = {}
        placed: list[Path] = []
        try:
            if self.overwrite:
                for path in done:
                    if os.path.lexists(path):
                        backups[path] = self._scratch_name(path, "old")
                        os.link(path, backups[path])
            for path in done:
                if self.overwrite:
                    os.replace(self._temps[path], path)
                else:
                    _link_new(self._temps[path], path)
                placed.append(path)
            _fsync_dirs({p.parent for p in done})
        except BaseException as exc:
            for path in reversed(placed):  # take the new set back, old files first
                with contextlib.suppress(OSError):
                    if path in backups:
                        os.replace(backups.pop(path), path)
                    else:
                        os.unlink(path)
            self.abort(extra=backups.values())
            if isinstance(exc, FileExistsError) and not isinstance(exc, UnmixError):
                raise OutputExistsError(f"{exc.filename} appeared while this run wrote it (another program?); "
                                        "nothing of this run was kept") from None
            if isinstance(exc, Exception) and is_write_failure(exc):
                raise _write_error(Path(getattr(exc, "filename", None) or done[len(placed)]), exc,
                                   "put in place") from None
            raise
        self.abort(extra=backups.values())  # temporary names and claims
        return done

    def abort(self, extra: Iterable[Path] = ()) -> None:
        """Remove every temporary file and release the claims (products already in place stay)."""
        for tmp in [*self._temps.values(), *self._scratch, *extra]:
            with contextlib.suppress(OSError):
                os.unlink(tmp)
        self._temps.clear()
        self._scratch.clear()
        self._done.clear()
        for claim in self._claims:
            with contextlib.suppress(OSError):
                claim.unlink()
        self._claims.clear()
        if self._heartbeat is not None:
            self._heartbeat.set()
            self._heartbeat = None


def _keep_fresh(products: ProductSet) -> threading.Event:
    """Touch the set's claim and temporary files every :data:`_HEARTBEAT_S` until the returned event is set,
    so a run on another host sees a long run as alive (its files' age is the time since the last touch)."""
    stop = threading.Event()

    def beat() -> None:
        while not stop.wait(_HEARTBEAT_S):
            try:
                files = [*products._claims, *products._temps.values(), *products._scratch]
            except RuntimeError:  # changed while copied: next beat
                continue
            for path in files:
                with contextlib.suppress(OSError):
                    os.utime(path)

    threading.Thread(target=beat, name="unmix-claim-heartbeat", daemon=True).start()
    return stop


def _link_new(src: Path, dst: Path) -> None:
    """Give ``src`` the additional name ``dst``; FileExistsError if ``dst`` exists (atomic)."""
    try:
        os.link(src, dst)
    except OSError as exc:
        if exc.errno not in _NO_LINKS:
            raise
        # no hard links here: an exclusive create for the claim, a rename under the claim for products
        if src.name.endswith(".claim.partial"):
            fd = os.open(dst, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o644)
            with os.fdopen(fd, "wb") as f:
                f.write(src.read_bytes())
        else:
            if os.path.lexists(dst):
                raise FileExistsError(errno.EEXIST, "File exists", str(dst)) from None
            os.rename(src, dst)


def _fsync(path: Path) -> None:
    fd = os.open(path, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


def _fsync_dirs(folders: Iterable[Path]) -> None:
    for folder in folders:
        with contextlib.suppress(OSError):  # not every file system lets a folder be synced
            _fsync(folder)
