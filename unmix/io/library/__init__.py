"""Read and write spectral libraries and tabulated spectral responses.

Library file format
-------------------
A library is a comma-separated text file (UTF-8) with one row per wavelength and one column per
spectrum::

    wavelength_nm,green_vegetation,bright_soil
    400,0.0412,0.1503
    410,0.0420,0.1551
    ...

* The first column is ``wavelength_nm`` (nanometres) or ``wavelength_um`` (micrometres, converted to
  nm on reading). Wavelengths must increase strictly.
* Every other column is one spectrum; its header is the spectrum name (unique, non-empty). Values are
  reflectance 0..1 (see ``scale_factor`` below).
* A **resampled** library (values per sensor band) has a text column ``band`` right after the
  wavelength column; the wavelength is then the band centre [nm], rows follow the chosen band order
  (wavelengths need not increase) and band names must be unique.
* Blank lines and lines starting with ``#`` are ignored; every other cell must hold a number.

Optional JSON sidecar with the same stem (``library.csv`` -> ``library.json``)::

    {"units": "nm", "scale_factor": 1, "add_offset": 0, "source": "...", "invented": true,
     "description": "...", "sensor": "landsat-8-oli",
     "spectra": {"green_vegetation": {"class": "green_vegetation", "description": "..."}}}

``units`` must agree with the wavelength header (``nm`` or ``um``); reflectance = stored value x
``scale_factor`` + ``add_offset`` (the CF conventions' packing attributes: 0.0001 for integers scaled by
10 000, 0.01 for percent); the ``reflectance_scale`` of earlier releases (a divisor) is still read, with a
``DeprecatedKeyWarning``, for one release; ``sensor`` names the sensor of
a resampled library; ``spectra`` gives a class label (endmember bundle) and a description per spectrum.
Other keys are kept as metadata.

Validation rule for reflectance: after scaling every value must lie in [-0.05, 1.5]. Small negative
values occur in calibrated field spectra; anything above 1.5 almost always means the scale is wrong.
Every failure raises :class:`unmix.errors.LibraryFormatError` naming the file, the line (1-based, as an
editor shows it) and the column. A missing file raises :class:`unmix.errors.LibraryReadError`.

Shipped libraries
-----------------
The invented demonstration libraries shipped with unmix are found with :func:`shipped_library_path`
(and :func:`shipped_library_dir`), in a regular install and in a source checkout alike.

Response file format
--------------------
A tabulated spectral response is a CSV with first column ``wavelength_nm`` (or ``wavelength_um``) and one
column per band (header = band name) holding the relative response 0..1 (any positive scale is divided
by the band's maximum; noise down to -0.01 is set to 0). It is the layout of the built-in sensors'
tables in ``unmix/data/``, and what ``--response FILE`` reads. Read it with :func:`read_response` and
build a sensor with :func:`read_response_sensor` (id = the file's stem) or
:func:`unmix.sensors.tabulated_sensor`. Every failure raises :class:`unmix.errors.LibraryFormatError`
naming the file, the line and the column.
"""

from .reader import REFLECTANCE_RANGE, read_library, sidecar_path
from .responses import ResponseTable, read_response, read_response_sensor
from .shipped import read_shipped_library, shipped_library_dir, shipped_library_path
from .writer import write_library

__all__ = [
    "REFLECTANCE_RANGE",
    "ResponseTable",
    "read_library",
    "write_library",
    "read_response",
    "read_response_sensor",
    "sidecar_path",
    "shipped_library_dir",
    "shipped_library_path",
    "read_shipped_library",
]
