"""The date checks of a record: which dates are comparable, what is done with the others, the ledger.

Before change is measured, the dates must be comparable (geometry, radiometry, resolution, season).
:func:`check_dates` runs on a lazy (time, band, y, x) cube: the window selection
(:mod:`unmix.cube.phenology`), the co-registration and radiometry measures from one read of a few blocks
(:mod:`unmix.cube.comparability`; the radiometry within each sensor of a record that switches sensor),
leaves out, resamples or normalises dates as :class:`CheckSettings` say, optionally reduces each year to a
composite, and builds the ledger of every date (:mod:`unmix.cube.ledger`). It returns the cube to unmix,
the ledger, one verdict per condition and the warnings; it opens no path and prints nothing.

References
----------
Townshend, J. R. G. et al. (1992). doi:10.1109/36.175340
Canty, M. J. and Nielsen, A. A. (2008). doi:10.1016/j.rse.2007.07.013
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
import xarray as xr

from ..comparability import GAIN_TOLERANCE, MAX_SHIFT, DateWindow
from ..errors import ComparabilityWarning, InputError, ShapeError
from ._date_verdicts import Account, Verdict, judge_radiometry, judge_registration, reference_verdict
from .comparability import N_BLOCKS, reference_date
from .phenology import CompositeMethod
from .plausible import DEFAULT_VALID_RANGE
from .radiometry import MIN_INVARIANT, date_label

__all__ = ["MIN_DATES", "CheckSettings", "Verdict", "DateChecks", "check_dates"]

#: Fewest dates the trend tests of ``unmix trends`` label (fewer: insufficient_data).
MIN_DATES = 8


@dataclass(frozen=True)
class CheckSettings:
    """What the date checks measure and what they do with the dates that fail.

    Parameters
    ----------
    reference : str or date, optional
        Date every other date is compared with; None: the date with most valid pixels in the measured
        blocks. With several
        sensors it serves its own sensor; each other sensor's dates are compared with that sensor's date
        with most valid pixels in the measured blocks.
    band : str or sequence of str, optional
        Band(s) the shifts are measured on (a comma-separated string or names); None: every band.
    max_shift : float
        Largest shift allowed [pixel]: a date shifted more is left out (or resampled, ``correct_shift``).
    correct_shift : bool
        Resample the dates shifted more than 0.2 pixel by their measured shift instead of leaving them out.
    normalise : bool
        Apply the fitted radiometric gains and offsets (default: measure and report only).
    exclude_radiometry : bool
        Leave out the dates whose radiometry is flagged (a gain beyond ``gain_tolerance``, a poor fit).
    valid_range : (float, float), optional
        Plausible reflectance (default: unmixing's, :data:`unmix.cube.plausible.DEFAULT_VALID_RANGE`); pixels
        with a band outside are no data for the measures. None: every value counts.
    gain_tolerance : float
        A date whose gain departs from 1 by more than this is flagged.
    registration, radiometry : bool
        Measure the co-registration, the radiometry.
    window : DateWindow, optional
        Keep only the dates inside this window (day of year, years, date range).
    composite : {"median", "closest"}, optional
        Reduce each year to one composite inside ``window`` (:class:`unmix.cube.phenology.CompositeMethod`).
    target_doy : int, optional
        Day of year of the ``closest`` composite (default: the middle of the window).
    n_blocks, block : int
        Registration blocks and their edge [pixel] (:func:`unmix.cube.comparability.measure_registration`);
        a small scene needs smaller blocks to have several.
    min_invariant : int
        Fewest pseudo-invariant pixels a radiometric fit accepts.
    """

    reference: str | None = None
    band: str | tuple[str, ...] | None = None
    max_shift: float = MAX_SHIFT
    correct_shift: bool = False
    normalise: bool = False
    exclude_radiometry: bool = False
    valid_range: tuple[float, float] | None = DEFAULT_VALID_RANGE
    gain_tolerance: float = GAIN_TOLERANCE
    registration: bool = True
    radiometry: bool = True
    window: DateWindow | None = None
    composite: str | CompositeMethod | None = None
    target_doy: int | None = None
    n_blocks: int = N_BLOCKS
    block: int = 256
    min_invariant: int = MIN_INVARIANT


@dataclass(frozen=True)
class DateChecks:
    """What :func:`check_dates` found: ``cube`` to unmix (lazy; dates left out, shifts resampled and
    radiometry normalised as asked, or yearly composites), ``ledger`` of every date offered, one
    :class:`Verdict` per condition and the warnings found (:class:`~unmix.errors.ComparabilityWarning`)."""

    cube: xr.DataArray
    ledger: xr.Dataset
    verdicts: tuple[Verdict, ...]
    warnings: tuple[ComparabilityWarning, ...]

    @property
    def lines(self) -> list[str]:
        """The verdicts' text, one line per condition."""
        return [v.text for v in self.verdicts]


def _on_record(values, index: np.ndarray, n: int) -> np.ndarray:
    """Values measured on the dates at ``index``, spread onto the whole record (NaN elsewhere)."""
    values = np.asarray(values, dtype=np.float32)
    out = np.full((n, *values.shape[1:]), np.nan, np.float32)
    out[index] = values
    return out


def _bands(band) -> list[str] | None:
    if band is None:
        return None
    names = band.split(",") if isinstance(band, str) else [str(b) for b in band]
    return [b.strip() for b in names if b.strip()] or None


def _measure(sub: xr.DataArray, settings: CheckSettings, band: list[str] | None):
    """Reference date, how it was chosen, shifts and radiometric fits of the dates of ``sub`` (None where not
    measured; no reference when nothing was measured)."""
    from .comparability import measure_comparability, measure_radiometry, measure_registration

    given = None if settings.reference is None else reference_date(sub, settings.reference)  # checked first
    # measured on plausible reflectance only (an undeclared fill value such as 1e30 is no data here too)
    plausible = dict(valid_range=tuple(settings.valid_range) if settings.valid_range else None)
    by = "sensor" if "sensor" in sub.coords else None
    largest_group = max(np.unique(np.asarray(sub[by].values).astype(str), return_counts=True)[1]) if by else \
        sub.sizes["time"]
    radiometry = settings.radiometry and largest_group > 1  # a date alone in its sensor has nothing to fit to
    blocks = dict(n_blocks=settings.n_blocks, block=settings.block)
    fit = dict(reference=given, by=by, gain_tolerance=settings.gain_tolerance, min_pixels=settings.min_invariant)
    shifts = fits = None
    if settings.registration and radiometry:
        shifts, fits = measure_comparability(sub, band=band, **blocks, **fit, **plausible)
    elif settings.registration:
        shifts = measure_registration(sub, band=band, reference=given, **blocks, **plausible)
    elif radiometry:
        fits = measure_radiometry(sub, **fit, **plausible)
    # without a given date, the measures chose it from what they read (the date with most valid pixels)
    found = shifts if shifts is not None else fits
    if found is None:
        return given, "", shifts, fits
    return sub["time"].values[int(found.attrs["reference_index"])], str(found.attrs["reference_choice"]), shifts, fits


def _same_stack(other: xr.DataArray, cube: xr.DataArray) -> xr.DataArray:
    """``other``, checked to hold the dates, bands and grid of ``cube``."""
    problems = [name for name in ("time", "band", "y", "x")
                if other.sizes.get(name) != cube.sizes.get(name)
                or (name in cube.coords and name in other.coords
                    and not np.array_equal(other[name].values, cube[name].values))]
    if problems:
        raise ShapeError(f"the cube to measure on is not the stack to unmix: its {', '.join(problems)} differ; open "
                         "the same files for both")
    return other.transpose(*cube.dims)


def _season(rec: Account, cube: xr.DataArray, settings: CheckSettings) -> np.ndarray:
    """Which dates the window keeps (all without one)."""
    n = rec.times.size
    if settings.window is None:
        months = {int(str(t)[5:7]) for t in rec.times.astype("datetime64[D]")}
        rec.say(f"season: no window; dates in {len(months)} of 12 months (trends use every date; a day-of-year "
                "window keeps one season)", "window")
        return np.ones(n, bool)
    from .phenology import select_window

    _, why = select_window(cube, settings.window, min_dates=MIN_DATES if not settings.composite else None)
    keep = np.ones(n, bool)
    for i, text in enumerate(why.values):
        if text:
            rec.reasons[i].append(str(text))
            keep[i] = False
    rec.say(f"season: window {settings.window.describe()}: {int(keep.sum())} of {n} dates kept")
    return keep


def check_dates(cube: xr.DataArray, settings: CheckSettings = CheckSettings(), *, warn: bool = True,
                measure_on: xr.DataArray | None = None) -> DateChecks:
    """Run the date checks on a lazy cube: which dates are comparable, and the ledger of every date.

    In order: the dates inside ``settings.window``; the reference date; each date's sub-pixel shift and
    each date's radiometric gain and offset per band against its reference (a date of its own sensor),
    both from one read of a few blocks; the dates shifted more than ``settings.max_shift`` left out (or
    resampled), those with flagged radiometry kept with the flag (or left out, or all normalised); each
    year reduced to a composite when asked.

    Parameters
    ----------
    cube : (time, band, y, x) DataArray
        Lazy reflectance on real dates; an optional ``sensor`` coordinate on time (a record that switches
        sensor has its radiometry fitted within each sensor) and ``product``.
    settings : CheckSettings
    warn : bool
        Also issue the warnings found (:class:`~unmix.errors.ComparabilityWarning`); they are in the result
        either way, for a caller that shows them itself.
    measure_on : (time, band, y, x) DataArray, optional
        The same stack (dates, bands, grid) chunked for measuring: a measuring block reads the whole
        chunk it lies in, so chunks of the files' own tiles (rather than the larger chunks unmixing
        runs on) keep the read to one tile per block. Default: ``cube``.

    Returns
    -------
    DateChecks
        The cube to unmix, the ledger (:func:`unmix.cube.ledger.build_ledger`; its attributes
        ``verdicts``, ``reference_date`` and ``registration_band``), the verdicts (season, reference,
        co-registration, radiometry, resolution, composites) and the warnings.

    Raises
    ------
    InputError
        The window keeps fewer than :data:`MIN_DATES` dates (both counts named); the reference date or a
        registration band is not in the cube; every date is left out (a safety net: the reference date
        never is).
    ShapeError
        ``measure_on`` is not the same stack as ``cube`` (dates, bands or grid differ).

    References
    ----------
    Townshend, J. R. G. et al. (1992). doi:10.1109/36.175340
    Canty, M. J. and Nielsen, A. A. (2008). doi:10.1016/j.rse.2007.07.013

    Examples
    --------
    >>> import pandas as pd
    >>> t = pd.date_range("2001-06-01", periods=3, freq="YS")
    >>> cube = xr.DataArray(np.random.default_rng(0).random((3, 2, 8, 8)), dims=("time", "band", "y", "x"),
    ...                     coords={"time": t, "band": ["red", "nir"]})
    >>> checks = check_dates(cube, CheckSettings(registration=False, radiometry=False))
    >>> checks.ledger["used"].values.tolist(), checks.lines[1]
    ([True, True, True], 'co-registration: not checked (turned off)')
    """
    from .ledger import build_ledger

    times = cube["time"].values
    n = times.size
    rec = Account(times)
    keep = _season(rec, cube, settings)
    index = np.flatnonzero(keep)  # position in the full record of each date of ``sub``
    sub = cube.isel(time=index)
    band = _bands(settings.band)
    band_label = ", ".join(band) if band else "all bands"
    ref = shifts = fits = None
    if (settings.registration or settings.radiometry) and sub.sizes["time"] > 1:
        seen = sub if measure_on is None else _same_stack(measure_on, cube).isel(time=index)
        ref, choice, shifts, fits = _measure(seen, settings, band)
        if ref is not None:
            reference_verdict(rec, ref, fits, settings, sub, choice)

    correct = np.zeros(index.size, bool)
    if shifts is not None:
        correct = judge_registration(rec, shifts, index, settings, band_label)
    elif settings.registration:
        rec.say("co-registration: not measured (fewer than two dates)")
    else:
        rec.say("co-registration: not checked (turned off)", "registration")

    bands = [str(b) for b in cube["band"].values]
    if fits is not None:
        judge_radiometry(rec, fits, index, settings, bands)
    elif settings.radiometry:
        rec.say("radiometry: not measured (fewer than two dates)")
    else:
        rec.say("radiometry: not checked (turned off)", "radiometry")

    if "sensor" in cube.coords:
        sensors = list(dict.fromkeys(str(s) for s in cube["sensor"].values))
        rec.say(f"resolution: {', '.join(sensors)} on one grid; each date unmixed with its own sensor's endmembers")
    else:
        rec.say("resolution: one sensor, one grid")

    work = _to_unmix(rec, sub, index, shifts, fits, correct, settings)
    measured: dict = {}
    if shifts is not None:
        measured.update({k: _on_record(shifts[k], index, n) for k in ("valid_share", "shift_y", "shift_x", "shift_sd")})
    if fits is not None:
        measured.update(bands=bands, **{k: _on_record(fits[k].transpose("time", "band"), index, n)
                                        for k in ("gain", "offset", "r2")})
    ledger = build_ledger(times, sensor=cube["sensor"].values if "sensor" in cube.coords else None,
                          product=cube["product"].values if "product" in cube.coords else None,
                          used=np.array([not r for r in rec.reasons]),
                          reason=["; ".join(r + f) for r, f in zip(rec.reasons, rec.flags)], **measured)
    ledger.attrs.update(verdicts=[v.text for v in rec.verdicts], reference_date=date_label(ref) if ref is not None else "",
                        registration_band=band_label if shifts is not None else "")
    if warn:
        for w in rec.warnings:
            warnings.warn(w, stacklevel=2)
    return DateChecks(cube=work, ledger=ledger, verdicts=tuple(rec.verdicts), warnings=tuple(rec.warnings))


def _to_unmix(rec: Account, sub, index, shifts, fits, correct, settings: CheckSettings) -> xr.DataArray:
    """What is unmixed: resampled, normalised, without the dates left out; or the yearly composites."""
    from .comparability import correct_registration, normalise_cube

    work = sub
    if shifts is not None and settings.correct_shift and correct.any():
        zero = shifts.copy()
        zero["shift_y"] = zero["shift_y"].where(correct, 0.0)
        zero["shift_x"] = zero["shift_x"].where(correct, 0.0)
        work = correct_registration(work, zero)
    if fits is not None and settings.normalise:
        work = normalise_cube(work, fits)
    work = work.isel(time=np.flatnonzero([not rec.reasons[i] for i in index]))
    used = sum(not r for r in rec.reasons)
    if settings.composite:
        from .phenology import annual_composites

        method = CompositeMethod(settings.composite)
        comp = annual_composites(work, settings.window, method=method, target_doy=settings.target_doy,
                                 min_years=MIN_DATES)
        work = comp.reset_coords("n_obs", drop=True) if "n_obs" in comp.coords else comp
        work = work.swap_dims(year="time")
        rec.say(f"composites: {work.sizes['time']} yearly {method.value} composites of {used} dates")
    elif not used:
        raise InputError(f"no date of {rec.times.size} is left after the checks; allow a larger shift than "
                         f"{settings.max_shift:g} px, widen the window, or resample shifted dates by their measured "
                         "shift")
    return work
