"""Atomic writing: a product appears under its name only when it is complete (see :mod:`.claim`)."""

from __future__ import annotations

import contextlib
import os
from collections.abc import Iterator
from pathlib import Path

from .claim import ProductSet

__all__ = ["atomic_path"]


@contextlib.contextmanager
def atomic_path(path: str | os.PathLike, *, overwrite: bool = False,
                products: ProductSet | None = None) -> Iterator[Path]:
    """Yield a hidden temporary path beside ``path``; it becomes ``path`` when the block succeeds.

    Without ``products`` the path is claimed, written and committed on its own: an existing
    ``path`` raises :class:`~unmix.errors.OutputExistsError` at once unless ``overwrite``; another
    run writing it raises :class:`~unmix.errors.ProductClaimedError`; the file is linked into place
    (``os.link``, so a file that appeared meanwhile is never replaced) or, with ``overwrite``,
    renamed over the old one. With ``products`` (a claimed :class:`ProductSet`) the file joins that
    set and is committed with it; ``overwrite`` is then the set's. On any exception the temporary
    file is removed and ``path`` is left as it was; a file-system failure becomes one
    :class:`~unmix.errors.ProductWriteError` naming ``path``.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> target = pathlib.Path(tempfile.mkdtemp()) / "out.txt"
    >>> with atomic_path(target) as tmp:
    ...     _ = tmp.write_text("done")
    >>> target.read_text()
    'done'
    """
    if products is not None:
        with products.writing(path) as tmp:
            yield tmp
        return
    with ProductSet([path], overwrite=overwrite) as own, own.writing(path) as tmp:
        yield tmp
