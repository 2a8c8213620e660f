"""``unmix demo``: the whole job on an invented scene with known truth."""

from __future__ import annotations

from pathlib import Path

import click

from ._common import echo_summary, overwrite_option


@click.command("demo")
@click.option("--out", "out", type=click.Path(file_okay=False, path_type=Path), default="demo-output",
              show_default=True, help="Folder for the invented stack, the products and the report.")
@click.option("--size", type=click.IntRange(min=32, max=2000), default=160, show_default=True,
              help="Pixels per side of the invented scene (30 m pixels).")
@click.option("--dates", "n_time", type=click.IntRange(min=10, max=400), default=40, show_default=True,
              help="Number of dates over the ten invented years.")
@click.option("--seed", type=int, default=7, show_default=True, help="Seed of the scene's random parts.")
@overwrite_option
def demo(out: Path, size: int, n_time: int, seed: int, overwrite: bool) -> None:
    """Run the whole job on the invented 'Marrow Creek' rangeland and score it against the truth.

    Writes a GeoTIFF stack of an invented dryland scene (grazing around a water point, a creeping
    sand sheet, a cleared centre-pivot field, a recovering paddock), runs `unmix fractions` and
    `unmix trends` on it, prints recovered against true fractions and trajectories, and writes an
    HTML report. Everything in the scene is made up; no place or measurement is real.
    """
    from ..demo.run import run_demo, summary_text
    from ..io.products.claim import probe_folder

    probe_folder(out)  # an unwritable --out stops here, before the scene is invented
    result = run_demo(out, size=size, n_time=n_time, seed=seed, overwrite=overwrite, echo=click.echo)
    click.echo(summary_text(result))
    echo_summary("Caution: fractions and trends are model estimates; validate them in the field and "
                 "defer to local regulations and licensed practice before acting on them.")
