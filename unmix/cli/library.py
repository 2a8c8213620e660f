"""``unmix library``: inspect a spectral library and resample it to sensor bands."""

from __future__ import annotations

import textwrap
from pathlib import Path

import click
import numpy as np

from ..errors import InputError
from ..io.library import read_library, sidecar_path, write_library
from ..sensors import get_sensor
from ..spectra import ndvi, resample
from ._common import SENSOR_HELP, check_can_write, echo_summary, overwrite_option, split_names
from .sensors import RESPONSE_HELP, sensor_from_options

__all__ = ["library"]


@click.group("library")
def library() -> None:
    """Inspect spectral libraries and resample them to sensor bands.

    A library is a CSV: first column wavelength_nm (or wavelength_um), one column per spectrum,
    reflectance 0..1, with an optional JSON sidecar of the same name (class labels, source,
    scale_factor, add_offset). A resampled library adds a `band` column after the wavelength.
    """


@library.command("show")
@click.argument("file", type=click.Path(path_type=Path))
@click.option("--sensor", "sensor_id", default=None, metavar="ID",
              help="Sensor for NDVI of a full-resolution library (resampled on the fly). " + SENSOR_HELP)
@click.option("--red", default=None, metavar="BAND", help="Red band name for NDVI (default: the sensor's).")
@click.option("--nir", default=None, metavar="BAND", help="Near-infrared band name for NDVI (default: the sensor's).")
def show(file: Path, sensor_id: str | None, red: str | None, nir: str | None) -> None:
    """Summarise a library FILE: spectra, classes, wavelengths or bands, metadata, NDVI.

    NDVI = (NIR - red) / (NIR + red) is printed when the red and NIR bands are known: a resampled
    library brings its sensor (defaults TM/ETM+ B3/B4, OLI B4/B5, MSI B4/B8); for a full-resolution
    library give --sensor.
    """
    lib = read_library(file)
    md = lib.metadata
    click.echo(f"library: {file}")
    if lib.resampled:
        click.echo(
            f"bands: {len(lib.band_names)} of {lib.sensor or 'an unnamed sensor'}: {', '.join(lib.band_names)} "
            f"(centres {lib.wavelengths.min():.0f}-{lib.wavelengths.max():.0f} nm)"
        )
    else:
        step = np.diff(lib.wavelengths)
        stxt = f"every {step[0]:g} nm" if step.size and np.allclose(step, step[0]) else f"{lib.wavelengths.size} wavelengths"
        click.echo(f"wavelengths: {lib.wavelengths[0]:g}-{lib.wavelengths[-1]:g} nm, {stxt}")
    for key in ("source", "invented"):
        if key in md:
            click.echo(f"{key}: {md[key]}")
    if md.get("description"):
        click.echo(textwrap.fill(f"description: {md['description']}", width=100, subsequent_indent="  "))

    values = None
    note = ""
    sensor = sensor_id or lib.sensor
    try:
        if lib.resampled or sensor is not None:
            values = ndvi(lib, red=red, nir=nir, sensor=sensor)
            s = get_sensor(sensor) if sensor else None
            note = f" (red {red or (s.red if s else '?')}, NIR {nir or (s.nir if s else '?')}" + (
                f", {s.id})" if s else ")"
            )
    except InputError as exc:  # NDVI is a convenience here: say why it is missing, do not fail
        note = f" not computed: {exc}"
        values = None
    if values is None and not note:
        note = " not computed: give --sensor ID to resample for NDVI"

    w = max(len(n) for n in lib.names)
    wc = max([5] + [len(c or "-") for c in lib.classes])
    head = f"{'spectrum':<{w}}  {'class':<{wc}}"
    if values is not None:
        head += "   NDVI"
    click.echo(head)
    for i, (n, c) in enumerate(zip(lib.names, lib.classes)):
        line = f"{n:<{w}}  {c or '-':<{wc}}"
        if values is not None:
            line += f"  {values[i]:6.3f}" if np.isfinite(values[i]) else "     nan"
        click.echo(line)
    click.echo(f"NDVI{note}")
    classes = sorted({c for c in lib.classes if c is not None})
    echo_summary(f"{len(lib)} spectra in {len(classes)} classes")


@library.command("resample")
@click.argument("file", type=click.Path(path_type=Path))
@click.option("--sensor", "sensor_id", default=None, metavar="ID", help=SENSOR_HELP)
@click.option("--response", "response_file", default=None, type=click.Path(path_type=Path),
              help=RESPONSE_HELP)
@click.option("--band-names", default=None, metavar="B2,B3,...",
              help="Bands to produce, comma-separated, in this order. Default: all bands of the sensor.")
@click.option("--out", "out", required=True, type=click.Path(dir_okay=False, path_type=Path),
              help="Library CSV to write (a .json sidecar is written beside it).")
@overwrite_option
def resample_cmd(file: Path, sensor_id: str | None, response_file: Path | None, band_names: str | None,
                 out: Path, overwrite: bool) -> None:
    """Resample a full-resolution library FILE to the bands of a sensor.

    Each band value is the response-weighted mean of the spectrum (trapezoidal integral of response
    x reflectance over the integral of the response, on the response table's own wavelengths, plus
    the library's where the library is finer). A band reaching more
    than 1 % of its response outside the library's wavelength range is refused. Writes a library
    CSV + JSON sidecar atomically; an existing output is kept unless --overwrite is given.

    \b
    Example:
      unmix library resample lib.csv --sensor landsat-8-oli --band-names B2,B3,B4,B5,B6,B7 --out lib_oli.csv
    """
    if out.suffix.lower() != ".csv":
        raise InputError(f"--out {out}: the output library must end in .csv")
    check_can_write(out, overwrite)
    check_can_write(sidecar_path(out), overwrite)
    sensor = sensor_from_options(sensor_id, response_file)
    lib = read_library(file)
    res = resample(lib, sensor, split_names(band_names))
    res = res.with_metadata(resampled_from=str(file),
                            **({"response_file": str(response_file)} if response_file is not None else {}))
    write_library(res, out, overwrite=overwrite)
    echo_summary(f"wrote {out}: {len(res)} spectra x {len(res.band_names)} bands of {sensor.id} "
                 f"({', '.join(res.band_names)})")
