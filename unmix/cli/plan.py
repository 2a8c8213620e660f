"""``unmix plan``: write the commented plan template, check a plan, take the plan back out of a product."""

from __future__ import annotations

from pathlib import Path

import click

from ._common import echo_summary, overwrite_option

__all__ = ["plan"]


@click.group("plan")
def plan() -> None:
    """Plan files: one TOML file naming the inputs, endmembers, options and outputs of a whole run.

    `template` writes a commented plan to fill in, `check` checks one and shows the commands
    `unmix run` would run, `extract` writes the plan a product was made with back to a file.
    """


@plan.command("template")
@click.argument("path", type=click.Path(dir_okay=False, path_type=Path), metavar="PLAN.toml")
@overwrite_option
def template_command(path: Path, overwrite: bool) -> None:
    """Write a commented plan to PLAN.toml: every key with what it takes and its default.

    Fill in the paths (relative paths start at the plan's folder), then `unmix plan check PLAN.toml`
    and `unmix run PLAN.toml`.
    """
    from ..io.plan import template_text, write_plan

    write_plan(path, template_text(), overwrite=overwrite)
    echo_summary(f"wrote the plan template {path}; fill in [inputs] stack, [endmembers.library] file and "
                 "[outputs] folder, then 'unmix plan check " + str(path) + "'")


@plan.command("check")
@click.argument("path", type=click.Path(dir_okay=False, path_type=Path), metavar="PLAN.toml")
def check_command(path: Path) -> None:
    """Check PLAN.toml and print it normalised (defaults filled in, paths absolute) with its steps."""
    import shlex

    from ..io.plan import read_plan
    from .run import plan_steps

    checked = read_plan(path)
    click.echo(checked.text, nl=False)
    click.echo("")
    for _, args in plan_steps(checked.data):
        click.echo("# $ unmix " + shlex.join(args))
    echo_summary(f"# plan {path} is valid; sha256 {checked.sha256}")


@plan.command("extract")
@click.argument("product", type=click.Path(dir_okay=False, path_type=Path), metavar="PRODUCT")
@click.option("--out", "out", required=True, type=click.Path(dir_okay=False, path_type=Path), metavar="PLAN.toml",
              help="Plan file to write.")
@overwrite_option
def extract_command(product: Path, out: Path, overwrite: bool) -> None:
    """Write the plan PRODUCT was made with (fractions.nc, trends.nc, a GeoTIFF, sample.geojson or a
    library of `unmix run`) to PLAN.toml; `unmix run PLAN.toml --out NEW` repeats the run.
    """
    import hashlib

    from ..errors import PlanError
    from ..io.plan import stored_plan, write_plan

    text, digest = stored_plan(product)
    if hashlib.sha256(text.encode("utf-8")).hexdigest() != digest:
        raise PlanError(f"{product}: the stored plan does not match its plan_sha256; the product was changed "
                        "after it was written")
    write_plan(out, text, overwrite=overwrite)
    echo_summary(f"wrote the plan of {product} (sha256 {digest[:16]}) to {out}")
