"""The inputs of ``unmix fractions``, ``unmix survey`` and ``unmix endmembers extract``: paths, globs, delivered archives.

STACK may be one folder, a NetCDF cube, several GeoTIFF files, a glob (quoted, e.g. ``'stack/*.tif'``), or
a folder / tar file / STAC file of delivered Level-2 products (Landsat Collection 2, Sentinel-2 L2A),
found at any depth. For delivered products everything (sensor, bands, scaling, masks) comes from the
products; the options here only choose the band roles, the target grid and the masks.
"""

from __future__ import annotations

import glob
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import click

from ..errors import InputError, StackReadError
from ..io.stack import Resampling
from ..sensors.roles import DEFAULT_ROLES
from .sensors import RESPONSE_HELP, sensor_from_options

__all__ = ["archive_options", "check_input_options", "expand_paths", "find_archive", "open_archive_input", "open_input",
           "stack_options"]


def _stack_option_list() -> list:
    return [
        click.option("--sensor", default=None, metavar="ID",
                     help="Sensor of the stack, e.g. landsat-8-oli or sentinel-2a-msi (`unmix sensors` lists them)."),
        click.option("--response", "response", default=None, type=click.Path(dir_okay=False, path_type=Path),
                     metavar="FILE", help=RESPONSE_HELP),
        click.option("--band-names", "band_names", default=None, metavar="B2,B3,...",
                     help="Sensor band names of the files' bands, in file order. Default: the band descriptions of the "
                          "files if every band has one, else all bands of the sensor."),
        click.option("--align", is_flag=True, default=False,
                     help="Warp dates on another grid (CRS, pixel grid or size) onto the first date's grid instead "
                          "of stopping. A NetCDF cube has one grid: nothing to warp."),
        click.option("--resampling", type=click.Choice([r.value for r in Resampling]),
                     default="nearest", show_default=True, help="Resampling used by --align."),
        click.option("--dates", "dates", type=click.Path(path_type=Path), default=None, metavar="CSV",
                     help="CSV with columns file,date (YYYY-MM-DD). Default: dates read from the file names "
                          "(YYYY-MM-DD, YYYYMMDD or YYYYDDD). Not for a NetCDF cube, whose time coordinate gives them."),
        click.option("--scale", type=float, default=None,
                     help="Reflectance = stored value x SCALE + OFFSET (e.g. 0.0001 for int16 reflectance). "
                          "Default: the files' own scale, else 1."),
        click.option("--offset", type=float, default=None, help="See --scale. Default: the files' own offset, else 0."),
        click.option("--qa", "qa", default=None, metavar="BAND|PATH",
                     help="Quality mask: a band of the files (number from 1, or its description) or a folder of "
                          "per-date mask files with the date in their names; for a NetCDF cube, a band name or a "
                          "(time, y, x) variable."),
        click.option("--qa-bits", "qa_bits", default=None, metavar="1,3,...",
                     help="QA bit positions (0 = least significant) that mark a pixel invalid. Default with --qa: "
                          "any non-zero QA value."),
        click.option("--chunk-size", "chunk_size", type=click.IntRange(min=16), default=None, metavar="N",
                     help="Chunk edge [pixels], rounded up to whole file tiles. Default: about 1024, following the "
                          "files' tiles. Memory grows with its square."),
    ]


def stack_options(func):
    """Options for a plain stack (one file per date, a NetCDF cube): sensor, bands, dates, scaling, quality."""
    for option in reversed(_stack_option_list()):
        func = option(func)
    return func


def _int_list(text: str | None, what: str) -> tuple[int, ...]:
    if not text:
        return ()
    try:
        return tuple(int(t) for t in text.split(",") if t.strip())
    except ValueError:
        raise InputError(f"{what} must be comma-separated whole numbers (bit positions), got {text!r}") from None



def archive_options(func):
    """Options for archives of delivered products (band roles, target grid, quality masks)."""
    options = [
        click.option("--roles", "roles", default=None, metavar="blue,green,...",
                     help="Band roles to unmix a record of delivered products on (default: blue, green, red, nir, "
                         "swir1, swir2, the bands every built-in sensor has). Each date reads its own sensor's bands."),
        click.option("--grid", "grid_file", type=click.Path(dir_okay=False, path_type=Path), default=None,
                     metavar="FILE", help="Target grid of delivered products: a raster whose CRS, transform and shape "
                                        "are used. Default: the grid of the first scene."),
        click.option("--crs", "grid_crs", default=None, metavar="CRS",
                     help="Target grid CRS (e.g. EPSG:32633), with --resolution and --bounds."),
        click.option("--resolution", "grid_res", type=float, default=None, metavar="M",
                     help="Target pixel size in the units of --crs (metres for a projected CRS)."),
        click.option("--bounds", "grid_bounds", default=None, metavar="L,B,R,T",
                     help="Target grid extent left,bottom,right,top in the units of --crs."),
        click.option("--mask", "mask", default=None, metavar="NAME,...",
                     help="Quality flags / classes that mark no data. Landsat QA_PIXEL: fill, dilated_cloud, cirrus, "
                         "cloud, cloud_shadow, snow, clear, water (default all but clear and water); Sentinel-2 SCL: "
                         "no_data, defective, cast_shadow, cloud_shadow, vegetation, not_vegetated, water, "
                         "unclassified, cloud_medium, cloud_high, thin_cirrus, snow (default no_data, defective, "
                         "cloud_shadow, cloud_medium, cloud_high, thin_cirrus, snow). Names of both kinds may be mixed."),
        click.option("--mask-share", "mask_share", type=click.FloatRange(0, 1, max_open=True), default=0.0,
                     show_default=True, help="A target pixel is masked when masked quality pixels cover more than "
                                           "this share of it (0 = any)."),
        click.option("--band-adjustment", "band_adjustment", is_flag=True, default=False,
                     help="Adjust ETM+ and MSI dates to Landsat 8 OLI with published coefficients (Roy et al. 2016; "
                         "Claverie et al. 2018) and unmix them with the OLI endmembers, instead of unmixing each date "
                         "with its own sensor's endmembers (the default)."),
    ]
    for option in reversed(options):
        func = option(func)
    return func


def expand_paths(stack: Sequence[str]) -> list[Path]:
    """STACK arguments as paths: globs expanded (sorted); a glob matching nothing is an error."""
    out: list[Path] = []
    for text in stack:
        if any(c in text for c in "*?[") and not Path(text).exists():
            hits = sorted(glob.glob(text, recursive=True))
            if not hits:
                raise StackReadError(f"the pattern {text!r} matches no file; check the folder and the pattern")
            out += [Path(h) for h in hits]
        else:
            out.append(Path(text))
    if not out:
        raise InputError("give the stack: a folder, a NetCDF cube, GeoTIFF files, or a folder of delivered products")
    return out


def find_archive(paths: Sequence[Path], roles: Sequence[str]) -> list:
    """The delivered Level-2 scenes under ``paths`` (empty when they hold none: a plain stack)."""
    from ..io.archive import find_scenes
    from ..io.archive.stac import is_stac

    scenes: list = []
    for p in paths:
        if p.is_dir() or p.suffix.lower() in (".tar", ".gz", ".tgz") or is_stac(p):
            scenes += find_scenes(p, roles=roles)
    return sorted(scenes, key=lambda s: (s.date, s.product_id))


def open_archive_input(scenes: list, *, roles: Sequence[str], grid_file: Path | None, grid_crs: str | None,
                      grid_res: float | None, grid_bounds: str | None, mask: str | None, mask_share: float,
                      chunk_size: int | None, band_adjustment: bool) -> Any:
    """The lazy cube of delivered scenes, on the chosen grid, with the chosen masks (and adjustments)."""
    from ..io.archive import grid_from_bounds, grid_from_raster, open_archive
    from ..io.archive.quality import LANDSAT_QA_BITS, SCL_CLASSES

    grid = None
    if grid_file is not None:
        if grid_crs or grid_res or grid_bounds:
            raise InputError("give either --grid FILE or --crs/--resolution/--bounds, not both")
        grid = grid_from_raster(grid_file)
    elif grid_crs or grid_res or grid_bounds:
        if not (grid_crs and grid_res and grid_bounds):
            raise InputError("--crs, --resolution and --bounds go together (or use --grid FILE)")
        try:
            bounds = tuple(float(v) for v in grid_bounds.split(","))
        except ValueError:
            raise InputError(f"--bounds must be four numbers left,bottom,right,top, got {grid_bounds!r}") from None
        if len(bounds) != 4:
            raise InputError(f"--bounds must be four numbers left,bottom,right,top, got {grid_bounds!r}")
        grid = grid_from_bounds(grid_crs, grid_res, bounds)
    masks = None
    if mask is not None:
        names = [n.strip() for n in mask.split(",") if n.strip()]
        unknown = [n for n in names if n not in LANDSAT_QA_BITS and n not in SCL_CLASSES]
        if unknown:
            raise InputError(f"--mask: unknown name(s) {', '.join(unknown)}; Landsat QA_PIXEL flags: "
                           f"{', '.join(LANDSAT_QA_BITS)}; Sentinel-2 SCL classes: {', '.join(SCL_CLASSES)}")
        masks = {"landsat-qa-pixel": [n for n in names if n in LANDSAT_QA_BITS],
                 "sentinel-2-scl": [n for n in names if n in SCL_CLASSES]}
    cube = open_archive(scenes, roles=roles, grid=grid, masks=masks, mask_share=mask_share, chunks=chunk_size)
    if band_adjustment:
        from ..cube.harmonise import adjust_to_oli

        cube = adjust_to_oli(cube)
    return cube


_PLAIN = (("--sensor", "sensor"), ("--response", "response"), ("--band-names", "band_names"), ("--dates", "dates"),
          ("--scale", "scale"), ("--offset", "offset"), ("--qa", "qa"), ("--align", "align"))
_ARCHIVE = (("--roles", "roles"), ("--grid", "grid_file"), ("--crs", "grid_crs"), ("--resolution", "grid_res"),
            ("--bounds", "grid_bounds"), ("--mask", "mask"), ("--mask-share", "mask_share"),
            ("--band-adjustment", "band_adjustment"))


def check_input_options(params: dict) -> None:
    """Errors in the input options that need no file (checked before anything is read)."""
    _int_list(params.get("qa_bits"), "--qa-bits")
    if params.get("qa_bits") and params.get("qa") is None:
        raise InputError("--qa-bits needs --qa (the QA band or the folder of mask files)")


def open_input(paths: Sequence[Path], params: dict) -> tuple[Any, Any, list[str]]:
    """The lazy reflectance cube of STACK from a command's parsed options.

    Returns ``(cube, sensor, bands)``: for delivered products ``sensor`` is None (each date has its own,
    in the cube's ``sensor`` coordinate) and ``bands`` are the band roles; for a plain stack ``sensor``
    is the :class:`unmix.sensors.Sensor` and ``bands`` the stack's band names.
    """
    from ._common import split_names

    check_input_options(params)
    roles = split_names(params.get("roles"), "--roles") or list(DEFAULT_ROLES)
    scenes = find_archive(paths, roles)
    if scenes:
        given = [flag for flag, key in _PLAIN if params.get(key)]
        if given:
            raise InputError(f"{', '.join(given)}: not needed for delivered products (sensor, bands, dates, scaling and "
                           "quality come from the products); drop them, or use --roles / --mask / --grid")
        cube = open_archive_input(scenes, roles=roles, grid_file=params.get("grid_file"), grid_crs=params.get("grid_crs"),
                                grid_res=params.get("grid_res"), grid_bounds=params.get("grid_bounds"),
                                mask=params.get("mask"), mask_share=params.get("mask_share") or 0.0,
                                chunk_size=params.get("chunk_size"), band_adjustment=bool(params.get("band_adjustment")))
        return cube, None, roles
    extra = [flag for flag, key in _ARCHIVE if params.get(key)]
    if extra:
        raise InputError(f"{', '.join(extra)}: only for delivered Level-2 products (Landsat Collection 2, "
                        f"Sentinel-2 L2A), and none was found in {', '.join(map(str, paths))}")
    from ..io.stack import open_stack

    sensor = sensor_from_options(params.get("sensor"), params.get("response"))
    qa = params.get("qa")
    qa_arg: Any = qa
    if qa is not None and qa.strip().isdigit() and not Path(qa).exists():
        qa_arg = int(qa)
    cube = open_stack(
        paths[0] if len(paths) == 1 else paths, sensor=sensor, band_names=split_names(params.get("band_names"), "--band-names"),
        dates=params.get("dates"), scale=params.get("scale"), offset=params.get("offset"), qa=qa_arg,
        qa_bits=_int_list(params.get("qa_bits"), "--qa-bits"), align=bool(params.get("align")),
        resampling=params.get("resampling") or "nearest", chunks=params.get("chunk_size"),
    )
    return cube, sensor, [str(b) for b in cube["band"].values]
