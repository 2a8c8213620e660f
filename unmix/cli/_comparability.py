"""The date checks of ``unmix fractions`` and ``unmix survey``: their options, and the call of the checks.

The checks themselves (window, co-registration, radiometry per sensor, composites, the ledger and one
verdict per condition) live in the cube layer, :func:`unmix.cube.date_checks.check_dates`. Here the options
are parsed into its :class:`~unmix.cube.date_checks.CheckSettings`, and its verdicts and warnings are shown
with the options that act on them.
"""

from __future__ import annotations

import warnings
from typing import Any

import click

from ..cube.date_checks import CheckSettings, check_dates
from ..errors import ComparabilityWarning, InputError

__all__ = ["comparability_options", "settings_from", "run_date_checks", "measuring_params", "OPTION_OF"]

#: The option that sets each field of :class:`CheckSettings` a verdict, warning or error may name.
OPTION_OF = {
    "reference": "--reference-date", "band": "--registration-band", "max_shift": "--max-shift",
    "correct_shift": "--correct-shift", "normalise": "--normalise", "gain_tolerance": "--gain-tolerance",
    "exclude_radiometry": "--radiometry-exclude", "registration": "--no-registration-check",
    "radiometry": "--no-radiometry-check", "window": "--doy-window", "composite": "--composite",
    "target_doy": "--target-doy",
}


def comparability_options(func):
    """Options of the date checks (shared by ``unmix fractions`` and ``unmix survey``)."""
    options = [
        click.option("--reference-date", "reference_date", default=None, metavar="YYYY-MM-DD",
                     help="Date every other date is compared with (co-registration, radiometry). Default: the date "
                          "with most valid pixels."),
        click.option("--registration-band", "registration_band", default=None, metavar="BAND,...",
                     help="Band(s) the sub-pixel shifts are measured on (upsampled phase correlation of the bands' "
                          "edge orientations over 4 blocks of the scene). Default: every band together."),
        click.option("--max-shift", "max_shift", type=click.FloatRange(min=0, min_open=True), default=0.5,
                     show_default=True, help="Dates shifted more than this [pixels] are left out (or resampled with "
                                             "--correct-shift). Above 0.2 px a warning names the date."),
        click.option("--correct-shift", "correct_shift", is_flag=True, default=False,
                     help="Resample dates shifted more than 0.2 px by their measured shift instead of leaving "
                          "them out."),
        click.option("--normalise", "normalise", is_flag=True, default=False,
                     help="Apply the relative radiometric normalisation (gain and offset per date and band from "
                          "pseudo-invariant pixels). Default: measure and report only."),
        click.option("--gain-tolerance", "gain_tolerance", type=click.FloatRange(min=0, min_open=True),
                     default=0.05, show_default=True,
                     help="Flag a date whose radiometric gain departs from 1 by more than this."),
        click.option("--radiometry-exclude", "exclude_radiometry", is_flag=True, default=False,
                     help="Leave out the dates whose radiometry is flagged (a gain beyond --gain-tolerance or a poor "
                          "fit) instead of keeping them with the flag."),
        click.option("--no-registration-check", "no_registration", is_flag=True, default=False,
                     help="Do not measure the co-registration of the dates."),
        click.option("--no-radiometry-check", "no_radiometry", is_flag=True, default=False,
                     help="Do not measure the radiometric comparability of the dates."),
        click.option("--doy-window", "doy_window", default=None, metavar="START-END",
                     help="Keep dates whose day of year lies in START-END (e.g. 60-120; 335-60 wraps over the "
                          "new year for southern summers)."),
        click.option("--years", "years", default=None, metavar="Y1-Y2|Y,Y,...",
                     help="Keep these years (with a wrapping window: the years its seasons start in)."),
        click.option("--date-range", "date_range", default=None, metavar="FROM,TO",
                     help="Keep dates from FROM to TO (YYYY-MM-DD; either may be empty)."),
        click.option("--composite", "composite", type=click.Choice(["median", "closest"]), default=None,
                     help="Reduce each year to one composite inside the window: the per-pixel median of the valid "
                          "observations, or the valid observation closest to --target-doy."),
        click.option("--target-doy", "target_doy", type=click.IntRange(1, 366), default=None,
                     help="Day of year of --composite closest (default: the middle of the window)."),
    ]
    for option in reversed(options):
        func = option(func)
    return func


def _range(text: str) -> list[int]:
    out: list[int] = []
    for part in text.split(","):
        part = part.strip()
        if not part:
            continue
        a, _, b = part.partition("-")
        try:
            out += list(range(int(a), int(b) + 1)) if b else [int(a)]
        except ValueError:
            raise InputError(f"--years must be years or ranges (2005-2014 or 2005,2007), got {text!r}") from None
    return out


def settings_from(params: dict) -> CheckSettings:
    """The check settings from a command's parsed options."""
    from ..comparability.phenology import DateWindow

    window = None
    doy, years, date_range = params.get("doy_window"), params.get("years"), params.get("date_range")
    if doy or years or date_range:
        doy_pair = None
        if doy:
            a, sep, b = doy.partition("-")
            try:
                doy_pair = (int(a), int(b))
            except ValueError:
                raise InputError(f"--doy-window must be START-END days of year (e.g. 335-60), got {doy!r}") from None
        pair = None
        if date_range:
            lo, _, hi = date_range.partition(",")
            pair = (lo.strip() or None, hi.strip() or None)
        window = DateWindow(doy_window=doy_pair, years=tuple(_range(years)) if years else None, date_range=pair,
                            max_spread_days=45.0)
    if params.get("composite") and window is None:
        raise InputError("--composite needs a window (--doy-window, --years or --date-range) to composite within")
    return CheckSettings(
        reference=params.get("reference_date"), band=params.get("registration_band"),
        max_shift=float(params.get("max_shift") or 0.5), correct_shift=bool(params.get("correct_shift")),
        normalise=bool(params.get("normalise")), exclude_radiometry=bool(params.get("exclude_radiometry")),
        gain_tolerance=float(params.get("gain_tolerance") or 0.05),
        registration=not params.get("no_registration"), radiometry=not params.get("no_radiometry"),
        window=window, composite=params.get("composite"), target_doy=params.get("target_doy"),
    )


def _hinted(text: str, settings: tuple[str, ...]) -> str:
    """``text`` followed by the options that set ``settings`` (as ``[--a, --b]``)."""
    options = [OPTION_OF[k] for k in settings if k in OPTION_OF]
    return f"{text} [{', '.join(options)}]" if options else text


def run_date_checks(cube: Any, settings: CheckSettings, measure_on: Any = None) -> tuple[Any, Any, list[str]]:
    """Run the date checks on ``cube``: (cube to unmix, ledger of every date, verdict lines to print).

    ``measure_on``: the same stack opened in chunks of the files' tiles, which the measuring blocks read
    (:func:`unmix.cube.date_checks.check_dates`). The warnings of the checks are issued here, and the
    verdict lines returned, each with the options that act on it.
    """
    checks = check_dates(cube, settings, warn=False, measure_on=measure_on)
    for w in checks.warnings:
        warnings.warn(ComparabilityWarning(_hinted(str(w), w.settings), settings=w.settings), stacklevel=2)
    return checks.cube, checks.ledger, [_hinted(v.text, v.settings) for v in checks.verdicts]


def measuring_params(params: dict, settings: CheckSettings) -> dict | None:
    """A command's input options with chunks the size of a measuring block, for the cube the date checks
    read (each block then lies in one chunk, and a chunk reads only the file tiles it overlaps); None when
    nothing is measured."""
    if not (settings.registration or settings.radiometry):
        return None
    return {**params, "chunk_size": settings.block}
