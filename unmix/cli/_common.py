"""Pieces shared by every command: error handling, overwrite checks, summaries.

Commands parse, call the library, and print a short summary. An :class:`unmix.errors.UnmixError`
becomes one line on stderr and exit status 2 (no traceback), see :func:`unmix.cli.main.main`.
"""

from __future__ import annotations

import sys
from pathlib import Path

import click

from ..errors import InputError, OutputExistsError
from ..sensors import list_sensors

__all__ = ["SENSOR_HELP", "overwrite_option", "out_dir_option", "check_can_write", "echo_summary", "split_names"]

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
    """Stop before any work if ``path`` exists and ``overwrite`` is not set."""
    path = Path(path)
    if path.exists() and not overwrite:
        raise OutputExistsError(f"{path} exists already; pass --overwrite to replace it")


def echo_summary(text: str) -> None:
    """Print the one-line summary a command ends with."""
    click.echo(text, file=sys.stdout)
