"""Trend cube: trajectory statistics and labels over a lazy (time, endmember, y, x) fractions cube.

:func:`trend_cube` maps the kernels of :mod:`unmix.trajectory` over a fractions product with
``xarray.apply_ufunc(dask="parallelized")`` (time as the core dimension) and returns a lazy
(endmember, y, x) dataset. Nothing is computed until the writer asks for it.

How the map-wide false discovery rate stays lazy and memory-bounded
--------------------------------------------------------------------
The Benjamini-Hochberg q-value of a pixel depends on the p-values of *every* pixel of the map, so the
computation runs in three stages inside one dask graph:

1. **p-values, per chunk.** The Mann-Kendall (or seasonal Kendall) and Pettitt p-values of each
   series of a chunk (the series with fewer than ``min_valid`` dates are set to NaN so they are not
   part of the family). Output: two float32 numbers per series; the fraction chunk is released as
   soon as its p-values exist.
2. **Global BH, per endmember.** The p-value maps of one endmember are gathered into one block
   (``rechunk`` to a whole map, 8 bytes per pixel: 32 MB for 2000 x 2000 pixels), the BH q-values
   are computed by sorting (:func:`unmix.trend.fdr`), and the q-value maps are cut back into the
   chunks of the cube.
3. **Statistics and labels, per chunk.** The fractions are read *again*, through a copy of the
   reading graph that dask may only start once stage 2 is done (``dask.graph_manipulation.bind``),
   so the scheduler never holds the whole cube waiting for the global step. Each chunk gets its
   Sen slope, step/line fits, rank tests (recomputed rather than held, so that the per-pixel
   memory stays at the p- and q-value maps) and labels.

Peak memory is therefore: the import floor, plus the working set of the chunks in flight (several
float64 copies of a chunk per thread: it grows with the chunk size), plus a per-pixel term for the
global step -- the p- and q-value maps (16 bytes per pixel and endmember) and the sorting inside
:func:`unmix.trend.fdr` for one endmember map at a time -- and the NetCDF writer's chunk caches.
None of it grows with the number of dates. Measured with ``benchmarks/bench_trends_cube.py``
(1000 x 1000 pixels x 4 endmembers x 40 dates, a 610 MB cube, 2 threads): 460 MB above the import
floor with 128 x 128 chunks and 735 MB with 512 x 512 chunks; without the writer, peak memory grew
by about 45 bytes per added series between 400 x 400 and 800 x 800 pixels.

Give the input with whole time series per chunk (``open_product(path, chunks={"time": -1})``): a
cube stored one date per chunk is otherwise merged along time here, which multiplies the tasks and
lets the scheduler hold many single-date pieces at once. A numpy-backed input is computed eagerly
through the same functions.

Rule maps (one uint8 (y, x) variable per rule) and their areas (``rule_pixels``, ``rule_area``
[ha], ``rule_share`` on a ``rule`` dimension) are lazy too; with numpy input the area is also put in
each rule variable's attributes.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import xarray as xr

from .. import __version__
from ..dates import decimal_years
from ..errors import InputError, ShapeError
from ..trajectory import Rule, check_rule_names, effect_sizes, label_trajectories, rank_tests
from ..trajectory.labels import _check_thresholds
from ..trend import DEFAULT_CORRECTION, MannKendallCorrection, fdr
from ._trend_outputs import _add_rules, _annotate
from .georef import georef_attrs
from .seasons import SeasonScheme, _season_scheme, season_labels

__all__ = ["SeasonScheme", "trend_cube", "season_labels", "TREND_VARIABLES"]


#: Data variables of the trend cube on (endmember, y, x), in output order.
TREND_VARIABLES = (
    "trajectory",
    "slope",
    "slope_low",
    "slope_high",
    "intercept",
    "tau",
    "p_value",
    "q_value",
    "change_date",
    "change_p",
    "change_q",
    "step",
    "n_valid",
)


def _is_dask(obj: xr.DataArray) -> bool:
    return obj.chunks is not None


# --------------------------------------------------------------------------------------------------
# stage functions (numpy in, numpy out; called per chunk by apply_ufunc)


def _stage_pvalues(y, *, t, correction, season, min_valid):
    tests = rank_tests(y, t, correction=correction, season=season)
    ok = tests.n_valid >= min_valid
    out = np.empty(tests.p_value.shape + (2,), dtype=np.float32)
    out[..., 0] = np.where(ok, tests.p_value, np.nan)
    out[..., 1] = np.where(ok, tests.change_p, np.nan)
    return out


def _bh_block(block, *, q):
    """BH q-values of each (endmember, statistic) map of a block holding whole maps."""
    out = np.empty(block.shape, dtype=np.float32)
    for e in range(block.shape[0]):
        for k in range(block.shape[-1]):
            _, adjusted = fdr(block[e, ..., k], q=q)
            out[e, ..., k] = adjusted
    return out


def _stage_effects(y, qq, *, t, correction, season, q, min_slope, min_valid, min_step, confidence, min_segment):
    tests = rank_tests(y, t, correction=correction, season=season)
    effects = effect_sizes(y, t, confidence=confidence, min_segment=min_segment, season=season)
    q_value = qq[..., 0]
    change_q = qq[..., 1]
    label, change_index, step = label_trajectories(
        tests, effects, q_value, change_q, q=q, min_slope=min_slope, min_valid=min_valid, min_step=min_step
    )
    f32 = np.float32
    return (
        label.astype(np.int8),
        effects.slope.astype(f32),
        effects.slope_low.astype(f32),
        effects.slope_high.astype(f32),
        effects.intercept.astype(f32),
        tests.tau.astype(f32),
        tests.p_value.astype(f32),
        q_value.astype(f32),
        change_index.astype(np.int32),
        tests.change_p.astype(f32),
        change_q.astype(f32),
        step.astype(f32),
        tests.n_valid.astype(np.int16),
    )


def _index_to_date(index, *, times):
    out = np.full(index.shape, np.datetime64("NaT"), dtype="datetime64[ns]")
    ok = index >= 0
    out[ok] = times[index[ok]]
    return out


# --------------------------------------------------------------------------------------------------
# helpers on the product


def _fractions_of(fractions_ds) -> xr.DataArray:
    if isinstance(fractions_ds, xr.DataArray):
        fr = fractions_ds
    elif isinstance(fractions_ds, xr.Dataset):
        if "fractions" not in fractions_ds.data_vars:
            raise InputError(
                "the dataset has no 'fractions' variable (found: "
                f"{', '.join(map(str, fractions_ds.data_vars)) or 'none'}); give a fractions product "
                "written by 'unmix fractions'"
            )
        fr = fractions_ds["fractions"]
    else:
        raise InputError(f"trend_cube needs an xarray Dataset or DataArray, got {type(fractions_ds).__name__}")
    need = ("time", "endmember", "y", "x")
    if set(fr.dims) != set(need):
        raise ShapeError(f"fractions must have dims {need}; got {fr.dims}")
    if "time" not in fr.coords or not np.issubdtype(fr["time"].dtype, np.datetime64):
        raise InputError("fractions need a 'time' coordinate of real dates (datetime64); re-create the product")
    if fr.sizes["time"] < 3:
        raise InputError(f"fractions hold {fr.sizes['time']} dates; trends need at least 3 (8 by default)")
    if not np.issubdtype(fr.dtype, np.floating):
        fr = fr.astype(np.float32)
    return fr.transpose(*need)


# --------------------------------------------------------------------------------------------------
# the public function


def trend_cube(
    fractions_ds,
    *,
    q: float = 0.05,
    min_slope: float = 0.005,
    min_valid: int = 8,
    min_step: float = 0.05,
    correction=DEFAULT_CORRECTION,
    season_scheme=None,
    rules: Sequence[Rule] | None = None,
    confidence: float = 0.95,
    min_segment: int = 3,
) -> xr.Dataset:
    """Trajectory statistics and labels of every pixel and endmember of a fractions cube.

    Parameters
    ----------
    fractions_ds : xarray.Dataset or DataArray
        A fractions product with ``fractions`` on (time, endmember, y, x) [0..1], time as real dates;
        numpy- or dask-backed. Time is put into one chunk; chunks along endmember, y, x are kept.
    q : float
        False discovery rate, controlled over all pixels of each endmember map (BH).
    min_slope : float
        Smallest |Sen slope| called gradual [fraction/yr].
    min_valid : int
        Fewest valid dates for a label.
    min_step : float
        Smallest |step| called abrupt [fraction].
    correction : MannKendallCorrection or str
        Serial-correlation correction of the Mann-Kendall test (unused with seasons).
    season_scheme : SeasonScheme or str, optional
        ``month`` or ``quarter`` for the seasonal Kendall test and the seasonal Sen slope
        (within-season pairs only); ``none``/None for Mann-Kendall and the Theil-Sen slope.
    rules : sequence of Rule, optional
        Modification rules (:func:`unmix.io.rules.read_rules`); endmember names are checked.
    confidence : float
        Confidence level of the Sen slope interval.
    min_segment : int
        Fewest valid dates on each side of a step.

    Returns
    -------
    xarray.Dataset
        On (endmember, y, x): ``trajectory`` (int8, CF flags), ``slope``, ``slope_low``,
        ``slope_high`` [1/yr], ``intercept``, ``tau``, ``p_value``, ``q_value``, ``change_date``
        (datetime64, NaT where not abrupt), ``change_p``, ``change_q``, ``step``, ``n_valid``; one
        (y, x) uint8 map per rule (1 true, 0 false, 255 no data) and ``rule_pixels``, ``rule_area``
        [ha], ``rule_share`` on a ``rule`` dimension. Lazy when the input is dask-backed.

    References
    ----------
    See :mod:`unmix.trajectory` (Mann 1945; Sen 1968; Pettitt 1979; Hirsch et al. 1982;
    Benjamini & Hochberg 1995; Schwarz 1978).

    Examples
    --------
    >>> import pandas as pd
    >>> time = pd.date_range("2015-01-01", periods=24, freq="QS")
    >>> rng = np.random.default_rng(1)
    >>> f = 0.5 + rng.normal(0, 0.01, (24, 1, 2, 2)).astype("float32")
    >>> f[:, 0, 0, 0] -= np.linspace(0, 0.3, 24).astype("float32")
    >>> ds = xr.Dataset({"fractions": (("time", "endmember", "y", "x"), f)},
    ...                 coords={"time": time, "endmember": ["gv"], "y": [15.0, 45.0], "x": [15.0, 45.0]})
    >>> out = trend_cube(ds)
    >>> out["trajectory"].values[0].tolist()
    [[2, 0], [0, 0]]
    """
    _check_thresholds(q, min_slope, min_valid, min_step)
    try:
        correction = MannKendallCorrection(correction)
    except ValueError:
        raise InputError(
            f"unknown Mann-Kendall correction {correction!r}; use one of: "
            f"{', '.join(c.value for c in MannKendallCorrection)}"
        ) from None
    scheme = _season_scheme(season_scheme)
    fr = _fractions_of(fractions_ds)
    ds_in = fractions_ds if isinstance(fractions_ds, xr.Dataset) else fr.to_dataset(name="fractions")
    times = fr["time"].values.astype("datetime64[ns]")
    if np.any(np.diff(times) <= np.timedelta64(0, "ns")):
        raise InputError("the dates of the fractions product are not strictly increasing; sort by time and drop duplicates")
    t = decimal_years(times)
    season = season_labels(times, scheme)
    endmembers = [str(v) for v in fr["endmember"].values]
    rules = list(rules or [])
    check_rule_names(rules, endmembers)
    for rule in rules:
        if rule.name in TREND_VARIABLES or rule.name in fr.dims or rule.name in ("rule", "rule_pixels", "rule_area", "rule_share", "spatial_ref"):
            raise InputError(
                f"{rule.source}, line {rule.line}: rule name {rule.name!r} clashes with a variable of the trend "
                "product; rename the rule"
            )
    lazy = _is_dask(fr)
    if lazy:
        fr = fr.chunk({"time": -1})

    common = dict(t=t, correction=correction, season=season)
    # stage 1: p-values per chunk
    pp = xr.apply_ufunc(
        _stage_pvalues,
        fr,
        input_core_dims=[["time"]],
        output_core_dims=[["pstat"]],
        kwargs=dict(common, min_valid=int(min_valid)),
        dask="parallelized",
        output_dtypes=[np.float32],
        dask_gufunc_kwargs={"output_sizes": {"pstat": 2}},
    )
    # stage 2: BH over each whole endmember map
    if lazy:
        p_data = pp.data
        whole = p_data.rechunk({0: 1, 1: -1, 2: -1, 3: -1})
        qq_whole = whole.map_blocks(_bh_block, q=float(q), dtype=np.float32, meta=np.empty((0, 0, 0, 0), np.float32))
        qq_data = qq_whole.rechunk(p_data.chunks)
        from dask.graph_manipulation import bind

        y_data = bind(fr.data, parents=qq_data)
        fr_again = fr.copy(data=y_data)
    else:
        qq_data = _bh_block(np.asarray(pp.values), q=float(q))
        fr_again = fr
    qq = pp.copy(data=qq_data)
    # stage 3: statistics and labels per chunk
    outputs = xr.apply_ufunc(
        _stage_effects,
        fr_again,
        qq,
        input_core_dims=[["time"], ["pstat"]],
        output_core_dims=[[] for _ in range(13)],
        kwargs=dict(
            common,
            q=float(q),
            min_slope=float(min_slope),
            min_valid=int(min_valid),
            min_step=float(min_step),
            confidence=float(confidence),
            min_segment=int(min_segment),
        ),
        dask="parallelized",
        output_dtypes=[np.int8] + [np.float32] * 7 + [np.int32] + [np.float32] * 3 + [np.int16],
    )
    names = ("trajectory", "slope", "slope_low", "slope_high", "intercept", "tau", "p_value", "q_value",
             "change_index", "change_p", "change_q", "step", "n_valid")
    out = dict(zip(names, outputs))
    change_index = out.pop("change_index")
    out["change_date"] = xr.apply_ufunc(
        _index_to_date,
        change_index,
        kwargs={"times": times},
        dask="parallelized",
        output_dtypes=["datetime64[ns]"],
    )
    data_vars = {name: out[name].transpose("endmember", "y", "x") for name in TREND_VARIABLES}
    _annotate(
        data_vars, q=q, min_slope=min_slope, min_valid=min_valid, min_step=min_step, confidence=confidence,
        seasonal=scheme is not SeasonScheme.NONE,
    )

    coords = {k: v for k, v in fr.coords.items() if k != "time" and "time" not in v.dims}
    if "spatial_ref" in ds_in.coords:
        coords["spatial_ref"] = ds_in.coords["spatial_ref"]
    # the CRS and transform as attributes too, wherever the fractions keep them (a product read back has the
    # grid-mapping coordinate; unmix_cube's result in memory may carry attributes only)
    georef = georef_attrs(ds_in)
    for var in data_vars.values():
        if var.dims[-2:] == ("y", "x"):
            var.attrs.update(georef)
    result = xr.Dataset(data_vars, coords=coords)

    if rules:
        _add_rules(result, rules, endmembers, lazy)

    parameters = {
        "fdr_q": float(q),
        "min_slope": float(min_slope),
        "min_valid": int(min_valid),
        "min_step": float(min_step),
        "correction": correction.value if scheme is SeasonScheme.NONE else "none (seasonal Kendall)",
        "season_scheme": scheme.value,
        "confidence": float(confidence),
        "min_segment": int(min_segment),
        "rules": {r.name: r.text for r in rules},
    }
    import json

    result.attrs = {
        "title": "unmix trends: fraction trajectories per endmember",
        "unmix_version": __version__,
        "method": (
            "Mann-Kendall + Theil-Sen slope" if scheme is SeasonScheme.NONE
            else f"seasonal Kendall ({scheme.value}) + seasonal Sen slope"
        ) + " + Pettitt; BH FDR per endmember map; step vs line by BIC",
        "parameters": json.dumps(parameters, sort_keys=True),
        "endmember_names": ", ".join(endmembers),
        "time_coverage_start": str(times[0].astype("datetime64[D]")),
        "time_coverage_end": str(times[-1].astype("datetime64[D]")),
        "n_dates": int(times.size),
    }
    for key in ("input_files", "command"):
        if key in ds_in.attrs:
            result.attrs[f"fractions_{key}"] = ds_in.attrs[key]
    return result
