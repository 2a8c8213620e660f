"""The comparability of the dates, for ``unmix fractions`` and ``unmix survey``: options, checks, ledger.

Before change is measured, the dates must be comparable (geometry, radiometry, resolution, season).
:func:`check_dates` runs, on the lazy cube, the window selection (:mod:`unmix.cube.phenology`), the
co-registration and radiometry measures (:mod:`unmix.cube.comparability`), leaves out or corrects
dates as the options say, optionally reduces each year to a composite, and builds the ledger of every
date (:mod:`unmix.cube.ledger`). It returns the cube to unmix, the ledger and one verdict line per
condition for the command to print.
"""

from __future__ import annotations

import warnings
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import click
import numpy as np

from ..errors import InputError, UnmixWarning

__all__ = ["ComparabilityWarning", "CheckSettings", "comparability_options", "settings_from", "check_dates"]

#: Fewest dates the trend tests of ``unmix trends`` label (fewer: insufficient_data).
MIN_DATES = 8


class ComparabilityWarning(UnmixWarning):
    """A date is shifted more than a fifth of a pixel, or its radiometry departs from the reference."""


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


@dataclass(frozen=True)
class CheckSettings:
    reference: str | None = None
    band: str | None = None
    max_shift: float = 0.5
    correct_shift: bool = False
    normalise: bool = False
    exclude_radiometry: bool = False
    valid_range: tuple[float, float] | None = (-0.5, 2.0)
    gain_tolerance: float = 0.05
    registration: bool = True
    radiometry: bool = True
    window: Any = None  # DateWindow or None
    composite: str | None = None
    target_doy: int | None = None


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


def _day(value: Any) -> str:
    return str(np.datetime64(value, "D"))


def check_dates(cube: Any, settings: CheckSettings) -> tuple[Any, Any, list[str]]:
    """Run the date checks on ``cube``: (cube to unmix, ledger of every date, verdict lines)."""
    from ..cube.comparability import (
        correct_registration,
        measure_comparability,
        measure_registration,
        normalise_cube,
        reference_date,
        registration_verdict,
    )
    from ..cube.ledger import build_ledger

    times = cube["time"].values
    n = times.size
    reasons: list[list[str]] = [[] for _ in range(n)]
    flags: list[list[str]] = [[] for _ in range(n)]
    lines: list[str] = []
    keep = np.ones(n, bool)

    if settings.window is not None:
        from ..cube.phenology import select_window

        _, why = select_window(cube, settings.window, min_dates=MIN_DATES if not settings.composite else None)
        for i, text in enumerate(why.values):
            if text:
                reasons[i].append(str(text))
                keep[i] = False
        lines.append(f"season: window {settings.window.describe()}: {int(keep.sum())} of {n} dates kept")
    else:
        months = np.array([int(str(t)[5:7]) for t in times.astype("datetime64[D]")])
        lines.append(f"season: no window; dates in {len(set(months.tolist()))} of 12 months (trends use every date; "
                     "--doy-window keeps one season)")

    sub = cube.isel(time=np.flatnonzero(keep))
    shifts = fits = ref = None
    band = [b.strip() for b in settings.band.split(",") if b.strip()] if settings.band else None
    band_label = ", ".join(band) if band else "all bands"
    if (settings.registration or settings.radiometry) and sub.sizes["time"] > 1:
        ref = reference_date(sub, settings.reference)
        # measured on plausible reflectance only (an undeclared fill value such as 1e30 is no data here too)
        seen = sub
        if settings.valid_range:
            lo, hi = settings.valid_range
            seen = sub.where((sub >= lo) & (sub <= hi))
        groups = _sensor_groups(sub)
        if settings.registration and settings.radiometry and len(groups) == 1:
            shifts, fits = measure_comparability(seen, band=band, reference=ref, gain_tolerance=settings.gain_tolerance)
        else:
            if settings.registration:
                shifts = measure_registration(seen, band=band, reference=ref)
            if settings.radiometry:
                fits = _radiometry_by_sensor(seen, groups, ref, settings)
        lines.append(f"reference date: {_day(ref)}" + (" (most valid pixels)" if settings.reference is None else "")
                     + (f"; radiometry against the date with most valid pixels of each sensor ({len(groups)} sensors)"
                        if fits is not None and len(groups) > 1 else ""))
    index = np.flatnonzero(keep)  # position in the full record of each date of ``sub``

    full_shift = {k: np.full(n, np.nan, np.float32) for k in ("shift_y", "shift_x", "shift_sd")}
    correct = np.zeros(sub.sizes["time"], bool)
    if shifts is not None:
        verdict = registration_verdict(shifts, max_shift=settings.max_shift).values
        size = np.hypot(shifts["shift_y"].values, shifts["shift_x"].values)
        for k in full_shift:
            full_shift[k][index] = shifts[k].values
        warned, left, unmeasured = [], [], []
        for j, i in enumerate(index):
            if verdict[j] == "failed":  # kept, but flagged and said (never passed as measured)
                flags[i].append(f"shift not measured: {shifts['reason'].values[j]}")
                unmeasured.append(_day(times[i]))
            elif verdict[j] == "exclude" and not settings.correct_shift:
                reasons[i].append(f"shifted {size[j]:.2f} px (more than --max-shift {settings.max_shift:g})")
                left.append(f"{_day(times[i])} {size[j]:.2f} px")
            elif verdict[j] in ("warn", "exclude"):
                warned.append(f"{_day(times[i])} {size[j]:.2f} px")
                if settings.correct_shift:
                    correct[j] = True
                    flags[i].append(f"resampled by its shift ({size[j]:.2f} px)")
                else:
                    flags[i].append(f"shifted {size[j]:.2f} px")
        if warned and not settings.correct_shift:
            warnings.warn(ComparabilityWarning(
                f"dates shifted more than 0.2 pixel against {_day(shifts.attrs.get('reference', times[index[0]]))}: "
                f"{_listed(warned)}; check the co-registration (--correct-shift resamples them)"), stacklevel=2)
        done = "resampled" if settings.correct_shift else "left out"
        measured = len(index) - 1 - len(unmeasured)
        if measured <= 0:
            lines.append(f"co-registration ({band_label}): not measurable on this stack "
                         f"({shifts['reason'].values[verdict == 'failed'][0]}); dates kept")
        else:
            if unmeasured:
                warnings.warn(ComparabilityWarning(
                    f"the shift of {len(unmeasured)} date(s) could not be measured ({_listed(unmeasured)}: see the "
                    "ledger's reason); they are kept unchecked"), stacklevel=2)
            lines.append(f"co-registration ({band_label}): largest shift {np.nanmax(size):.2f} px; "
                         f"{len(left) + int(correct.sum())} date(s) above --max-shift {settings.max_shift:g} px"
                         + (f" {done}: {_listed(left)}" if left else "")
                         + (f"; {len(warned)} above 0.2 px: {_listed(warned)}" if warned else "")
                         + (f"; {len(unmeasured)} not measured" if unmeasured else ""))
    elif settings.registration:
        lines.append("co-registration: not measured (fewer than two dates)")
    else:
        lines.append("co-registration: not checked (--no-registration-check)")

    bands = [str(b) for b in cube["band"].values]
    gain = offset = r2 = None
    if fits is not None:
        gain = np.full((n, len(bands)), np.nan, np.float32)
        offset, r2 = gain.copy(), gain.copy()
        gain[index], offset[index], r2[index] = (fits[k].transpose("time", "band").values for k in ("gain", "offset", "r2"))
        flagged, unmeasured = [], []
        for j, i in enumerate(index):
            flag = str(fits["flag"].values[j])
            if not flag:
                continue
            departs = "gain departs" in flag or "poor fit" in flag
            if departs and settings.exclude_radiometry:
                reasons[i].append(f"radiometry departs (left out by --radiometry-exclude): {flag}")
            else:
                flags[i].append(f"radiometry: {flag}")
            if flag.startswith(("too few", "not measured")):
                unmeasured.append(_day(times[i]))  # no invariant pixels to fit: said in the ledger, not a departure
            elif "gain departs" not in flag and "poor fit" not in flag:
                continue  # a note on the fit (e.g. IR-MAD still moving): in the ledger, not a departure
            else:
                g = gain[i]
                k = int(np.nanargmax(np.abs(g - 1.0))) if np.isfinite(g).any() else 0
                flagged.append(f"{_day(times[i])} ({bands[k]} gain {g[k]:.2f}"
                               + (", poor fit" if "poor fit" in flag else "") + ")")
        if flagged:
            warnings.warn(ComparabilityWarning(
                f"radiometry departs from the reference date on {len(flagged)} date(s): {_listed(flagged)} (the "
                "ledger has every band's gain, offset and R²)"
                + ("; left out (--radiometry-exclude)" if settings.exclude_radiometry
                   else "" if settings.normalise else "; --normalise applies the fitted gains and offsets, "
                   "--radiometry-exclude leaves such dates out")), stacklevel=2)
        lines.append(f"radiometry: {len(flagged)} date(s) flagged" + (f" ({_listed(flagged)})" if flagged else "")
                     + (f"; {len(unmeasured)} not measurable (too few invariant pixels, see the ledger)"
                        if unmeasured else "")
                     + ("; left out" if settings.exclude_radiometry and flagged else "")
                     + ("; normalised" if settings.normalise else "; measured, not applied"))
    elif settings.radiometry:
        lines.append("radiometry: not measured (fewer than two dates)")
    else:
        lines.append("radiometry: not checked (--no-radiometry-check)")

    if "sensor" in cube.coords:
        sensors = list(dict.fromkeys(str(s) for s in cube["sensor"].values))
        lines.append(f"resolution: {', '.join(sensors)} on one grid; each date unmixed with its own sensor's endmembers")
    else:
        lines.append("resolution: one sensor, one grid")

    # what is unmixed: corrected, normalised, without the dates left out
    work = sub
    if shifts is not None and settings.correct_shift and correct.any():
        zero = shifts.copy()
        zero["shift_y"] = zero["shift_y"].where(correct, 0.0)
        zero["shift_x"] = zero["shift_x"].where(correct, 0.0)
        work = correct_registration(work, zero)
    if fits is not None and settings.normalise:
        work = normalise_cube(work, fits)
    used_sub = np.array([not reasons[i] for i in index])
    work = work.isel(time=np.flatnonzero(used_sub))
    used = np.array([not r for r in reasons])
    if settings.composite:
        from ..cube.phenology import annual_composites

        comp = annual_composites(work, settings.window, method=settings.composite, target_doy=settings.target_doy,
                                 min_years=MIN_DATES)
        work = comp.reset_coords("n_obs", drop=True).swap_dims(year="time") if "n_obs" in comp.coords else \
            comp.swap_dims(year="time")
        lines.append(f"composites: {work.sizes['time']} yearly {settings.composite} composites of {int(used.sum())} dates")
    elif not used.any():
        raise InputError(f"no date of {n} is left after the checks; loosen --max-shift or the window, or use "
                         "--correct-shift")

    text = ["; ".join(r + f) for r, f in zip(reasons, flags)]
    ledger = build_ledger(
        times, sensor=cube["sensor"].values if "sensor" in cube.coords else None,
        product=cube["product"].values if "product" in cube.coords else None,
        valid_share=None if shifts is None or "valid_share" not in shifts else _spread(shifts["valid_share"].values,
                                                                                         index, n),
        shift_y=full_shift["shift_y"] if shifts is not None else None,
        shift_x=full_shift["shift_x"] if shifts is not None else None,
        shift_sd=full_shift["shift_sd"] if shifts is not None else None,
        bands=bands if gain is not None else None, gain=gain, offset=offset, r2=r2, used=used, reason=text)
    ledger.attrs.update(verdicts=lines, reference_date=_day(ref) if ref is not None else "",
                        registration_band=band_label if shifts is not None else "")
    return work, ledger, lines


def _sensor_groups(cube: Any) -> dict[str, np.ndarray]:
    """Positions of each sensor's dates (one group when the cube has no sensor coordinate)."""
    if "sensor" not in cube.coords:
        return {"": np.arange(cube.sizes["time"])}
    sensors = np.asarray(cube["sensor"].values).astype(str)
    return {s: np.flatnonzero(sensors == s) for s in dict.fromkeys(sensors.tolist())}


def _radiometry_by_sensor(cube: Any, groups: dict[str, np.ndarray], ref: Any, settings: "CheckSettings") -> Any:
    """Radiometry of each sensor's dates against a reference date of the same sensor.

    Between sensors the bands differ by design (each sensor's dates are unmixed with its own endmembers), so a
    gain between a TM and an OLI date would measure the sensors, not a calibration fault. The user's reference
    date (or the record's) serves its own sensor; each other sensor's dates are compared with that sensor's date
    with most valid pixels.
    """
    import xarray as xr

    from ..cube.comparability import measure_radiometry, reference_date

    parts = []
    for _, where in groups.items():
        part = cube.isel(time=where)
        if part.sizes["time"] < 2:
            continue
        times = part["time"].values
        group_ref = ref if ref in times else reference_date(part, None)
        parts.append(measure_radiometry(part, reference=group_ref, gain_tolerance=settings.gain_tolerance))
    if not parts:
        return None
    fits = xr.concat(parts, dim="time").reindex(time=cube["time"].values)
    fits["flag"] = fits["flag"].fillna("not measured: the only date of its sensor").astype(str)
    return fits


def _listed(items: list[str], most: int = 4) -> str:
    """At most ``most`` items, then how many more (the ledger lists them all)."""
    shown = ", ".join(items[:most])
    return shown + (f" and {len(items) - most} more" if len(items) > most else "")


def _spread(values: Sequence[float], index: np.ndarray, n: int) -> np.ndarray:
    out = np.full(n, np.nan, np.float32)
    out[index] = values
    return out
