"""``unmix survey``: the ledger of a record's dates and a verdict per comparability condition, without unmixing.

Opens a stack (any input ``unmix fractions`` reads) and runs the same date checks ``unmix fractions`` runs
before unmixing: the season window, the co-registration and the radiometry against a reference date, the
sensors on the grid. Or opens a product folder (or ``fractions.nc`` / ``trends.nc``) and shows the ledger it
was made with. Nothing is unmixed; with ``--ledger-csv`` the ledger is also written as CSV.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import click

from ._common import claim_products, echo_summary, overwrite_option, writes_products
from ._comparability import comparability_options, measuring_params, run_date_checks, settings_from
from ._inputs import archive_options, expand_paths, open_input, stack_options

__all__ = ["survey", "format_ledger"]


def format_ledger(ledger: Any) -> str:
    """The ledger as a plain-text table for the terminal (every date, every column that was measured)."""
    import pandas as pd

    from ..report.tables import ledger_table

    table = ledger_table(ledger)
    with pd.option_context("display.max_rows", None, "display.max_columns", None, "display.width", 200,
                           "display.max_colwidth", 80):
        return table.to_string(index=False, na_rep="-")


@click.command("survey")
@click.argument("stack", nargs=-1, required=True, metavar="STACK...")
@click.option("--ledger-csv", "ledger_csv", type=click.Path(dir_okay=False, path_type=Path), default=None,
              metavar="FILE", help="Also write the ledger as CSV (one row per date).")
@overwrite_option
@stack_options
@archive_options
@comparability_options
@click.pass_context
@writes_products
def survey(ctx: click.Context, stack: tuple[str, ...], ledger_csv: Path | None, overwrite: bool, **options: Any) -> None:
    """Check that the dates of STACK are comparable before unmixing: print the ledger of every date and one
    verdict per condition (season, co-registration, radiometry, resolution).

    STACK is anything `unmix fractions` reads; the checks and their options are the ones `unmix fractions`
    runs by default. STACK may also be a product folder or a fractions.nc / trends.nc: its ledger is shown.
    """
    from ..io.ledger import find_ledger, write_ledger_csv

    products = claim_products([ledger_csv], overwrite) if ledger_csv is not None else None
    paths = expand_paths(stack)
    ledger = find_ledger(paths[0]) if len(paths) == 1 else None
    if ledger is not None:
        source = f"ledger of the products in {paths[0]}"
        lines = list(ledger.attrs.get("verdicts", []))
    else:
        settings = settings_from(options)
        # nothing is unmixed: one cube, in chunks the measuring blocks read one file tile at a time
        cube, _, _ = open_input(paths, measuring_params(options, settings) or options)
        _, ledger, lines = run_date_checks(cube, settings)
        source = f"{cube.sizes['time']} dates of {', '.join(map(str, stack))} (nothing unmixed)"
    click.echo(format_ledger(ledger))
    used = int(ledger["used"].values.sum())
    echo_summary(f"survey: {source}; {used} of {ledger.sizes['time']} dates would be used"
                 + (f"; reference date {ledger.attrs['reference_date']}" if ledger.attrs.get("reference_date") else ""))
    for line in lines:
        echo_summary(f"  {line}")
    if products is not None:
        write_ledger_csv(ledger, ledger_csv, overwrite=overwrite, products=products)
        products.commit()
        echo_summary(f"  ledger -> {ledger_csv}")
