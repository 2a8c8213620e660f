"""Errors and warnings raised by unmix.

Every error derives from :class:`UnmixError` and also from the builtin exception it resembles, so
``except ValueError`` keeps working for callers who do not know this package. Every warning derives
from :class:`UnmixWarning`, so users can filter the package's warnings as a group or one by one.
Messages name the file, band, date or parameter at fault and say how to fix it.
"""

from __future__ import annotations

__all__ = [
    "UnmixError",
    "InputError",
    "ShapeError",
    "BandMismatchError",
    "RankError",
    "LibraryFormatError",
    "UnknownNameError",
    "StackReadError",
    "LibraryReadError",
    "GridMismatchError",
    "OutputExistsError",
    "ProductClaimedError",
    "ProductWriteError",
    "ProductMismatchError",
    "SampleFormatError",
    "SampleReadError",
    "ZoneFileError",
    "PlanError",
    "BrowserError",
    "UnmixWarning",
    "CollinearityWarning",
    "ComparabilityWarning",
    "WindowWarning",
    "EmptyWindowYearWarning",
    "WindowSpreadWarning",
    "PlanVersionWarning",
]


class UnmixError(Exception):
    """Root of every error raised on purpose by unmix."""


class InputError(UnmixError, ValueError):
    """An argument has a value that cannot be used (range, dtype, missing values)."""


class ShapeError(InputError):
    """Array shapes do not fit together."""


class SeriesTooLongError(InputError):
    """A series is longer than a method can handle in bounded memory (pairwise slopes)."""


class BandMismatchError(InputError):
    """Band counts or band names of two inputs disagree."""


class RankError(InputError):
    """More endmembers than the bands can separate."""


class LibraryFormatError(InputError):
    """A spectral library or response file breaks the documented format (file, line and column named)."""


class UnknownNameError(InputError, KeyError):
    """A sensor, band, endmember or method name is not known; the message lists the known ones."""

    def __str__(self) -> str:  # KeyError would quote the message
        return str(self.args[0]) if self.args else ""


class StackReadError(UnmixError, OSError):
    """A file of an image stack cannot be found, opened or read."""


class LibraryReadError(UnmixError, OSError):
    """A spectral library or response file cannot be found or opened (the path is named)."""


class GridMismatchError(InputError):
    """Dates of a stack are not on one grid (CRS, transform or shape)."""


class OutputExistsError(UnmixError, FileExistsError):
    """A product exists already and ``overwrite`` was not asked for."""


class ProductClaimedError(OutputExistsError):
    """Another run is writing the same product now (its claim file names host, pid and start time)."""


class ProductWriteError(UnmixError, OSError):
    """A product cannot be written: folder not writable, disk full, file size limit (product named)."""


class ProductMismatchError(InputError):
    """Products given together do not belong together: their grids (CRS, transform, shape) or dates differ."""


class SampleFormatError(InputError):
    """An interpreted sample or reference-points file breaks its format (file, row and column named)."""


class SampleReadError(UnmixError, OSError):
    """A sample, strata or reference-points file cannot be found or read (the path is named)."""


class ZoneFileError(InputError):
    """A zones file cannot be used: missing, unreadable, empty, without a CRS, or with geometries that are
    not polygons (file and feature named)."""


class PlanError(InputError):
    """A plan file cannot be used: not TOML, an unknown key, a wrong value, a missing key or path, or choices
    that exclude each other (the file and the dotted key named)."""


class BrowserError(UnmixError, RuntimeError):
    """Headless Chromium (report checks, PDF, screenshots) is missing, failed or did not answer in time."""


class UnmixWarning(UserWarning):
    """Root of every warning issued by unmix."""


class CollinearityWarning(UnmixWarning):
    """Two endmembers are so alike that their fractions are poorly determined."""


class ComparabilityWarning(UnmixWarning):
    """A date is shifted more than a fifth of a pixel, its shift could not be measured, or its radiometry
    departs from its reference date (dates named). ``settings`` names the date-check settings (fields of
    :class:`unmix.cube.date_checks.CheckSettings`) that act on such dates."""

    def __init__(self, message: str = "", settings: tuple[str, ...] = ()):
        super().__init__(message)
        self.settings = tuple(settings)


class ImplausibleReflectanceWarning(UnmixWarning):
    """Reflectance outside the plausible range was masked as no data (names the dates and counts)."""


class DeprecatedKeyWarning(UnmixWarning, DeprecationWarning):
    """A file uses a key that is still read but will be dropped (the message names the replacement)."""


class WindowWarning(UnmixWarning):
    """A phenological window selects dates that may not compare like with like between years."""


class EmptyWindowYearWarning(WindowWarning):
    """A year has no observation inside the day-of-year window (its composite is missing; years named)."""


class WindowSpreadWarning(WindowWarning):
    """The window's dates of different years lie further apart than the set limit (days and years named)."""


class PlanVersionWarning(UnmixWarning):
    """A plan was written for (or run with) another unmix version: its results may differ."""
