"""``unmix sensors``: list the built-in sensors, or the bands of one sensor."""

from __future__ import annotations

import click

from ..sensors import get_sensor, list_sensors
from ._common import echo_summary

__all__ = ["sensors"]


@click.command("sensors")
@click.argument("sensor_id", required=False, metavar="[ID]")
def sensors(sensor_id: str | None) -> None:
    """List the built-in sensors; with an ID, list that sensor's bands.

    For each band: name as the agency writes it, centre wavelength [nm], full width at half maximum
    [nm] of the response used for resampling, and the response model. The published source of the
    values is printed below the table. The Landsat entries hold the reflective bands only (no
    thermal, no panchromatic).

    \b
    Examples:
      unmix sensors
      unmix sensors sentinel-2a-msi
    """
    if sensor_id is None:
        ids = list_sensors()
        width = max(len(i) for i in ids)
        for i in ids:
            s = get_sensor(i)
            click.echo(f"{i:<{width}}  {s.title}  [{', '.join(s.band_names)}]")
        echo_summary(f"{len(ids)} sensors; `unmix sensors ID` lists the bands of one")
        return
    s = get_sensor(sensor_id)
    click.echo(f"{s.id}: {s.title}")
    click.echo(f"{'band':<5} {'centre_nm':>10} {'fwhm_nm':>8}  response")
    for b in s.bands:
        kind = "tabulated" if b.tabulated else "gaussian"
        click.echo(f"{b.name:<5} {b.centre_nm:>10.1f} {b.fwhm_nm:>8.1f}  {kind}")
    if s.red and s.nir:
        click.echo(f"NDVI bands: red {s.red}, NIR {s.nir}")
    click.echo(f"source: {s.source}")
    echo_summary(f"{len(s.bands)} bands")
