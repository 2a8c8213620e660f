"""Atomic writing: a product appears under its name only when it is complete."""

from __future__ import annotations

import contextlib
import os
import uuid
from collections.abc import Iterator
from pathlib import Path

from ...errors import OutputExistsError

__all__ = ["atomic_path"]


@contextlib.contextmanager
def atomic_path(path: str | os.PathLike, *, overwrite: bool = False) -> Iterator[Path]:
    """Yield a temporary path beside ``path``; rename it to ``path`` when the block succeeds.

    Raises :class:`~unmix.errors.OutputExistsError` at once if ``path`` exists and ``overwrite`` is
    false. On any exception the temporary file is removed and ``path`` is left as it was.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> target = pathlib.Path(tempfile.mkdtemp()) / "out.txt"
    >>> with atomic_path(target) as tmp:
    ...     _ = tmp.write_text("done")
    >>> target.read_text()
    'done'
    """
    path = Path(path)
    if path.exists() and not overwrite:
        raise OutputExistsError(f"{path} exists already; pass overwrite=True (--overwrite) to replace it")
    if path.exists() and path.is_dir():
        raise OutputExistsError(f"{path} is a folder; choose a file name for the product")
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.parent / f".{path.name}.{uuid.uuid4().hex[:12]}.partial"
    try:
        yield tmp
        if not tmp.exists():
            raise OSError(f"nothing was written to the temporary file for {path}")
        os.replace(tmp, path)
    except BaseException:
        with contextlib.suppress(OSError):
            tmp.unlink()
        raise
