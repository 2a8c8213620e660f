"""Plans on disk: the plan a product was made with, read back from it; a plan text written to a file."""

from __future__ import annotations

import json
import os
from pathlib import Path

from ...errors import PlanError

__all__ = ["stored_plan", "write_plan", "make_output_folder"]


def make_output_folder(path: str | os.PathLike) -> Path:
    """Create the plan's output folder (and its parents) before the first step writes into it.

    The library steps (``endmembers extract`` / ``prune``) write into an existing folder only; the product
    steps create theirs. A folder that cannot be made is one :class:`~unmix.errors.ProductWriteError`.
    """
    from ..products.stale import probe_folder
    from ..products.write_errors import write_error

    path = Path(path)
    probe_folder(path)
    try:
        path.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise write_error(path, exc, "create the output folder", before=True) from None
    return path


def write_plan(path: str | os.PathLike, text: str, *, overwrite: bool = False) -> Path:
    """Write a plan (or the template) to ``path``; an existing file only with ``overwrite``."""
    from ..products.atomic import atomic_path

    path = Path(path)
    if not path.parent.is_dir():
        raise PlanError(f"folder {path.parent} does not exist; create it first, or write the plan elsewhere")
    with atomic_path(path, overwrite=overwrite) as tmp:
        Path(tmp).write_text(text, encoding="utf-8")
    return path


def stored_plan(path: str | os.PathLike) -> tuple[str, str]:
    """``(plan text, its SHA-256)`` stored in a product of ``unmix run``.

    ``path`` is a NetCDF product (``plan`` / ``plan_sha256`` global attributes), a GeoTIFF (tags of the
    same names), a sample GeoJSON (its ``unmix`` member) or a spectral library CSV (its JSON sidecar).
    Raises :class:`~unmix.errors.PlanError` when the file holds no plan (it was not written by a plan run).
    """
    path = Path(path)
    if not path.is_file():
        raise PlanError(f"{path} not found; give a product written by 'unmix run'")
    suffix = path.suffix.lower()
    try:
        if suffix == ".nc":
            import netCDF4

            with netCDF4.Dataset(path) as ds:
                attrs = {k: ds.getncattr(k) for k in ("plan", "plan_sha256") if k in ds.ncattrs()}
        elif suffix in (".tif", ".tiff"):
            import rasterio

            with rasterio.open(path) as src:
                attrs = src.tags()
        elif suffix in (".geojson", ".json", ".csv"):
            doc_path = path.with_suffix(".json") if suffix == ".csv" else path
            doc = json.loads(doc_path.read_text(encoding="utf-8"))
            attrs = doc.get("unmix", doc) if isinstance(doc, dict) else {}
        else:
            raise PlanError(f"{path}: not a product unmix stores a plan in (.nc, .tif, .geojson, library .csv)")
    except PlanError:
        raise
    except Exception as exc:  # noqa: BLE001 - any reader's failure is one line naming the file
        raise PlanError(f"cannot read the plan stored in {path}: {exc}") from None
    text, digest = attrs.get("plan"), attrs.get("plan_sha256")
    if not isinstance(text, str) or not isinstance(digest, str):
        raise PlanError(f"{path} holds no plan: it was not written by 'unmix run' (its command and parameters are "
                        "in its other attributes)")
    return text, digest
