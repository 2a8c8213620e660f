"""Pieces shared by every command: error handling, overwrite checks, product claims, summaries.

Commands parse, call the library, and print a short summary. An :class:`unmix.errors.UnmixError`
becomes one line on stderr and exit status 2 (no traceback), see :func:`unmix.cli.main.main`.

A command that writes products claims them before it reads any input (:func:`claim_products`,
see :mod:`unmix.io.products.claim`) and commits them at its end; the :func:`writes_products`
decorator releases the claims and removes the temporary files when the command fails or is stopped
(Ctrl-C, SIGTERM).
"""

from __future__ import annotations

import functools
import os
import sys
from collections.abc import Callable, Iterable
from pathlib import Path
from typing import TYPE_CHECKING, Any

import click

from ..errors import InputError, OutputExistsError
from ..sensors import list_sensors

if TYPE_CHECKING:  # the products package pulls in xarray: imported when a command writes, not at start-up
    from ..io.products.claim import ProductSet

__all__ = ["SENSOR_HELP", "overwrite_option", "out_dir_option", "check_can_write", "echo_summary", "split_names",
           "claim_products", "writes_products"]

# product sets claimed by the running command(s); released by writes_products when a command ends
_ACTIVE: list[ProductSet] = []

SENSOR_HELP = "Built-in sensor id: " + ", ".join(list_sensors()) + " (see `unmix sensors`)."


def split_names(text: str | None, option: str = "--band-names") -> list[str] | None:
    """Comma-separated names of an option (``B2,B3,B4``) as a list; None when the option was not given."""
    if text is None:
        return None
    names = [t.strip() for t in text.split(",") if t.strip()]
    if not names:
        raise InputError(f"{option} is empty; give names separated by commas, e.g. B2,B3,B4")
    return names

overwrite_option = click.option(
    "--overwrite",
    is_flag=True,
    default=False,
    help="Replace existing products. Without it an existing product is left untouched and the command stops.",
)


def out_dir_option(default: str = "."):
    return click.option(
        "--out",
        "out",
        type=click.Path(file_okay=False, path_type=Path),
        default=default,
        show_default=True,
        help="Folder the products are written to (created if missing).",
    )


def check_can_write(path: Path, overwrite: bool) -> None:
    """Stop before any work if ``path`` exists and ``overwrite`` is not set, or its folder is not writable.

    For outputs not written through a claimed :class:`ProductSet` (libraries); products use
    :func:`claim_products`, which checks the same and also excludes concurrent runs.
    """
    path = Path(path)
    if path.exists() and not overwrite:
        raise OutputExistsError(f"{path} exists already; pass --overwrite to replace it")
    from ..io.products.claim import probe_folder

    probe_folder(path.parent)


def claim_products(paths: Iterable[str | os.PathLike], overwrite: bool, command: str | None = None) -> ProductSet:
    """Claim the products a command will write, before it reads any input.

    Creates the output folder, removes stale temporary files of dead runs there, and claims every
    path: an existing product (without ``--overwrite``), a product another run is writing, or a folder
    that cannot be written stops the command here with one line. Write each product with
    ``products=`` the returned set and call its ``commit()`` at the end; the command must be
    decorated with :func:`writes_products`, which releases everything on failure.
    """
    from ..io.products.claim import ProductSet

    products = ProductSet(paths, overwrite=overwrite, command=command or " ".join(sys.argv))
    products.claim()
    _ACTIVE.append(products)
    return products


def writes_products(func: Callable[..., Any]) -> Callable[..., Any]:
    """Decorate a command's function: product sets it claimed are released when it ends.

    On an error, Ctrl-C or SIGTERM the temporary files are removed and the claims released, so no
    partial product or set is left; a set the command did not commit is released without commit.
    """

    @functools.wraps(func)
    def wrapper(*args: Any, **kwargs: Any) -> Any:
        depth = len(_ACTIVE)
        try:
            return func(*args, **kwargs)
        finally:
            while len(_ACTIVE) > depth:
                _ACTIVE.pop().abort()

    return wrapper


def echo_summary(text: str) -> None:
    """Print the one-line summary a command ends with."""
    click.echo(text, file=sys.stdout)
