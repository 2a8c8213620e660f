"""``unmix sensors``: list the built-in sensors, or the bands of one sensor; the --sensor/--response choice."""

from __future__ import annotations

from pathlib import Path

import click

from ..errors import InputError
from ..sensors import Sensor, get_sensor, list_sensors
from ._common import echo_summary

__all__ = ["sensors", "sensor_from_options", "RESPONSE_HELP"]

RESPONSE_HELP = ("Instead of --sensor: a CSV of tabulated band responses, first column wavelength_nm, then one "
                 "column per band under its band name, relative response 0..1 (the layout of the built-in "
                 "tables in unmix/data). The sensor's id is the file name without .csv.")


def sensor_from_options(sensor_id: str | None, response_file: Path | None) -> Sensor:
    """The sensor of ``--sensor ID`` (built-in) or ``--response FILE`` (tabulated); exactly one is given."""
    if (sensor_id is None) == (response_file is None):
        raise InputError("give exactly one of --sensor ID (a built-in sensor, see `unmix sensors`) or "
                         "--response FILE (a CSV of tabulated band responses)")
    if response_file is not None:
        from ..io.library import read_response_sensor

        return read_response_sensor(response_file)
    return get_sensor(sensor_id)


@click.command("sensors")
@click.argument("sensor_id", required=False, metavar="[ID]")
def sensors(sensor_id: str | None) -> None:
    """List the built-in sensors; with an ID, list that sensor's bands.

    Every built-in band uses the agency's measured relative spectral response (USGS for TM and
    ETM+, NASA for OLI and OLI-2, ESA for MSI), shipped with unmix. For each band: name as the
    agency writes it, centre [nm] (response-weighted mean wavelength), the wavelengths [nm] where
    the response crosses half its maximum (outermost crossings) and the full width between them.
    The document the responses come from is printed below the table. The Landsat entries hold the
    reflective bands only (no thermal, no panchromatic).

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
    click.echo(f"{'band':<5} {'centre_nm':>10} {'half_max_lo':>11} {'half_max_hi':>11} {'fwhm_nm':>8}  response")
    for b in s.bands:
        kind = "tabulated" if b.tabulated else "gaussian"
        lo, hi = b.half_maximum_nm()
        click.echo(f"{b.name:<5} {b.centre_nm:>10.2f} {lo:>11.2f} {hi:>11.2f} {b.fwhm_nm:>8.2f}  {kind}")
    if s.red and s.nir:
        click.echo(f"NDVI bands: red {s.red}, NIR {s.nir}")
    click.echo(f"source: {s.source}")
    echo_summary(f"{len(s.bands)} bands")
