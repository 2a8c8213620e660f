"""``unmix endmembers``: take endmember spectra from an image stack, and prune endmember bundles."""

from __future__ import annotations

from pathlib import Path

import click
import numpy as np

from .. import __version__
from ..cube.extraction import sample_stack
from ..errors import InputError
from ..extraction import CountMethod, ExtractionMethod, estimate_count, extract, match_library
from ..io.library import read_library, sidecar_path, write_library
from ..io.stack import open_stack
from ..pruning import PruningMethod, prune
from ..spectra import SpectralLibrary, on_bands
from ._common import SENSOR_HELP, check_can_write, echo_summary, overwrite_option, split_names
from .sensors import RESPONSE_HELP, sensor_from_options

__all__ = ["endmembers"]


def _check_out(out: Path, overwrite: bool) -> None:
    """Stop before any work if the library (or its sidecar) exists, or cannot be written."""
    if out.suffix.lower() != ".csv":
        raise InputError(f"--out {out}: a library file must end in .csv")
    check_can_write(out, overwrite)
    check_can_write(sidecar_path(out), overwrite)
    if not out.parent.exists():
        raise InputError(f"--out {out}: folder {out.parent} does not exist; create it first")


def _parse_count(text: str) -> int | None:
    if str(text).strip().lower() == "auto":
        return None
    try:
        count = int(text)
    except ValueError:
        raise InputError(f"--count {text!r} must be 'auto' or a whole number of endmembers, e.g. 4") from None
    if count < 2:
        raise InputError(f"--count {count} must be at least 2 (or 'auto')")
    return count


@click.group("endmembers")
def endmembers() -> None:
    """Find endmember spectra in an image stack, and prune endmember bundles.

    `extract` takes the purest pixels of a stack (all dates pooled) as endmembers and writes them
    as a resampled spectral library; `prune` keeps the most representative spectra of each class
    of a bundle library.
    """


@endmembers.command("extract")
@click.argument("stack", nargs=-1, required=True, type=click.Path(path_type=Path))
@click.option("--sensor", "sensor_id", default=None, metavar="ID", help=SENSOR_HELP)
@click.option("--response", "response_file", default=None, type=click.Path(dir_okay=False, path_type=Path),
              metavar="FILE", help=RESPONSE_HELP)
@click.option("--band-names", default=None, metavar="B1,B2,...",
              help="Names of the bands the files hold, in file order, separated by commas "
                   "(default: the files' band descriptions or the sensor's bands).")
@click.option("--method", type=click.Choice([m.value for m in ExtractionMethod]), default="vca",
              show_default=True,
              help="vca: vertex component analysis; nfindr: largest simplex volume; atgp: automatic "
                   "target generation; ppi: pixel purity index with random skewers.")
@click.option("--count", "count_text", default="auto", show_default=True, metavar="auto|N",
              help="Number of endmembers, or 'auto' to estimate it from the data (--count-method).")
@click.option("--count-method", type=click.Choice([m.value for m in CountMethod]), default="hysime",
              show_default=True,
              help="Estimator for --count auto: hysime (subspace by minimum error) or hfc "
                   "(eigenvalue test, false-alarm probability 0.001).")
@click.option("--library", "library_path", default=None, type=click.Path(dir_okay=False, path_type=Path),
              metavar="REF.csv",
              help="Reference library: each endmember takes the name of the library spectrum it "
                   "matches (one to one, by spectral angle).")
@click.option("--max-angle", type=float, default=10.0, show_default=True, metavar="DEG",
              help="Largest spectral angle [degree] accepted as a match to the reference library; "
                   "endmembers without a match are named endmember_1, endmember_2, ...")
@click.option("--sample", "sample_size", type=click.IntRange(min=100), default=1_000_000, show_default=True,
              metavar="N", help="Number of valid pixel-dates drawn at random (over all dates) to search.")
@click.option("--seed", type=int, default=0, show_default=True, help="Seed of the sample and the method.")
@click.option("--out", "out", required=True, type=click.Path(dir_okay=False, path_type=Path),
              metavar="LIB.csv", help="Library to write (CSV plus JSON sidecar with provenance).")
@overwrite_option
def extract_command(
    stack: tuple[Path, ...],
    sensor_id: str | None,
    response_file: Path | None,
    band_names: str | None,
    method: str,
    count_text: str,
    count_method: str,
    library_path: Path | None,
    max_angle: float,
    sample_size: int,
    seed: int,
    out: Path,
    overwrite: bool,
) -> None:
    """Take endmember spectra from the pixels of an image stack.

    STACK is a folder of dated GeoTIFFs, a list of GeoTIFF files, or a NetCDF cube. Pixel-dates
    of all dates are pooled (a random sample of --sample of them), so one set of endmembers serves
    every date. Each endmember is the reflectance of one pixel on one date; the output library
    records that date, row and column, the method, the seed and how the count was chosen.
    """
    _check_out(out, overwrite)
    count = _parse_count(count_text)
    if not max_angle >= 0:
        raise InputError(f"--max-angle {max_angle} must be a non-negative angle in degrees")
    sensor = sensor_from_options(sensor_id, response_file)
    reference = read_library(library_path) if library_path is not None else None

    source = stack[0] if len(stack) == 1 else list(stack)
    cube = open_stack(source, sensor=sensor, band_names=split_names(band_names))
    bands = [str(b) for b in cube["band"].values]
    wavelengths = np.array([sensor.band(b).centre_nm for b in bands])
    ref = on_bands(reference, sensor, bands, where=f"--library {library_path}") if reference is not None else None

    smp = sample_stack(cube.data, sample_size=sample_size, seed=seed)
    if count is None:
        count = estimate_count(smp.pixels, method=count_method, seed=seed)
        chosen_by = count_method
        if count < 2:
            raise InputError(
                f"{count_method} estimated {count} endmember(s) in {source}; pass --count N (at least 2)"
            )
    else:
        chosen_by = "given"
    spectra, idx = extract(smp.pixels, count, method=method, seed=seed)

    if ref is not None:
        m = match_library(spectra, ref.spectra, ref.names, max_angle_deg=max_angle)
        lib_classes = dict(zip(ref.names, ref.classes))
    else:
        m = None
    times = cube["time"].values
    files = list(cube.attrs.get("input_files", ()))
    names, classes, entries = [], [], {}
    for k in range(count):
        t, y, x = int(smp.time_index[idx[k]]), int(smp.y[idx[k]]), int(smp.x[idx[k]])
        entry = {
            "date": str(np.datetime_as_string(times[t], unit="D")),
            "row": y,
            "column": x,
            "x_coord": float(cube["x"].values[x]),
            "y_coord": float(cube["y"].values[y]),
        }
        if t < len(files):
            entry["file"] = files[t]
        if m is not None and m.matched[k]:
            name = m.names[k]
            classes.append(lib_classes.get(name) or name)
            entry["library_match"] = name
        else:
            name = f"endmember_{k + 1}"
            classes.append(None)
        if m is not None:
            entry["matched"] = bool(m.matched[k])
            entry["angle_deg"] = round(float(m.angles_deg[k]), 4)
            entry["nearest_library_spectrum"] = ref.names[int(m.library_index[k])]
        entry["description"] = f"pixel row {y}, column {x} of {entry['date']} ({method})"
        names.append(name)
        entries[name] = entry

    metadata = {
        "source": f"extracted from an image stack by unmix {__version__} (unmix endmembers extract)",
        "invented": False,
        "description": f"{count} endmembers by {method}, from {smp.pixels.shape[0]} pixel-dates "
                       f"sampled over {len(times)} dates",
        "sensor": sensor.id,
        "band_responses": {b: sensor.band(b).fingerprint for b in bands},
        "response_file": None if response_file is None else str(response_file),
        "unmix_version": __version__,
        "method": method,
        "seed": seed,
        "count": count,
        "count_chosen_by": chosen_by,
        "sample_size": sample_size,
        "n_sampled": int(smp.pixels.shape[0]),
        "stack": [str(s) for s in stack],
        "input_files": files,
        "reference_library": None if library_path is None else str(library_path),
        "max_angle_deg": max_angle if library_path is not None else None,
        "spectra": entries,
    }
    result = SpectralLibrary(wavelengths, np.asarray(spectra, dtype=np.float64), tuple(names), tuple(classes),
                             tuple(bands), metadata)
    write_library(result, out, overwrite=overwrite)
    how = f"count {count} {'given' if chosen_by == 'given' else 'by ' + chosen_by}"
    matched = "" if m is None else f"; {int(m.matched.sum())} of {count} matched to {library_path.name}"
    echo_summary(f"wrote {count} endmembers ({method}, {how}{matched}) to {out}")


@endmembers.command("prune")
@click.argument("library_file", type=click.Path(dir_okay=False, path_type=Path), metavar="LIB.csv")
@click.option("--method", type=click.Choice([m.value for m in PruningMethod]), default="ear",
              show_default=True,
              help="ear: lowest average RMSE modelling the rest of the class; masa: lowest average "
                   "spectral angle; cob: most class members modelled within RMSE 0.025 and fractions "
                   "-0.05..1.05, fewest of other classes.")
@click.option("--keep", type=click.IntRange(min=1), default=1, show_default=True, metavar="N",
              help="Spectra kept per class.")
@click.option("--out", "out", required=True, type=click.Path(dir_okay=False, path_type=Path),
              metavar="LIB.csv", help="Pruned library to write (CSV plus JSON sidecar).")
@overwrite_option
def prune_command(library_file: Path, method: str, keep: int, out: Path, overwrite: bool) -> None:
    """Keep the N most representative spectra of each class of the bundle library LIB.csv.

    Every spectrum needs a class label (the `class` of its entry under `spectra` in the JSON
    sidecar). Scores are written to the output's sidecar.
    """
    _check_out(out, overwrite)
    lib = read_library(library_file)
    unlabelled = [n for n, c in zip(lib.names, lib.classes) if c is None]
    if unlabelled:
        raise InputError(
            f"{library_file}: spectra without a class label: {', '.join(unlabelled[:5])}"
            f"{' ...' if len(unlabelled) > 5 else ''}; set \"class\" for each under \"spectra\" in "
            f"{sidecar_path(library_file).name}"
        )
    res = prune(lib.spectra, lib.classes, method=method, keep=keep)
    old = lib.metadata.get("spectra", {}) or {}
    entries = {}
    for i, n in enumerate(lib.names):
        entry = dict(old.get(n, {})) if isinstance(old.get(n, {}), dict) else {}
        for key, values in res.details.items():
            v = values[i]
            if key in ("ear", "masa"):
                entry[key if key == "ear" else "masa_deg"] = (
                    None if not np.isfinite(v) else round(float(v if key == "ear" else np.rad2deg(v)), 6)
                )
            elif key == "cob_index":
                entry[key] = None if not np.isfinite(v) else round(float(v), 6)
            else:
                entry[key] = int(v)
        entries[n] = entry
    kept_names = [lib.names[i] for i in res.indices]
    pruned = lib.with_metadata(
        spectra=entries,
        pruning={"method": method, "keep_per_class": keep, "from": str(library_file),
                 "n_before": len(lib), "unmix_version": __version__},
    ).select(kept_names)
    write_library(pruned, out, overwrite=overwrite)
    n_classes = len(set(lib.classes))
    echo_summary(f"kept {len(kept_names)} of {len(lib)} spectra ({method}, up to {keep} per class, "
                 f"{n_classes} classes) in {out}")
