"""Naming extracted spectra after the library spectra they resemble (spectral angle, Hungarian
assignment)."""

from __future__ import annotations

from typing import NamedTuple

import numpy as np
from scipy import optimize

from ..errors import BandMismatchError, InputError, ShapeError
from ._common import _angle_matrix

__all__ = ["LibraryMatch", "match_library"]


class LibraryMatch(NamedTuple):
    """Match of each extracted spectrum to a reference library."""

    names: list  # library name, or None where no library spectrum lies within the threshold
    angles_deg: np.ndarray  # (n,) angle to the assigned (or, if unassigned, nearest) library spectrum
    matched: np.ndarray  # (n,) bool
    library_index: np.ndarray  # (n,) index of that library spectrum


def match_library(
    spectra: np.ndarray,
    library_spectra: np.ndarray,
    library_names: list[str] | np.ndarray,
    *,
    max_angle_deg: float = 10.0,
) -> LibraryMatch:
    """Name extracted spectra after the library spectra they resemble, one to one.

    The spectral angle between every extracted and every library spectrum is computed and an
    optimal one-to-one assignment minimising the sum of angles is found (Hungarian method,
    :func:`scipy.optimize.linear_sum_assignment`). An assigned pair counts as a match only if its
    angle is at most ``max_angle_deg``; other spectra (also those left without a partner when there
    are more spectra than library entries) are flagged unmatched and get no name.

    Parameters
    ----------
    spectra : (n, n_bands) ndarray
        Extracted spectra.
    library_spectra : (m, n_bands) ndarray
        Reference spectra on the same bands (resample the library to the sensor first).
    library_names : (m,) sequence of str
        Their names.
    max_angle_deg : float
        Largest spectral angle [degree] accepted as a match (default 10).

    Returns
    -------
    LibraryMatch
        ``names`` (str or None), ``angles_deg``, ``matched`` and ``library_index`` per spectrum.

    References
    ----------
    Kruse, F. A. et al. (1993). The spectral image processing system (SIPS): interactive
    visualization and analysis of imaging spectrometer data. Remote Sensing of Environment
    44:145-163. doi:10.1016/0034-4257(93)90013-N (spectral angle).
    Kuhn, H. W. (1955). The Hungarian method for the assignment problem. Naval Research Logistics
    Quarterly 2:83-97. doi:10.1002/nav.3800020109

    Examples
    --------
    >>> lib = np.array([[0.1, 0.2, 0.3], [0.3, 0.2, 0.1]])
    >>> m = match_library(np.array([[0.31, 0.2, 0.1], [0.5, 0.5, 0.5]]), lib, ["up", "down"],
    ...                   max_angle_deg=5)
    >>> m.names, m.matched.tolist()
    (['down', None], [True, False])
    """
    s = np.asarray(spectra, dtype=np.float64)
    lib = np.asarray(library_spectra, dtype=np.float64)
    names = list(library_names)
    if s.ndim != 2 or lib.ndim != 2:
        raise ShapeError(
            f"spectra {s.shape} and library_spectra {lib.shape} must both be (n, n_bands)"
        )
    if s.shape[1] != lib.shape[1]:
        raise BandMismatchError(
            f"spectra have {s.shape[1]} bands but the library has {lib.shape[1]}; "
            "resample the library to the sensor's bands first"
        )
    if len(names) != lib.shape[0]:
        raise ShapeError(f"{len(names)} library names for {lib.shape[0]} library spectra")
    if not (np.isfinite(s).all() and np.isfinite(lib).all()):
        raise InputError("spectra and library_spectra must not hold NaN")
    if not float(max_angle_deg) >= 0:
        raise InputError(f"max_angle_deg={max_angle_deg} must be a non-negative angle in degrees")
    n = s.shape[0]
    ang = np.rad2deg(_angle_matrix(s, lib))
    cost = np.where(np.isfinite(ang), ang, 180.0)
    out_names: list = [None] * n
    angles = np.full(n, np.nan)
    matched = np.zeros(n, dtype=bool)
    lib_index = np.full(n, -1, dtype=np.int64)
    if lib.shape[0] and n:
        row, col = optimize.linear_sum_assignment(cost)
        lib_index[:] = np.argmin(cost, axis=1)
        lib_index[row] = col
        angles = cost[np.arange(n), lib_index]
        ok = np.zeros(n, dtype=bool)
        ok[row] = cost[row, col] <= float(max_angle_deg)
        matched = ok
        out_names = [names[lib_index[i]] if ok[i] else None for i in range(n)]
    return LibraryMatch(out_names, angles, matched, lib_index)
