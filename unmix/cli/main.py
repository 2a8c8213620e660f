"""The ``unmix`` command group.

Each subcommand lives in its own module and is added here. Errors raised on purpose by the library
(:class:`unmix.errors.UnmixError`) are shown as one line on stderr with exit status 2. SIGTERM (what
``kill``, batch schedulers and container runtimes send) takes the same clean-up path as Ctrl-C:
temporary files are removed and product claims released, then the command exits with 143 (Ctrl-C: 130).
"""

from __future__ import annotations

import contextlib
import importlib
import logging
import signal
import sys
import warnings
from collections.abc import Iterator

import click

from .. import __version__
from ..errors import UnmixError, UnmixWarning


class _LazyGroup(click.Group):
    """A command group that imports a subcommand's module only when that subcommand is used.

    Running ``unmix fractions`` then does not import the trend, extraction or report modules, which
    keeps start-up short; ``unmix --help`` still lists (and so imports) every command.
    """

    def __init__(self, *args, lazy_commands: dict[str, str], **kwargs):
        super().__init__(*args, **kwargs)
        self._lazy = dict(lazy_commands)

    def list_commands(self, ctx: click.Context) -> list[str]:
        return sorted({*super().list_commands(ctx), *self._lazy})

    def get_command(self, ctx: click.Context, name: str) -> click.Command | None:
        if name in self._lazy and name not in self.commands:
            module_name, attribute = self._lazy[name].split(":")
            self.add_command(getattr(importlib.import_module(module_name, __package__), attribute), name)
        return super().get_command(ctx, name)


# Subcommands register here: name -> "module:command" (one module per command; keep alphabetical).
_COMMANDS = {
    "assess": ".assess:assess",
    "demo": ".demo:demo",
    "endmembers": ".endmembers:endmembers",
    "fractions": ".fractions:fractions",
    "library": ".library:library",
    "plan": ".plan:plan",
    "report": ".report:report",
    "run": ".run:run",
    "sample": ".sample:sample",
    "sensors": ".sensors:sensors",
    "survey": ".survey:survey",
    "trends": ".trends:trends",
    "validate": ".validate:validate",
}


@click.group(cls=_LazyGroup, lazy_commands=_COMMANDS,
             context_settings={"help_option_names": ["-h", "--help"], "max_content_width": 100})
@click.version_option(__version__, prog_name="unmix")
def cli() -> None:
    """Sub-pixel land-cover fractions from image time series, and where cover is slowly changing.

    Fractions and trends are model estimates: validate them in the field before they inform a
    decision, and defer to local regulations and licensed practice.
    """


class Terminated(BaseException):
    """Raised in the main thread when the process receives SIGTERM (a BaseException, like Ctrl-C's
    KeyboardInterrupt, so only clean-up code catches it)."""


@contextlib.contextmanager
def _sigterm_raises() -> Iterator[None]:
    """While the block runs, SIGTERM raises :class:`Terminated` (once; a second one during the
    clean-up is ignored so the clean-up can finish). The previous handler is restored afterwards."""
    fired = False

    def handler(signum, frame):
        nonlocal fired
        if not fired:
            fired = True
            raise Terminated()

    try:
        previous = signal.signal(signal.SIGTERM, handler)
    except ValueError:  # not the main thread (e.g. called from a worker thread): leave signals alone
        yield
        return
    try:
        yield
    finally:
        signal.signal(signal.SIGTERM, previous)


def _one_line(exc: BaseException) -> str:
    return " ".join(str(exc).split())


def _format_warning(message, category, filename, lineno, line=None) -> str:
    """A warning as the commands print it: one line starting ``unmix: warning:``, without the Python file
    and source line of the default format (the library's own warnings name their class too)."""
    text = " ".join(str(message).split())
    if issubclass(category, UnmixWarning):
        return f"unmix: warning: {text}\n"
    return f"unmix: warning ({category.__name__}): {text}\n"


def main(argv: list[str] | None = None) -> int:
    """Console-script entry point: run the group, turning UnmixError into one clear line and warnings into
    lines of their own."""
    # GDAL messages reach Python's logging through rasterio and would print extra lines; a failure they
    # describe is raised as an exception too, and becomes the command's one error line
    logging.getLogger("rasterio").addHandler(logging.NullHandler())
    # formatwarning, not showwarning: a caller recording warnings (warnings.catch_warnings(record=True),
    # pytest.warns) still receives them as they are
    default_format, warnings.formatwarning = warnings.formatwarning, _format_warning
    try:
        return _run(argv)
    finally:
        warnings.formatwarning = default_format


def _run(argv: list[str] | None) -> int:
    try:
        with _sigterm_raises():
            cli.main(args=argv, prog_name="unmix", standalone_mode=False)
    except Terminated:
        click.echo("unmix: stopped by SIGTERM; temporary files removed, no partial product left", err=True)
        return 143
    except click.exceptions.Abort:
        click.echo("Aborted.", err=True)
        return 130
    except click.ClickException as exc:
        exc.show()
        return exc.exit_code
    except UnmixError as exc:
        click.echo(f"unmix: error: {_one_line(exc)}", err=True)
        return 2
    except click.exceptions.Exit as exc:
        return exc.exit_code
    return 0


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
