"""Comparability of the dates of a stack: co-registration, radiometric normalisation, phenological windows.

Kernels on plain numpy arrays (numpy, scipy, scikit-image only): :mod:`.registration` measures the
sub-pixel shift of a date against a reference by correlating sign-free gradient fields
(:mod:`.orientation`) over blocks and resamples it;
:mod:`.radiometry` picks pseudo-invariant pixels by IR-MAD and fits gain and offset per band by
orthogonal regression; :mod:`.phenology` selects dates by day-of-year window, year and range and
reduces each year to a composite. The cube layer (:mod:`unmix.cube.comparability`) maps them over a stack.

References
----------
Guizar-Sicairos, M., Thurman, S. T. and Fienup, J. R. (2008). doi:10.1364/OL.33.000156
Townshend, J. R. G. et al. (1992). doi:10.1109/36.175340
Nielsen, A. A. (2007). doi:10.1109/TIP.2006.888195
Canty, M. J. and Nielsen, A. A. (2008). doi:10.1016/j.rse.2007.07.013
"""

from __future__ import annotations

from .orientation import SIGMA, band_noise, inside_mask, noise_sd, orientation_field, valid_pixels
from .phenology import (
    DAYS_PER_YEAR,
    DateWindow,
    check_date_count,
    circular_day_difference,
    closest_composite,
    day_of_year,
    day_of_year_window,
    median_composite,
    season_years,
    select_dates,
    warn_window,
    window_spread_days,
    year_groups,
)
from .radiometry import (
    GAIN_TOLERANCE,
    MIN_R2,
    MadResult,
    RadiometricFit,
    fit_date,
    fit_flag,
    invariant_pixels,
    irmad,
    normalise,
    orthogonal_regression,
)
from .registration import (
    MAX_PEAK_SD,
    MAX_SHIFT,
    MAX_SPREAD,
    MIN_BLOCK,
    MIN_PEAK_RATIO,
    WARN_SHIFT,
    BlockField,
    BlockShift,
    ShiftEstimate,
    block_field,
    block_shift,
    block_shifts,
    block_windows,
    combine_block_shifts,
    field_shift,
)
from .shift import shift_image

__all__ = [
    "GAIN_TOLERANCE", "MIN_R2", "MadResult", "RadiometricFit", "fit_date", "fit_flag", "invariant_pixels",
    "irmad", "normalise", "orthogonal_regression",
    "MAX_PEAK_SD", "MAX_SHIFT", "MAX_SPREAD", "MIN_BLOCK", "MIN_PEAK_RATIO", "WARN_SHIFT", "BlockField", "BlockShift", "ShiftEstimate",
    "block_field", "block_shift", "block_shifts", "block_windows", "combine_block_shifts", "field_shift",
    "SIGMA", "band_noise", "inside_mask", "noise_sd", "orientation_field", "valid_pixels", "shift_image",

    "DAYS_PER_YEAR",
    "DateWindow",
    "check_date_count",
    "circular_day_difference",
    "closest_composite",
    "day_of_year",
    "day_of_year_window",
    "median_composite",
    "season_years",
    "select_dates",
    "warn_window",
    "window_spread_days",
    "year_groups",
]
