"""The inputs of ``unmix fractions`` and ``unmix endmembers extract``: paths, globs, delivered archives.

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

__all__ = ["archive_options", "expand_paths", "find_archive", "open_archive_input"]


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
