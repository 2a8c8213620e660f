"""Average-error pruning scores: endmember average RMSE (EAR) and minimum average spectral angle
(MASA), each the mean over the rest of a candidate's class of the two-endmember model's error.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from .two_endmember import _check, _in_class_mean, two_endmember_models

__all__ = ["ear", "masa"]


def ear(spectra: np.ndarray, classes: Sequence[str], *, shade: np.ndarray | None = None) -> np.ndarray:
    """Endmember average RMSE (EAR): how well each spectrum models the rest of its class.

    ``EAR_i = mean over j in class(i), j != i, of RMSE_ij``, with ``RMSE_ij`` the root mean square
    error of modelling spectrum ``j`` by candidate ``i`` and shade with sum-to-one fractions and no
    bounds on them (the two-endmember model of :mod:`.two_endmember`). Lower is better.

    Parameters
    ----------
    spectra : (n, n_bands) ndarray
        Reflectance [0..1] of the bundle library.
    classes : (n,) sequence of str
        Class (bundle) label of each spectrum.
    shade : (n_bands,) ndarray, optional
        Shade spectrum; default zero reflectance (photometric shade).

    Returns
    -------
    (n,) float64 ndarray
        EAR [reflectance]; NaN for a spectrum alone in its class.

    References
    ----------
    Dennison, P. E. & Roberts, D. A. (2003). Endmember selection for multiple endmember spectral
    mixture analysis using endmember average RMSE. Remote Sensing of Environment 87:123-135.
    doi:10.1016/S0034-4257(03)00135-4

    Examples
    --------
    >>> s = np.array([[0.2, 0.4], [0.3, 0.5], [0.25, 0.45]])
    >>> int(np.argmin(ear(s, ["soil", "soil", "soil"])))
    2
    """
    s, labels, sh = _check(spectra, classes, shade)
    return _in_class_mean(two_endmember_models(s, sh).rmse, labels)


def masa(spectra: np.ndarray, classes: Sequence[str], *, shade: np.ndarray | None = None) -> np.ndarray:
    """Minimum average spectral angle (MASA) score: mean angle to the rest of the class.

    ``MASA_i = mean over j in class(i), j != i, of angle_ij``, the spectral angle between spectrum
    ``j`` and its model by candidate ``i`` and shade; with zero shade this is the angle between the
    two spectra. The candidate with the smallest value is the class's MASA endmember.

    Parameters
    ----------
    spectra : (n, n_bands) ndarray
        Reflectance [0..1].
    classes : (n,) sequence of str
        Class label of each spectrum.
    shade : (n_bands,) ndarray, optional
        Shade spectrum; default zero reflectance.

    Returns
    -------
    (n,) float64 ndarray
        Mean spectral angle [rad]; NaN for a spectrum alone in its class.

    References
    ----------
    Dennison, P. E., Halligan, K. Q. & Roberts, D. A. (2004). A comparison of error metrics and
    constraints for multiple endmember spectral mixture analysis and spectral angle mapper. Remote
    Sensing of Environment 93:359-367. doi:10.1016/j.rse.2004.07.013

    Examples
    --------
    >>> s = np.array([[0.2, 0.4], [0.4, 0.2], [0.3, 0.3]])
    >>> np.rad2deg(masa(s, ["a", "a", "a"])).round(3).tolist()
    [27.652, 27.652, 18.435]
    """
    s, labels, sh = _check(spectra, classes, shade)
    return _in_class_mean(two_endmember_models(s, sh).angle, labels)
