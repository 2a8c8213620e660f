"""``unmix run PLAN.toml``: the whole job from one plan file.

The plan (:mod:`unmix.io.plan`) is checked first, then turned into the argument lists of the commands an
analyst would type (``endmembers extract`` or ``endmembers prune`` when the plan says so, ``fractions``,
``trends``, ``report``, ``sample``), which run in this process one after the other. Every option is taken
from the normalised plan, defaults included, so a later release with other defaults repeats the same
run. While the steps run, every product they write stores the plan's text and SHA-256
(:func:`unmix.io.products.provenance.recording_plan`). The first failing step stops the run with one
line naming the step.
"""

from __future__ import annotations

import shlex
import sys
from pathlib import Path
from typing import Any

import click

from ..errors import PlanError, UnmixError
from ._common import echo_summary

__all__ = ["run", "plan_steps"]


def _opt(args: list[str], flag: str, value: Any) -> None:
    """Append ``flag value`` (lists comma-joined, booleans as a bare flag when true); nothing for None."""
    if value is None or value is False:
        return
    if value is True:
        args.append(flag)
    elif isinstance(value, list):
        args += [flag, ",".join(str(v) for v in value)]
    else:
        args += [flag, str(value)]


#: Options that say how to read the stack: (flag, plan section, key); the first three are all that
#: `endmembers extract` takes.
_READING = (("--sensor", "inputs", "sensor"), ("--response", "inputs", "response"),
            ("--band-names", "inputs", "band_names"), ("--dates", "inputs", "dates"), ("--scale", "inputs", "scale"),
            ("--offset", "inputs", "offset"), ("--qa", "masks", "qa"), ("--qa-bits", "masks", "qa_bits"),
            ("--chunk-size", "grid", "chunk_size"), ("--roles", "inputs", "roles"), ("--grid", "grid", "file"),
            ("--crs", "grid", "crs"), ("--resolution", "grid", "resolution"), ("--bounds", "grid", "bounds"),
            ("--mask", "masks", "names"), ("--band-adjustment", "inputs", "band_adjustment"))


def _stack_reading(d: dict, extraction: bool = False) -> list[str]:
    """Options that say how to read the stack (``extraction``: only those `endmembers extract` takes)."""
    args: list[str] = []
    for flag, section, key in _READING[:3] if extraction else _READING:
        _opt(args, flag, d[section].get(key))
    if extraction:
        return args
    if d["grid"]["align"]:
        args += ["--align", "--resampling", d["grid"]["resampling"]]
    if d["masks"]["share"]:  # only for delivered products: a plain stack refuses the option
        args += ["--mask-share", str(d["masks"]["share"])]
    return args


def _date_checks(dates: dict) -> list[str]:
    args: list[str] = []
    _opt(args, "--reference-date", dates.get("reference_date"))
    _opt(args, "--registration-band", dates.get("registration_band"))
    args += ["--max-shift", str(dates["max_shift"]), "--gain-tolerance", str(dates["gain_tolerance"])]
    _opt(args, "--correct-shift", dates["correct_shift"])
    _opt(args, "--normalise", dates["normalise"])
    _opt(args, "--no-registration-check", not dates["registration_check"])
    _opt(args, "--no-radiometry-check", not dates["radiometry_check"])
    if "doy_window" in dates:
        args += ["--doy-window", "-".join(str(v) for v in dates["doy_window"])]
    _opt(args, "--years", dates.get("years"))
    if "first_date" in dates or "last_date" in dates:
        args += ["--date-range", f"{dates.get('first_date') or ''},{dates.get('last_date') or ''}"]
    _opt(args, "--composite", dates.get("composite"))
    _opt(args, "--target-doy", dates.get("target_doy"))
    return args


def _compute(d: dict) -> list[str]:
    args: list[str] = []
    _opt(args, "--workers", d["compute"].get("workers"))
    _opt(args, "--scheduler", d["compute"].get("scheduler"))
    return args


def plan_steps(d: dict) -> list[tuple[str, list[str]]]:
    """The steps of a normalised plan: ``(name, arguments of the unmix command)`` in the order they run."""
    out = Path(d["outputs"]["folder"])
    again = ["--overwrite"] if d["outputs"]["overwrite"] else []
    stack = list(d["inputs"]["stack"])
    steps: list[tuple[str, list[str]]] = []
    (source, em), = d["endmembers"].items()
    names = None
    mesma: list[str] = []
    if source == "library":
        library, names = em["file"], em.get("names")
    elif source == "extraction":
        library = str(out / "endmembers.csv")
        args = ["endmembers", "extract", *stack, *_stack_reading(d, extraction=True), "--method", em["method"],
                "--count", str(em["count"]), "--count-method", em["count_method"], "--max-angle", str(em["max_angle"]),
                "--sample", str(em["sample"]), "--seed", str(em["seed"]), "--out", library, *again]
        _opt(args, "--library", em.get("reference"))
        steps.append(("endmembers extract", args))
    else:
        library = em["file"]
        if em["prune"] != "none":
            library = str(out / "bundles_pruned.csv")
            steps.append(("endmembers prune", ["endmembers", "prune", em["file"], "--method", em["prune"], "--keep",
                                               str(em["keep"]), "--out", library, *again]))
        mesma = ["--mesma", "--misfit-limit", str(em["misfit_limit"])]
    u = d["unmixing"]
    valid = d["masks"]["reflectance_range"]
    args = ["fractions", *stack, "--library", library, "--constraint", u["constraint"], *mesma, "--out", str(out),
            "--valid-range", "none" if valid is False else f"{valid[0]!r},{valid[1]!r}",
            "--compress-level", str(u["compress_level"]), *_stack_reading(d), *_date_checks(d["dates"]), *_compute(d)]
    _opt(args, "--endmembers", names)
    _opt(args, "--cog", u["cog"])
    steps.append(("fractions", args + again))
    fractions_nc, trends_nc = str(out / "fractions.nc"), str(out / "trends.nc")
    t = d["trends"]
    if t["run"]:
        args = ["trends", fractions_nc, "--out", str(out), "--fdr-q", str(t["fdr_q"]), "--min-slope",
                str(t["min_slope"]), "--min-step", str(t["min_step"]), "--correction", t["correction"],
                "--season-scheme", t["season_scheme"], "--min-valid", str(t["min_valid"]), *_compute(d)]
        _opt(args, "--rules", d["rules"].get("file"))
        z = d["zones"]
        if "file" in z:
            args += ["--zones", z["file"], "--zone-field", z["field"], "--zone-pixels", z["pixels"]]
        _opt(args, "--cover-change", z["cover_change"])
        _opt(args, "--periods", z.get("periods"))
        _opt(args, "--cog", t["cog"])
        steps.append(("trends", args + again))
    r = d["report"]
    if r["run"]:
        steps.append(("report", ["report", trends_nc, "--fractions", fractions_nc, "--out", str(out / r["folder"]),
                                 "--title", r["title"], *again]))
    s = d["sample"]
    if s["run"]:
        args = ["sample", trends_nc, "--map", s["map"], "--min-per-class", str(s["min_per_class"]), "--target-se",
                str(s["target_se"]), "--expected-accuracy", s["expected_accuracy"], "--seed", str(s["seed"]),
                "--out", str(out / s["folder"])]
        _opt(args, "--endmember", s.get("endmember"))
        _opt(args, "--total", s.get("total"))
        _opt(args, "--per-class", s.get("per_class"))
        steps.append(("sample", args + again))
    return steps


def _one_line(text: str) -> str:
    return " ".join(str(text).split())


@click.command("run")
@click.argument("plan_file", type=click.Path(dir_okay=False, path_type=Path), metavar="PLAN.toml")
@click.option("--dry-run", is_flag=True, default=False, help="Check the plan and print the commands; run nothing.")
@click.option("--out", "out", type=click.Path(file_okay=False, path_type=Path), default=None,
              help="Write the products into this folder instead of the plan's [outputs] folder (recorded in the "
                   "stored plan).")
@click.option("--overwrite", is_flag=True, default=False,
              help="Replace existing products, as [outputs] overwrite = true (recorded in the stored plan).")
def run(plan_file: Path, dry_run: bool, out: Path | None, overwrite: bool) -> None:
    """Run the whole job PLAN.toml describes: endmembers, fractions, trends, report, sample.

    Each step is printed as the command it runs ('$ unmix fractions ...'). Every product written
    stores the checked plan (defaults filled in, paths absolute) and its SHA-256 as attributes;
    'unmix plan extract PRODUCT' writes it back to a file that repeats the run. 'unmix plan
    template PLAN.toml' writes a commented plan to start from.
    """
    from ..io.plan import make_output_folder, read_plan
    from ..io.products.provenance import recording_plan
    from .main import cli

    plan = read_plan(plan_file, out=out, overwrite=True if overwrite else None)
    steps = plan_steps(plan.data)
    click.echo(f"plan {plan_file}: {len(steps)} step(s), sha256 {plan.sha256[:16]}")
    if dry_run:
        for _, args in steps:
            click.echo("$ unmix " + shlex.join(args))
        return
    make_output_folder(plan.data["outputs"]["folder"])
    with recording_plan(plan.text):
        for number, (name, args) in enumerate(steps, start=1):
            click.echo("$ unmix " + shlex.join(args))
            sys.stdout.flush()
            try:
                cli.main(args=args, prog_name="unmix", standalone_mode=False)
            except click.exceptions.Exit as exc:
                if exc.exit_code:
                    raise PlanError(f"{plan_file}: step {number} of {len(steps)} ({name}) ended with status "
                                    f"{exc.exit_code}") from None
            except click.ClickException as exc:
                raise PlanError(f"{plan_file}: step {number} of {len(steps)} ({name}) failed: "
                                f"{_one_line(exc.format_message())}") from None
            except UnmixError as exc:
                message = f"{plan_file}: step {number} of {len(steps)} ({name}) failed: {_one_line(str(exc))}"
                try:  # the step's own error class (an existing product stays an OutputExistsError)
                    again = type(exc)(message)
                except Exception:  # noqa: BLE001 - a class that takes other arguments
                    again = PlanError(message)
                raise again from None
    echo_summary(f"plan {plan_file}: {len(steps)} step(s) done; products in {plan.data['outputs']['folder']}, each "
                 f"with the plan (sha256 {plan.sha256[:16]})")
