"""An invented scenario with known truth: the fictional Marrow Creek rangeland.

Everything here is made up for demonstration and testing; no place, measurement or event is real.
A 4.8 km x 4.8 km dryland catchment (160 x 160 pixels of 30 m) is observed on 40 dates over ten years
(four a year in the austral dry season) by Landsat-like sensors. Four cover types mix in every pixel: green vegetation, dry vegetation,
sand and photometric shade. Five zones carry the story the tool should recover:

``stable``
    Open shrubland that only breathes with the seasons (green cover up in the wet season).
``grazing``
    A piosphere around a fictional stock-watering point: green vegetation declines slowly, more so
    close to the water point, and bare sand takes its place (gradual modification).
``dune``
    A sand sheet creeping in from the east edge: sand rises slowly, vegetation thins (gradual).
``pivot``
    A centre-pivot field, a disc of 1 km diameter, cleared in one season (abrupt conversion).
``recovery``
    A rested paddock where green and dry vegetation slowly come back (gradual increase).

The truth (fractions per date and pixel, and the zone of every pixel) is returned with the reflectance
so the demo and the tests can score what the tool recovers.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..dates import decimal_years

__all__ = ["ENDMEMBERS", "ZONES", "Scenario", "make_scenario"]

#: Endmember names used by the scenario, in fraction order (names from the shipped demo library).
ENDMEMBERS = ("green_vegetation", "dry_vegetation", "sand", "shade")
#: Zone codes of the truth map.
ZONES = ("stable", "grazing", "dune", "pivot", "recovery")

PIXEL_SIZE_M = 30.0
#: A projected CRS (UTM zone 34 south, EPSG:32734) and an upper-left corner, both arbitrary.
CRS_EPSG = 32734
ORIGIN_XY = (612_000.0, 7_284_000.0)


@dataclass(frozen=True)
class Scenario:
    """Truth and observations of the invented scene.

    Attributes
    ----------
    dates : (n_time,) datetime64[D] ndarray
    fractions : (n_time, n_endmembers, ny, nx) float64 ndarray
        True cover fractions; they sum to one.
    zone : (ny, nx) int8 ndarray
        Index into :data:`ZONES`.
    reflectance : (n_time, n_bands, ny, nx) float32 ndarray
        Surface reflectance with sensor noise; NaN where clouds hide the ground.
    change_index : int
        Position in ``dates`` of the last date before the pivot field was cleared.
    pivot_disc_ha : float
        Area of the cleared disc on the pixel grid [ha].
    """

    dates: np.ndarray
    fractions: np.ndarray
    zone: np.ndarray
    reflectance: np.ndarray
    change_index: int
    pivot_disc_ha: float
    transform: tuple[float, float, float, float, float, float]
    crs_epsg: int = CRS_EPSG


#: Day-of-year span of the record's dates: the late austral dry season (mid August to late November), when
#: green cover is least and soil and dry plant matter show best, the season dryland cover monitoring
#: usually keeps (common practice).
DRY_SEASON_DOY = (225, 325)


def _dates(n_time: int, first_year: int, rng: np.random.Generator) -> np.ndarray:
    per_year = max(1, n_time // 10)
    start, end = DRY_SEASON_DOY
    step = (end - start - 20) / max(per_year - 1, 1)
    base = np.array(
        [np.datetime64(f"{first_year + i // per_year}-01-01") + int(start + 10 + step * (i % per_year))
         - 1 for i in range(n_time)],
        dtype="datetime64[D]",
    )
    jitter = rng.integers(-10, 11, size=n_time).astype("timedelta64[D]")
    return np.sort(base + jitter)


def _ground_texture(size: int, rng: np.random.Generator) -> np.ndarray:
    """Fine static texture of the ground (stones, drainage lines, shrub clumps): smoothed noise, sd 1."""
    from scipy import ndimage

    field = ndimage.gaussian_filter(rng.normal(size=(size, size)), 1.2, mode="wrap")
    return (field - field.mean()) / field.std()


def make_scenario(
    endmember_spectra: np.ndarray,
    *,
    size: int = 160,
    n_time: int = 40,
    first_year: int = 2005,
    noise_sd: float = 0.004,
    cloud_share: float = 0.04,
    seed: int = 7,
    extra_dates=(),
) -> Scenario:
    """Build the invented Marrow Creek scene.

    Parameters
    ----------
    endmember_spectra : (4, n_bands) or (n_time, 4, n_bands) ndarray
        Spectra of :data:`ENDMEMBERS` in the sensor's bands, reflectance 0..1; per date for a record
        that switches sensor (each date mixed with its own sensor's spectra).
    size : int
        Pixels per side (30 m pixels).
    n_time : int
        Number of dates, spread over ten years from ``first_year`` (one a year below 20 dates).
    first_year : int
        Year of the first date; the default keeps even 19 yearly dates in the past, as the stack
        reader refuses file names dated after next year.
    noise_sd : float
        Standard deviation of the Gaussian sensor noise [reflectance].
    cloud_share : float
        Expected share of pixel-dates hidden by clouds (set to NaN).
    seed : int
        Seed of the random generator; the scene is reproducible.
    extra_dates : sequence of str or datetime64, optional
        Dates added to the record (e.g. one outside the dry season), with the season of their day.

    Returns
    -------
    Scenario
    """
    spectra = np.asarray(endmember_spectra, dtype=np.float64)
    if spectra.shape[-2] != len(ENDMEMBERS) or spectra.ndim not in (2, 3):
        raise ValueError(f"endmember_spectra must hold {len(ENDMEMBERS)} spectra ({', '.join(ENDMEMBERS)})")
    rng = np.random.default_rng(seed)
    dates = _dates(n_time, first_year, rng)
    if len(extra_dates):
        dates = np.sort(np.concatenate([dates, np.asarray(extra_dates, dtype="datetime64[D]")]))
    if spectra.ndim == 2:
        spectra = np.broadcast_to(spectra, (len(dates), *spectra.shape))
    elif spectra.shape[0] != len(dates):
        raise ValueError(f"per-date endmember_spectra need one set per date ({len(dates)}), got {spectra.shape[0]}")
    t = decimal_years(dates)
    t0 = t - t[0]
    season = np.sin(2 * np.pi * (t - np.floor(t)))  # southern-hemisphere wet season peaks early in the year

    yy, xx = np.mgrid[0:size, 0:size].astype(np.float64)
    zone = np.zeros((size, size), dtype=np.int8)
    # Fractions of green, dry, sand; shade is what is left (kept within 0.05..0.2 by construction).
    base_gv = 0.30 + 0.04 * np.sin(xx / 17.0) * np.cos(yy / 23.0)
    base_dv = 0.22 + 0.03 * np.cos(xx / 11.0)
    base_sd = 0.36 - 0.03 * np.sin(yy / 13.0)
    # The ground's fine static texture: what co-registration is measured on, and the pseudo-invariant
    # pixels of the radiometric comparison, as in a real scene.
    texture = _ground_texture(size, np.random.default_rng([seed, 1]))
    base_sd = base_sd + 0.12 * texture
    base_dv = base_dv - 0.07 * texture
    base_gv = base_gv - 0.05 * texture

    nt = len(t)
    gv = np.broadcast_to(base_gv, (nt, size, size)).copy()
    dv = np.broadcast_to(base_dv, (nt, size, size)).copy()
    sd = np.broadcast_to(base_sd, (nt, size, size)).copy()
    gv += 0.04 * season[:, None, None]
    dv -= 0.03 * season[:, None, None]
    sd -= 0.01 * season[:, None, None]

    # Grazing piosphere: decline up to 0.018/yr at the water point, fading to 0 at 1.2 km.
    wx, wy = 0.28 * size, 0.35 * size
    dist = np.hypot(xx - wx, yy - wy) * PIXEL_SIZE_M
    graze = np.clip(1.0 - dist / 1200.0, 0.0, 1.0)
    graze_zone = graze > 0.25
    zone[graze_zone] = ZONES.index("grazing")
    rate = 0.018 * graze
    gv -= rate[None] * t0[:, None, None]
    sd += 0.8 * rate[None] * t0[:, None, None]

    # Dune sheet: a band along the east edge, sand up by 0.02/yr, green and dry thinning.
    dune = xx >= 0.82 * size
    zone[dune] = ZONES.index("dune")
    ramp = 0.02 * t0[:, None, None] * dune[None]
    sd += ramp
    gv -= 0.5 * ramp
    dv -= 0.5 * ramp

    # Rested paddock in the south-west: vegetation recovers at 0.015/yr (green) and 0.008/yr (dry).
    paddock = (yy >= 0.72 * size) & (xx <= 0.35 * size)
    zone[paddock & ~graze_zone] = ZONES.index("recovery")
    rec = paddock & ~graze_zone
    gv += 0.015 * t0[:, None, None] * rec[None]
    dv += 0.008 * t0[:, None, None] * rec[None]
    sd -= 0.023 * t0[:, None, None] * rec[None]

    # Centre-pivot disc of 1 km diameter in the north-east quadrant, cleared between two dates.
    cx, cy = 0.62 * size, 0.30 * size
    radius_px = 500.0 / PIXEL_SIZE_M
    disc = np.hypot(xx - cx, yy - cy) <= radius_px
    zone[disc] = ZONES.index("pivot")
    change_index = int(np.searchsorted(t0, 4.4)) - 1  # last date before the clearing
    after = (np.arange(nt) > change_index)[:, None, None]
    gv = np.where(disc[None], np.where(after, 0.04, 0.62) + 0.05 * season[:, None, None], gv)
    dv = np.where(disc[None], np.where(after, 0.06, 0.12), dv)
    sd = np.where(disc[None], np.where(after, 0.78, 0.14), sd)

    gv, dv, sd = (np.clip(a, 0.0, 1.0) for a in (gv, dv, sd))
    total = gv + dv + sd
    over = total > 0.95  # keep at least a little shade everywhere
    scale = np.where(over, 0.95 / total, 1.0)
    gv, dv, sd = gv * scale, dv * scale, sd * scale
    sh = 1.0 - gv - dv - sd
    fractions = np.stack([gv, dv, sd, sh], axis=1)  # (time, endmember, y, x)

    refl = np.einsum("tkyx,tkb->tbyx", fractions, spectra)
    refl += rng.normal(0.0, noise_sd, size=refl.shape)
    # Clouds: a few random blobs per date hide the ground in every band.
    for i in range(nt):
        n_blobs = rng.poisson(cloud_share * size * size / 300.0)
        for _ in range(n_blobs):
            bx, by = rng.uniform(0, size, 2)
            r = rng.uniform(4, 14)
            refl[i, :, np.hypot(xx - bx, yy - by) <= r] = np.nan
    transform = (PIXEL_SIZE_M, 0.0, ORIGIN_XY[0], 0.0, -PIXEL_SIZE_M, ORIGIN_XY[1])
    return Scenario(
        dates=dates,
        fractions=fractions,
        zone=zone,
        reflectance=refl.astype(np.float32),
        change_index=change_index,
        pivot_disc_ha=float(disc.sum() * PIXEL_SIZE_M**2 / 1e4),
        transform=transform,
    )
