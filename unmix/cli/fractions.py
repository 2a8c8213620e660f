"""``unmix fractions``: endmember fractions of every pixel and date of an image stack.

Reads the stack lazily, unmixes it chunk by chunk with the library's endmembers (resampled to the
stack's bands) and writes ``OUT/fractions.nc`` (CF-NetCDF: ``fractions``, ``rmse``, ``valid_count``),
optionally with one Cloud-Optimized GeoTIFF per endmember.
"""

from __future__ import annotations

import dataclasses
import json
import shlex
import time
from pathlib import Path
from typing import Any

import click
import numpy as np

from ..errors import InputError
from ..sensors.roles import bands_for_roles
from ..solvers import Constraint
from ..spectra import on_bands
from ._common import claim_products, echo_summary, out_dir_option, overwrite_option, split_names, writes_products
from ._comparability import comparability_options, measuring_params, run_date_checks, settings_from
from ._inputs import _int_list, archive_options, check_input_options, expand_paths, open_input, stack_options
from ._scheduler import dask_scheduler, scheduler_options

__all__ = ["fractions", "mesma_bundles"]


def _valid_range(text: str) -> tuple[float, float] | None:
    """``--valid-range``: 'LOW,HIGH' in reflectance, or 'none'."""
    from ..cube.plausible import check_valid_range

    if text.strip().lower() == "none":
        return None
    parts = [t.strip() for t in text.split(",")]
    try:
        values = [float(t) for t in parts]
    except ValueError:
        raise InputError(f"--valid-range must be LOW,HIGH in reflectance (e.g. -0.5,2) or none, got {text!r}") from None
    if len(values) != 2:
        raise InputError(f"--valid-range must be two numbers LOW,HIGH (e.g. -0.5,2), got {text!r}")
    return check_valid_range(values)


def warn_implausible(dates: Any, counts: Any, valid_range: tuple[float, float] | None) -> None:
    """One warning naming every date with pixels masked for implausible reflectance, and the counts."""
    import warnings

    from ..errors import ImplausibleReflectanceWarning

    if counts is None or valid_range is None:
        return
    counts = np.asarray(counts)
    hit = np.flatnonzero(counts > 0)
    if not hit.size:
        return
    listed = ", ".join(f"{str(dates[i])[:10]}: {int(counts[i]):,} pixels" for i in hit)
    warnings.warn(ImplausibleReflectanceWarning(
        f"reflectance outside {valid_range[0]:g}..{valid_range[1]:g} masked as no data on {hit.size} "
        f"date(s) ({listed}); check the fill value and scale of those files (--valid-range sets the range)"),
        stacklevel=2)


def mesma_bundles(library: Any, M: np.ndarray) -> tuple[dict[str, np.ndarray], np.ndarray | None, dict[str, list[str]]]:
    """Bundles for MESMA from a library's class labels (a spectrum without a label is its own class).

    Returns the bundles (class -> (members, band) spectra in the stack's band order), the shade
    spectrum (the first spectrum of class ``shade``; None when the library has none) and the member
    names of each class.
    """
    groups: dict[str, list[int]] = {}
    for i, (cls, name) in enumerate(zip(library.classes, library.names)):
        groups.setdefault(cls or name, []).append(i)
    shade_rows = groups.pop("shade", None)
    if not groups:
        raise InputError("--mesma needs at least one class besides shade; label the library's spectra with "
                         "classes in its JSON sidecar")
    bundles = {cls: M[rows] for cls, rows in groups.items()}
    members = {cls: [library.names[i] for i in rows] for cls, rows in groups.items()}
    return bundles, (M[shade_rows[0]] if shade_rows else None), members


def _command_line(ctx: click.Context) -> str:
    """The command as an analyst would retype it (from the parsed options, defaults left out)."""
    stack = ctx.params["stack"]
    parts = ["unmix", ctx.info_name or "fractions", *([stack] if isinstance(stack, str) else map(str, stack))]
    for param in ctx.command.params:
        if param.name == "stack":
            continue
        value = ctx.params.get(param.name)
        if value is None or value is False or value == param.default:
            continue
        flag = max(param.opts, key=len)
        parts.append(flag if value is True else f"{flag} {value}")
    return " ".join(shlex.quote(p) if " " in p and not p.startswith("--") else p for p in parts)


@click.command("fractions")
@click.argument("stack", nargs=-1, required=True, metavar="STACK...")
@click.option("--library", "library", required=True, type=click.Path(path_type=Path),
              help="Spectral library CSV holding the endmember spectra (full resolution, or already resampled "
                   "to the sensor's bands).")
@click.option("--endmembers", "endmember_names", default=None, metavar="NAME,...",
              help="Library spectra to use as endmembers, comma-separated. Default: all spectra.")
@click.option("--constraint", type=click.Choice([c.value for c in Constraint]), default=Constraint.FCLS.value,
              show_default=True,
              help="Constraint on the fractions: fcls = non-negative and summing to one.")
@out_dir_option(".")
@overwrite_option
@click.option("--valid-range", "valid_range", default="-0.5,2", show_default=True, metavar="LOW,HIGH",
              help="Plausible reflectance after scaling: a pixel with any band outside it is no data on that date "
                   "and counted (an undeclared fill value such as 1e30, or a wrong scale). 'none' turns it off.")
@click.option("--mesma", is_flag=True, default=False,
              help="Multiple endmember unmixing: the library's class labels make bundles (a class named 'shade' "
                   "is the photometric shade); each pixel and date picks at most one member per class, the "
                   "simplest model within --misfit-limit and fractions -0.05..1.05 (Roberts et al. 1998). Also "
                   "writes `members` (chosen member per class) and `unmodelled`. --constraint: fcls or sum-to-one.")
@click.option("--misfit-limit", "max_rmse", type=click.FloatRange(min=0, min_open=True), default=0.025,
              show_default=True, help="With --mesma: largest model RMSE accepted [reflectance].")
@click.option("--cog", is_flag=True, default=False,
              help="Also write OUT/fractions_<endmember>.tif, Cloud-Optimized GeoTIFFs with one band per date.")
@click.option("--compress-level", "compress_level", type=click.IntRange(0, 9), default=1, show_default=True,
              help="zlib level of the NetCDF product; 0 = uncompressed (fastest, largest).")
@scheduler_options
@stack_options
@archive_options
@comparability_options
@click.pass_context
@writes_products
def fractions(ctx: click.Context, stack: tuple[str, ...], library: Path, sensor: str | None, response: Path | None,
              band_names: str | None,
              endmember_names: str | None, constraint: str, out: Path, overwrite: bool, align: bool,
              resampling: str, dates: Path | None, scale: float | None, offset: float | None, qa: str | None,
              qa_bits: str | None, valid_range: str, mesma: bool, max_rmse: float, cog: bool, compress_level: int, workers: int | None,
              scheduler: str | None, chunk_size: int | None, roles: str | None, grid_file: Path | None,
              grid_crs: str | None, grid_res: float | None, grid_bounds: str | None, mask: str | None,
              mask_share: float, band_adjustment: bool, **checks: Any) -> None:
    """Fractions of every endmember in every pixel and date of STACK.

    STACK is a folder of delivered Level-2 products (Landsat Collection 2 scene folders or tar
    files, Sentinel-2 L2A SAFE folders, at any depth) or a STAC file pointing at them; or a folder
    of GeoTIFFs (one per date, all bands of that date), GeoTIFF files or a quoted glob, or a
    NetCDF cube (time, band, y, x). For delivered products sensor, bands, scaling and quality masks
    come from the products, and a record that switches sensor is unmixed date by date with the
    endmembers resampled to each date's sensor. Writes OUT/fractions.nc with `fractions` (time, endmember, y, x),
    `rmse` (time, y, x; model misfit in reflectance) and `valid_count` (dates with a valid
    fraction per pixel). Fractions are model estimates: check them against field data.
    """
    started = time.perf_counter()
    out = Path(out)
    nc_path = out / "fractions.nc"
    # claimed before any input is read: a busy, existing or unwritable product stops the run here
    ledger_path = out / "dates.csv"
    products = claim_products([nc_path, ledger_path], overwrite, command=_command_line(ctx))
    check_settings = settings_from(checks)

    from ..cube.fractions import unmix_cube
    from ..io.library import read_library
    from ..io.products import open_product, provenance_attrs, write_cog, write_netcdf

    paths = expand_paths(stack)
    wanted = split_names(endmember_names, "--endmembers")
    vrange = _valid_range(valid_range)
    check_input_options(ctx.params)

    lib = read_library(library)
    if wanted is not None:
        lib = lib.select(wanted)
    if mesma and constraint not in (Constraint.FCLS.value, Constraint.SUM_TO_ONE.value):
        raise InputError(f"--mesma solves each model under fcls or sum-to-one, not {constraint}; "
                         "choose --constraint fcls or --constraint sum-to-one")
    classes = list(dict.fromkeys(c or n for c, n in zip(lib.classes, lib.names)))
    names = ([c for c in classes if c != "shade"] + ["shade"] * ("shade" in classes)) if mesma else list(lib.names)
    cog_paths = [out / f"fractions_{n}.tif" for n in names] if cog else []
    products.claim_more(cog_paths)

    cube, sensor_obj, stack_bands = open_input(paths, ctx.params)
    scenes = sensor_obj is None
    if scenes:
        sensor_ids = list(dict.fromkeys(str(v) for v in cube["sensor"].values))
        by_sensor = {s: np.asarray(on_bands(lib, s, bands_for_roles(s, stack_bands), where=f"library {library}").spectra)
                     for s in sensor_ids}
        M: Any = by_sensor if len(sensor_ids) > 1 else by_sensor[sensor_ids[0]]
        sensor_label = ", ".join(sensor_ids)
    else:
        M = np.asarray(on_bands(lib, sensor_obj, stack_bands, where=f"library {library}").spectra)
        sensor_label = sensor_obj.id
    # the measuring blocks read the stack opened again in chunks of one file tile: in the larger chunks
    # unmixing runs on, each block would decode every tile of its chunk
    measuring = measuring_params(ctx.params, check_settings)
    measure_on = open_input(paths, measuring)[0] if measuring is not None else None
    cube, ledger, verdicts = run_date_checks(cube, dataclasses.replace(check_settings, valid_range=vrange),
                                             measure_on=measure_on)
    if mesma and isinstance(M, dict):
        raise InputError(f"--mesma on a record that switches sensor ({sensor_label}) is not available; run it on "
                         "each sensor's dates separately, or leave --mesma out")
    if mesma:
        from ..cube.mesma import mesma_cube

        bundles, shade, members = mesma_bundles(lib, M)
        ds = mesma_cube(cube, bundles, shade=shade, constraint=constraint, max_rmse=max_rmse, valid_range=vrange)
        ds["members"].attrs["member_names"] = json.dumps(members)
        valid = np.isfinite(ds["fractions"].isel(endmember=0)).sum("time").astype(np.int32)
        ds["valid_count"] = valid.assign_attrs(long_name="dates with a valid fraction", units="1")
    else:
        ds = unmix_cube(cube, M, names=names, constraint=constraint, valid_range=vrange)

    command = _command_line(ctx)
    parameters = {
        "sensor": sensor_label, "bands": stack_bands, "endmembers": names, "constraint": constraint,
        "library": str(library), "scale": scale, "offset": offset, "qa": qa, "qa_bits": list(_int_list(qa_bits, "--qa-bits")),
        "align": align, "resampling": resampling if align else None, "dates": str(dates) if dates else None,
        "chunk_size": chunk_size, "valid_range": list(vrange) if vrange else None, "mesma": mesma, "max_rmse": max_rmse if mesma else None,
        "library_spectra": list(lib.names),
    }
    if scenes:
        parameters.update(products=[str(v) for v in cube["product"].values], roles=stack_bands,
                          masks=cube.attrs.get("masks"), mask_share=mask_share,
                          band_adjustments=cube.attrs.get("band_adjustments") if band_adjustment else None)
    input_files = list(cube.attrs.get("input_files", ())) + [str(library)]
    from ..io.ledger import ledger_variables, write_ledger_csv

    ds = ds.merge(ledger_variables(ledger, dim="ledger_time"))
    parameters["date_checks"] = {k: (v.describe() if hasattr(v, "describe") else v)
                                 for k, v in vars(check_settings).items()}

    from ..cube.summary import finite_mean

    stats: dict[str, Any] = {}
    with dask_scheduler(workers=workers, scheduler=scheduler) as run:

        def compute(delayed: Any) -> None:
            # the summary rides along with the write: one pass over each chunk, no second read
            _, mean_rmse, valid, implausible = run.compute(delayed, finite_mean(ds["rmse"]),
                                                           ds["valid_count"].data.sum(),
                                                           ds["implausible_count"].data)
            stats.update(mean_rmse=float(mean_rmse), valid=int(valid), implausible=np.asarray(implausible))

        write_netcdf(ds, nc_path, overwrite=overwrite, command=command, parameters=parameters,
                     input_files=input_files, title="unmix endmember fractions", complevel=compress_level,
                     compute=compute, products=products)
        mode = run.describe()

    if cog_paths:
        product = open_product(products.staged(nc_path))
        tags = provenance_attrs(command=command, parameters=parameters, input_files=input_files,
                                endmember_names=names, title="unmix endmember fraction")
        for name, path in zip(names, cog_paths):
            da_ = product["fractions"].sel(endmember=name)
            da_.attrs.update(long_name=f"fraction of {name}")
            write_cog(da_, path, overwrite=overwrite, tags={**tags, "endmember": name}, products=products)
        product.close()
    write_ledger_csv(ledger, ledger_path, overwrite=overwrite, products=products)
    products.commit()  # fractions.nc, the ledger and the COGs appear together, or none of them

    warn_implausible(cube["time"].values, stats.get("implausible"), vrange)
    for line in verdicts:
        echo_summary(f"  {line}")
    used = int(ledger["used"].values.sum())
    n_t, n_y, n_x = cube.sizes["time"], cube.sizes["y"], cube.sizes["x"]
    pixels = n_y * n_x
    mean_rmse = stats.get("mean_rmse", float("nan"))
    share = stats["valid"] / (pixels * n_t) if pixels * n_t else float("nan")
    extra = f" (+{len(cog_paths)} COG)" if cog_paths else ""
    echo_summary(
        f"fractions: {pixels} pixels x {n_t} dates x {len(names)} endmembers ({'MESMA, ' if mesma else ''}{constraint}); "
        f"mean rmse {mean_rmse:.4f}; valid {100 * share:.1f} % of pixel-dates; {used} of {ledger.sizes['time']} dates used "
        f"(ledger {ledger_path.name}); "
        f"-> {nc_path}{extra}; {time.perf_counter() - started:.1f} s on {mode}"
    )
