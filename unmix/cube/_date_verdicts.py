"""The judgements of the date checks (:mod:`unmix.cube.date_checks`): what each condition's measures mean for
each date (left out, flagged, resampled), the verdict line of each condition and the warnings.

Messages describe the settings in words (the command line adds its option names where it prints them).
"""

from __future__ import annotations

from typing import TYPE_CHECKING, NamedTuple

import numpy as np
import xarray as xr

from ..comparability import WARN_SHIFT
from ..errors import ComparabilityWarning
from .radiometry import date_label

if TYPE_CHECKING:
    from .date_checks import CheckSettings

__all__ = ["Verdict", "Account", "reference_verdict", "judge_registration", "judge_radiometry"]


class Verdict(NamedTuple):
    """One line on one condition, and the settings (fields of :class:`CheckSettings`) that act on it."""

    text: str
    settings: tuple[str, ...] = ()


def listed(items: list[str], most: int = 4) -> str:
    """At most ``most`` items, then how many more (the ledger lists them all)."""
    shown = ", ".join(items[:most])
    return shown + (f" and {len(items) - most} more" if len(items) > most else "")


class Account:
    """The running account of the record: per date why it is left out and what is flagged, the verdicts
    and the warnings."""

    def __init__(self, times: np.ndarray):
        self.times = times
        self.reasons: list[list[str]] = [[] for _ in range(times.size)]
        self.flags: list[list[str]] = [[] for _ in range(times.size)]
        self.verdicts: list[Verdict] = []
        self.warnings: list[ComparabilityWarning] = []

    def say(self, text: str, *settings: str) -> None:
        self.verdicts.append(Verdict(text, tuple(settings)))

    def warn(self, text: str, *settings: str) -> None:
        self.warnings.append(ComparabilityWarning(text, settings=settings))

    def day(self, i: int) -> str:
        return date_label(self.times[i])


def reference_verdict(rec: Account, ref, fits, settings: CheckSettings, sub: xr.DataArray, choice: str = "") -> None:
    text = f"reference date: {date_label(ref)}" + (f" ({choice or 'most valid pixels'})" if settings.reference is None else "")
    if fits is not None and fits.attrs.get("grouped_by"):
        sensors = np.asarray(sub["sensor"].values).astype(str)
        refs = {s: r for s, r in zip(sensors, fits["reference"].values) if r}
        if len(set(sensors.tolist())) > 1:
            text += (f"; radiometry within each of {len(set(sensors.tolist()))} sensors against a date of its own ("
                     + ", ".join(f"{s} {r}" for s, r in refs.items()) + ")")
    rec.say(text)


def judge_registration(rec: Account, shifts, index: np.ndarray, settings: CheckSettings, band_label: str) -> np.ndarray:
    """Leave out, flag or mark for resampling the shifted dates; the dates of ``index`` to resample."""
    from .comparability import registration_verdict

    verdict = registration_verdict(shifts, max_shift=settings.max_shift).values
    size = np.hypot(shifts["shift_y"].values, shifts["shift_x"].values)
    correct = np.zeros(index.size, bool)
    limit = f"the {settings.max_shift:g} px allowed"
    warned, left, unmeasured = [], [], []
    for j, i in enumerate(index):
        if verdict[j] == "failed":  # kept, but flagged and said (never passed as measured)
            why = str(shifts["reason"].values[j])
            rec.flags[i].append(why if why.startswith("shift not measured") else f"shift not measured: {why}")
            unmeasured.append(rec.day(i))
        elif verdict[j] == "exclude" and not settings.correct_shift:
            rec.reasons[i].append(f"shifted {size[j]:.2f} px (more than {limit})")
            left.append(f"{rec.day(i)} {size[j]:.2f} px")
        elif verdict[j] in ("warn", "exclude"):
            warned.append(f"{rec.day(i)} {size[j]:.2f} px")
            if settings.correct_shift:
                correct[j] = True
                rec.flags[i].append(f"resampled by its shift ({size[j]:.2f} px)")
            else:
                rec.flags[i].append(f"shifted {size[j]:.2f} px")
    if warned and not settings.correct_shift:
        rec.warn(f"dates shifted more than {WARN_SHIFT:g} pixel against "
                 f"{date_label(shifts.attrs.get('reference', rec.times[index[0]]))}: {listed(warned)}; check the "
                 "co-registration (resampling each date by its measured shift corrects them)", "correct_shift")
    measured = len(index) - 1 - len(unmeasured)
    if measured <= 0:
        rec.say(f"co-registration ({band_label}): not measurable on this stack "
                f"({shifts['reason'].values[verdict == 'failed'][0]}); dates kept")
        return correct
    if unmeasured:
        rec.warn(f"the shift of {len(unmeasured)} date(s) could not be measured ({listed(unmeasured)}: see the "
                 "ledger's reason); they are kept unchecked")
    head = f"co-registration ({band_label}): largest shift {np.nanmax(size):.2f} px; "
    tail = f"; {len(unmeasured)} not measured" if unmeasured else ""
    if settings.correct_shift:
        rec.say(head + f"{len(warned)} date(s) shifted more than {WARN_SHIFT:g} px, resampled by their measured shift"
                + (f": {listed(warned)}" if warned else "") + tail, "correct_shift")
        return correct
    rec.say(head + f"{len(left)} date(s) shifted more than {limit}" + (f", left out: {listed(left)}" if left else "")
            + (f"; {len(warned)} above {WARN_SHIFT:g} px, kept: {listed(warned)}" if warned else "") + tail,
            "max_shift")
    return correct


def judge_radiometry(rec: Account, fits, index: np.ndarray, settings: CheckSettings, bands: list[str]) -> None:
    """Flag, or leave out, the dates whose radiometry departs from their reference."""
    gain = fits["gain"].transpose("time", "band").values
    flagged, unmeasured = [], []
    for j, i in enumerate(index):
        flag = str(fits["flag"].values[j])
        if not flag:
            continue
        departs = "gain departs" in flag or "poor fit" in flag
        if departs and settings.exclude_radiometry:
            rec.reasons[i].append(f"radiometry departs (flagged dates left out): {flag}")
        else:
            rec.flags[i].append(f"radiometry: {flag}")
        if flag.startswith(("too few", "not measured")):
            unmeasured.append(rec.day(i))  # no invariant pixels to fit: said in the ledger, not a departure
            if settings.normalise:  # nothing to apply: the date is unmixed as it is (normalise_cube)
                rec.flags[i].append("not normalised (no fit)")
        elif departs:  # (a note on the fit, e.g. IR-MAD still moving, stays in the ledger: not a departure)
            g = gain[j]
            k = int(np.nanargmax(np.abs(g - 1.0))) if np.isfinite(g).any() else 0
            flagged.append(f"{rec.day(i)} ({bands[k]} gain {g[k]:.2f}" + (", poor fit" if "poor fit" in flag else "")
                           + ")")
    if flagged:
        text = (f"radiometry departs from the reference date on {len(flagged)} date(s): {listed(flagged)} (the "
                "ledger has every band's gain, offset and R²)")
        if settings.exclude_radiometry:
            rec.warn(text + "; left out, as asked for dates with flagged radiometry", "exclude_radiometry")
        elif settings.normalise:
            rec.warn(text)
        else:
            rec.warn(text + "; normalising applies the fitted gains and offsets, or such dates can be left out",
                     "normalise", "exclude_radiometry")
    rec.say(f"radiometry: {len(flagged)} date(s) flagged" + (f" ({listed(flagged)})" if flagged else "")
            + (f"; {len(unmeasured)} not measurable (too few invariant pixels, see the ledger)"
               + (", unmixed as they are" if settings.normalise else "") if unmeasured else "")
            + ("; left out" if settings.exclude_radiometry and flagged else "")
            + ("; normalised" if settings.normalise else "; measured, not applied"))
