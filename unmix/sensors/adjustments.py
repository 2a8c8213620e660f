"""Published cross-sensor band adjustments: reflectance of one sensor made comparable to Landsat 8 OLI.

A record that switches sensor can be unmixed in two ways: each date with the endmembers resampled to its
own sensor's measured responses (the default, see :func:`unmix.cube.unmix_cube`), or every date first
adjusted to one reference sensor with published per-band linear transformations, then unmixed with that
sensor's endmembers. This module holds the transformations, ``target = slope x source + offset`` per
band role, with their sources:

* ``roy2016``: Landsat 7 ETM+ to Landsat 8 OLI, ordinary least squares fits over the conterminous
  United States (Roy et al. 2016, Table 2, OLS coefficients; values as widely quoted, from memory).
* ``claverie2018``: Sentinel-2 MSI to Landsat 8 OLI bandpass adjustment of the Harmonized Landsat
  Sentinel-2 product v1.4 (Claverie et al. 2018; values of the HLS v1.4 user guide, from memory),
  derived for Sentinel-2A and applied to Sentinel-2B as well.

References
----------
Roy, D. P., Kovalskyy, V., Zhang, H. K., Vermote, E. F., Yan, L., Kumar, S. S., Egorov, A. (2016).
Characterization of Landsat-7 to Landsat-8 reflective wavelength and normalized difference vegetation
index continuity. Remote Sensing of Environment 185, 57-70. https://doi.org/10.1016/j.rse.2015.12.024

Claverie, M., Ju, J., Masek, J. G., Dungan, J. L., Vermote, E. F., Roger, J.-C., Skakun, S. V., Justice,
C. (2018). The Harmonized Landsat and Sentinel-2 surface reflectance data set. Remote Sensing of
Environment 219, 145-161. https://doi.org/10.1016/j.rse.2018.09.002
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from ..errors import UnknownNameError

__all__ = ["BandAdjustment", "ADJUSTMENTS", "adjustment_for", "adjust"]


@dataclass(frozen=True)
class BandAdjustment:
    """``target = slope x source + offset`` per band role, from ``source`` sensors to ``target``."""

    name: str
    sources: tuple
    target: str
    slopes: dict
    offsets: dict
    reference: str

    def coefficients(self, roles: Sequence[str]) -> tuple[np.ndarray, np.ndarray]:
        """(slopes, offsets) in the order of ``roles``; a role without a published value is left as is."""
        return (np.array([self.slopes.get(r, 1.0) for r in roles]),
                np.array([self.offsets.get(r, 0.0) for r in roles]))


_ROLES6 = ("blue", "green", "red", "nir", "swir1", "swir2")

ROY_2016 = BandAdjustment(
    name="roy2016", sources=("landsat-7-etm",), target="landsat-8-oli",
    slopes=dict(zip(_ROLES6, (0.8474, 0.8483, 0.9047, 0.8462, 0.8937, 0.9071))),
    offsets=dict(zip(_ROLES6, (0.0003, 0.0088, 0.0061, 0.0412, 0.0254, 0.0172))),
    reference="Roy et al. (2016) Remote Sensing of Environment 185:57-70, doi:10.1016/j.rse.2015.12.024, "
              "Table 2 (OLS, ETM+ to OLI)",
)
CLAVERIE_2018 = BandAdjustment(
    name="claverie2018", sources=("sentinel-2a-msi", "sentinel-2b-msi"), target="landsat-8-oli",
    slopes=dict(zip(_ROLES6, (0.9778, 1.0053, 0.9765, 0.9983, 0.9987, 1.0030))),
    offsets=dict(zip(_ROLES6, (-0.0040, -0.0009, 0.0009, -0.0001, -0.0011, -0.0012))),
    reference="Claverie et al. (2018) Remote Sensing of Environment 219:145-161, doi:10.1016/j.rse.2018.09.002 "
              "(HLS v1.4 bandpass adjustment, MSI to OLI)",
)

#: source sensor -> its adjustment to Landsat 8 OLI
ADJUSTMENTS = {s: adj for adj in (ROY_2016, CLAVERIE_2018) for s in adj.sources}


def adjustment_for(sensor: str) -> BandAdjustment | None:
    """The published adjustment of ``sensor`` to OLI, None for OLI/OLI-2 themselves."""
    if sensor in ("landsat-8-oli", "landsat-9-oli"):
        return None
    if sensor not in ADJUSTMENTS:
        raise UnknownNameError(f"no published band adjustment of {sensor} to Landsat 8 OLI is built in (known: "
                               f"{', '.join(ADJUSTMENTS)}); unmix with each sensor's own endmembers instead")
    return ADJUSTMENTS[sensor]


def adjust(reflectance: np.ndarray, sensor: str, roles: Sequence[str]) -> np.ndarray:
    """Reflectance (..., role) of ``sensor`` adjusted to Landsat 8 OLI.

    Examples
    --------
    >>> adjust(np.array([0.1, 0.1, 0.1, 0.3, 0.2, 0.1]), "landsat-7-etm", _ROLES6).round(4).tolist()
    [0.085, 0.0936, 0.0966, 0.2951, 0.2041, 0.1079]
    """
    adj = adjustment_for(sensor)
    if adj is None:
        return np.asarray(reflectance)
    slopes, offsets = adj.coefficients(roles)
    return np.asarray(reflectance) * slopes + offsets
