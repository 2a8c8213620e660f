"""The ``unmix`` command group.

Each subcommand lives in its own module and is added here. Errors raised on purpose by the library
(:class:`unmix.errors.UnmixError`) are shown as one line on stderr with exit status 2.
"""

from __future__ import annotations

import sys

import click

from .. import __version__
from ..errors import UnmixError


@click.group(context_settings={"help_option_names": ["-h", "--help"], "max_content_width": 100})
@click.version_option(__version__, prog_name="unmix")
def cli() -> None:
    """Sub-pixel land-cover fractions from image time series, and where cover is slowly changing.

    Fractions and trends are model estimates: validate them in the field before they inform a
    decision, and defer to local regulations and licensed practice.
    """


# Subcommands register here, one line each (keep alphabetical).
from .demo import demo as _demo_command  # noqa: E402
cli.add_command(_demo_command)
from .endmembers import endmembers as _endmembers_command  # noqa: E402
cli.add_command(_endmembers_command)
from .fractions import fractions as _fractions_command  # noqa: E402
cli.add_command(_fractions_command)
from .library import library as _library_command  # noqa: E402
cli.add_command(_library_command)
from .report import report as _report_command  # noqa: E402
cli.add_command(_report_command)
from .sensors import sensors as _sensors_command  # noqa: E402
cli.add_command(_sensors_command)
from .trends import trends as _trends_command  # noqa: E402
cli.add_command(_trends_command)


def main(argv: list[str] | None = None) -> int:
    """Console-script entry point: run the group, turning UnmixError into one clear line."""
    try:
        cli.main(args=argv, prog_name="unmix", standalone_mode=False)
    except click.exceptions.Abort:
        click.echo("Aborted.", err=True)
        return 130
    except click.ClickException as exc:
        exc.show()
        return exc.exit_code
    except UnmixError as exc:
        click.echo(f"unmix: error: {exc}", err=True)
        return 2
    except click.exceptions.Exit as exc:
        return exc.exit_code
    return 0


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
