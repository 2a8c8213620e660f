"""Multiple endmember spectral mixture analysis over a lazy (time, band, y, x) reflectance cube.

:func:`unmix.mesma.mesma` is mapped over the cube's dask chunks with :func:`xarray.apply_ufunc`
(band moved last as the core dimension). The candidate models are built and checked once, when
the graph is built; each chunk only runs the compiled selection. Nothing is computed here: the
result stays lazy until a writer or ``.compute()`` runs it. No paths are opened, nothing printed.
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np
import xarray as xr

from .. import __version__
from ..mesma import MesmaConstraint, _check_limits, _constraint, _prepare_models, _run_mesma
from .fractions import reflectance_cube
from .plausible import DEFAULT_VALID_RANGE, check_valid_range, implausible_counts, screen_block

__all__ = ["mesma_cube"]

_REFERENCES = (
    "Roberts et al. (1998) Remote Sensing of Environment 65(3):267-279, "
    "doi:10.1016/S0034-4257(98)00037-6; Franke et al. (2009) Remote Sensing of Environment "
    "113(8):1712-1723, doi:10.1016/j.rse.2009.03.018"
)


def _mesma_block(block, *, models, constraint, limits, valid_range):
    """Kernel call on one chunk: (..., band) -> (..., endmember), (..., class), (...), (...), (...)."""
    block, flags = screen_block(np.asarray(block), valid_range)
    frac, mem, rmse, unmod = _run_mesma(block, models, constraint, *limits)
    return frac, mem, rmse, unmod, flags


def mesma_cube(
    cube: xr.DataArray,
    bundles: Mapping[str, np.ndarray],
    *,
    shade=None,
    max_rmse: float = 0.025,
    fraction_bounds: tuple[float, float] = (-0.05, 1.05),
    max_shade: float = 0.8,
    constraint: MesmaConstraint | str = MesmaConstraint.SUM_TO_ONE,
    max_classes: int | None = None,
    min_rmse_gain: float = 0.001,
    weights=None,
    valid_range: tuple[float, float] | None = DEFAULT_VALID_RANGE,
) -> xr.Dataset:
    """Per-pixel MESMA model selection on every date of a reflectance cube (lazy).

    Parameters
    ----------
    cube : (time, band, y, x) xarray.DataArray
        Reflectance [0..1], usually dask-backed. NaN = no data. float32 stays float32; other
        dtypes are computed in float64.
    bundles : mapping of str to (n_members, band) ndarray
        Endmember spectra of each class in the cube's band order [reflectance].
    shade, max_rmse, fraction_bounds, max_shade, constraint, max_classes, min_rmse_gain, weights
        As in :func:`unmix.mesma.mesma` (the selection rule is documented in :mod:`unmix.mesma`).
    valid_range : (low, high) or None, default (-0.5, 2.0)
        Plausible reflectance, as in :func:`unmix.cube.unmix_cube`.

    Returns
    -------
    xarray.Dataset
        ``fractions`` (time, endmember, y, x) [1] -- classes then ``shade``, 0 for classes absent
        from the chosen model; ``members`` (time, class, y, x) int16, member index within each
        class bundle, -1 when absent or no model fits; ``rmse`` (time, y, x) [reflectance];
        ``unmodelled`` (time, y, x) bool, valid pixels no model fits; ``implausible_count`` (time,)
        int32, pixels masked for implausible reflectance. Coordinates, georeferencing
        attributes and laziness of ``cube`` are kept; attributes record the method, parameters,
        class names, tool version and references.

    Raises
    ------
    InputError, BandMismatchError, RankError
        As in :func:`unmix.mesma.mesma`; ``ShapeError`` when the cube lacks a dimension.

    References
    ----------
    Roberts, D. A., et al. (1998). Mapping chaparral in the Santa Monica Mountains using multiple
    endmember spectral mixture models. Remote Sensing of Environment 65(3), 267-279.
    https://doi.org/10.1016/S0034-4257(98)00037-6

    Examples
    --------
    >>> import numpy as np, xarray as xr
    >>> bundles = {"vegetation": np.array([[0.03, 0.06, 0.04, 0.45, 0.25, 0.12],
    ...                                    [0.04, 0.08, 0.06, 0.35, 0.22, 0.11]]),
    ...            "soil": np.array([[0.12, 0.18, 0.24, 0.30, 0.38, 0.34]])}
    >>> x = (0.5 * bundles["vegetation"][0] + 0.4 * bundles["soil"][0]).astype("float32")
    >>> cube = xr.DataArray(np.broadcast_to(x[None, :, None, None], (2, 6, 3, 3)).copy(),
    ...                     dims=("time", "band", "y", "x")).chunk({"time": 1})
    >>> ds = mesma_cube(cube, bundles, shade=np.zeros(6))
    >>> ds.members.sel(**{"class": "vegetation"}).values[0, 0, 0].item()
    0
    >>> round(ds.fractions.sel(endmember="shade").values[0, 0, 0].item(), 4)
    0.1
    """
    cube = reflectance_cube(cube, "mesma_cube")
    limits = _check_limits(max_rmse, fraction_bounds, max_shade, min_rmse_gain)
    vrange = check_valid_range(valid_range)
    cons = _constraint(constraint)
    # built and checked once here: errors and warnings surface before any chunk is computed
    models = _prepare_models(bundles, shade, cube.sizes["band"], max_classes=max_classes, weights=weights)
    classes = list(models.names[: models.n_classes])

    if cube.dtype not in (np.float32, np.float64):
        cube = cube.astype(np.float64)
    if cube.chunks is not None and len(cube.chunks[1]) > 1:
        cube = cube.chunk({"band": -1})
    dt = cube.dtype

    fractions, members, rmse, unmodelled, flags = xr.apply_ufunc(
        _mesma_block,
        cube,
        kwargs={"models": models, "constraint": cons, "limits": limits, "valid_range": vrange},
        input_core_dims=[["band"]],
        output_core_dims=[["endmember"], ["class"], [], [], []],
        dask="parallelized",
        output_dtypes=[dt, np.int16, dt, np.bool_, np.bool_],
        dask_gufunc_kwargs={"output_sizes": {"endmember": len(models.names), "class": len(classes)}},
        keep_attrs=False,
    )
    fractions = fractions.transpose("time", "endmember", "y", "x").assign_coords(endmember=list(models.names))
    members = members.transpose("time", "class", "y", "x").assign_coords({"class": classes})
    fractions.attrs = {"long_name": "fraction of the pixel covered by each class (MESMA)", "units": "1"}
    members.attrs = {"long_name": "chosen member index within each class bundle",
                     "comment": "-1 where the class is absent from the chosen model or no model fits"}
    rmse.attrs = {"long_name": "root mean square residual of the chosen model", "units": "1"}
    unmodelled.attrs = {"long_name": "valid pixel that no candidate model fits"}
    georef = {k: cube.attrs[k] for k in ("crs_wkt", "transform") if k in cube.attrs}
    for da_ in (fractions, members, rmse, unmodelled):
        da_.attrs.update(georef)

    ds = xr.Dataset({"fractions": fractions, "members": members, "rmse": rmse, "unmodelled": unmodelled,
                     "implausible_count": implausible_counts(flags.transpose("time", "y", "x"), vrange)})
    ds.attrs = {
        "unmix_version": __version__,
        "method": "multiple endmember spectral mixture analysis (per-pixel model selection)",
        "constraint": cons.value,
        "class_names": ", ".join(classes),
        "bundle_sizes": ", ".join(f"{c}={int(np.asarray(bundles[c]).reshape(-1, cube.sizes['band']).shape[0])}" for c in classes),
        "shade": int(models.has_shade),
        "max_rmse": limits[0],
        "fraction_bounds": np.array(limits[1:3]),
        "max_shade": limits[3],
        "min_rmse_gain": limits[4],
        "max_classes": int(models.size_start.shape[0] - 1),
        "n_models": models.n_models,
        "references": _REFERENCES,
        **georef,
    }
    if weights is not None:
        ds.attrs["band_weights"] = np.asarray(weights, dtype=np.float64)
    for key in ("sensor", "input_files"):
        if key in cube.attrs:
            ds.attrs[key] = cube.attrs[key]
    return ds
