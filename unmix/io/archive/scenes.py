"""What a delivered Level-2 scene is made of, whatever its agency: band files, quality band, scaling.

:class:`Scene` holds paths (GDAL paths: plain files, ``/vsitar/`` members of delivered tar files, or
http(s) assets through ``/vsicurl/``) and numbers only, so it pickles to dask workers. The readers of
the agencies' layouts (:mod:`.landsat`, :mod:`.sentinel2`) build scenes; :mod:`.quality` decodes their
quality bands.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

__all__ = ["Scene"]


@dataclass(frozen=True)
class Scene:
    """One delivered scene of one date.

    Attributes
    ----------
    product_id : str
        The agency's product identifier (Landsat product id, Sentinel-2 product name).
    sensor : str
        Built-in sensor id (``landsat-8-oli``, ``sentinel-2a-msi``, ...).
    date : numpy.datetime64
        Acquisition day (UTC).
    footprint : str
        WRS-2 path/row (``"038037"``) or Sentinel-2 tile (``"T32TQM"``): scenes of one date with
        different footprints are mosaicked.
    bands : dict of str to str
        Sensor band name (``"B4"``) -> GDAL path of its file.
    scale, offset : dict of str to float
        Reflectance = stored value x scale + offset, per band.
    nodata : float
        Stored fill value of the reflectance bands.
    quality : str or None
        GDAL path of the quality band (Landsat ``QA_PIXEL``, Sentinel-2 ``SCL``).
    quality_kind : str
        How to decode it: ``"landsat-qa-pixel"`` or ``"sentinel-2-scl"``.
    metadata : str or None
        The metadata file the scaling was read from.
    processing : dict
        Other facts kept for provenance (processing level or baseline, collection, tier).
    """

    product_id: str
    sensor: str
    date: np.datetime64
    footprint: str
    bands: dict
    scale: dict
    offset: dict
    nodata: float
    quality: str | None
    quality_kind: str
    metadata: str | None = None
    processing: dict = field(default_factory=dict)

    def __hash__(self) -> int:
        return hash((self.product_id, self.footprint))
