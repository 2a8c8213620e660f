"""The spectral-library container: reflectance spectra with names, class labels and metadata.

A :class:`SpectralLibrary` holds reflectance spectra (0..1) either on a wavelength grid [nm]
("full-resolution") or per sensor band ("resampled": ``band_names`` set, ``wavelengths`` are the band
centres). Reading and writing library files lives in :mod:`unmix.io.library`.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np

from ..errors import InputError, ShapeError, UnknownNameError

__all__ = ["SpectralLibrary"]


def _ro(a: np.ndarray) -> np.ndarray:
    a = np.array(a, dtype=np.float64, copy=True)
    a.setflags(write=False)
    return a


@dataclass(frozen=True, eq=False)
class SpectralLibrary:
    """Reflectance spectra with names, class labels and metadata.

    Parameters
    ----------
    wavelengths : (n_wl,) ndarray of float64
        Wavelengths [nm], strictly increasing for a full-resolution library; band centres [nm] for a
        resampled one (then in the chosen band order).
    spectra : (n_spectra, n_wl) ndarray of float64
        Reflectance 0..1.
    names : tuple of str
        Unique, non-empty spectrum names.
    classes : tuple of (str or None), optional
        Class label per spectrum (endmember bundle), None where unknown. Default: all None.
    band_names : tuple of str, optional
        Band names of a resampled library; None for a full-resolution one.
    metadata : dict, optional
        Free metadata, copied (JSON-serialisable values keep the library writable) (``source``, ``invented``, ``description``, ``sensor``, ...).

    Examples
    --------
    >>> lib = SpectralLibrary(np.array([500.0, 600.0]), np.array([[0.1, 0.2], [0.3, 0.3]]),
    ...                       ("a", "b"), ("soil", "soil"))
    >>> len(lib), lib.by_class()["soil"].shape
    (2, (2, 2))
    """

    wavelengths: np.ndarray
    spectra: np.ndarray
    names: tuple[str, ...]
    classes: tuple[str | None, ...] | None = None
    band_names: tuple[str, ...] | None = None
    metadata: Mapping = field(default_factory=dict)

    def __post_init__(self):
        wl = _ro(self.wavelengths)
        sp = _ro(self.spectra)
        if wl.ndim != 1 or wl.size < 1:
            raise ShapeError(f"wavelengths must be a 1-D array with at least one value, got shape {wl.shape}")
        if sp.ndim == 1:
            sp = _ro(sp[None, :])
        if sp.ndim != 2 or sp.shape[1] != wl.size:
            raise ShapeError(
                f"spectra must have shape (n_spectra, n_wl={wl.size}), got {sp.shape}; one row per spectrum"
            )
        names = tuple(str(n) for n in self.names)
        if len(names) != sp.shape[0]:
            raise ShapeError(f"{len(names)} names given for {sp.shape[0]} spectra")
        if any(not n.strip() for n in names):
            raise InputError("spectrum names must be non-empty")
        dup = sorted({n for n in names if names.count(n) > 1})
        if dup:
            raise InputError(f"spectrum names must be unique; repeated: {', '.join(dup)}")
        classes = (None,) * len(names) if self.classes is None else tuple(self.classes)
        if len(classes) != len(names):
            raise ShapeError(f"{len(classes)} class labels given for {len(names)} spectra")
        classes = tuple(None if c is None or str(c) == "" else str(c) for c in classes)
        bn = None if self.band_names is None else tuple(str(b) for b in self.band_names)
        if bn is not None:
            if len(bn) != wl.size:
                raise ShapeError(f"{len(bn)} band names given for {wl.size} bands")
            dupb = sorted({b for b in bn if bn.count(b) > 1})
            if dupb:
                raise InputError(f"band names must be unique; repeated: {', '.join(dupb)}")
        elif wl.size > 1 and np.any(np.diff(wl) <= 0):
            raise InputError("wavelengths of a full-resolution library must increase strictly")
        if not np.all(np.isfinite(wl)):
            raise InputError("wavelengths must be finite")
        object.__setattr__(self, "wavelengths", wl)
        object.__setattr__(self, "spectra", sp)
        object.__setattr__(self, "names", names)
        object.__setattr__(self, "classes", classes)
        object.__setattr__(self, "band_names", bn)
        object.__setattr__(self, "metadata", dict(self.metadata))  # a copy: the caller's dict stays separate

    def __len__(self) -> int:
        return len(self.names)

    @property
    def resampled(self) -> bool:
        """True when the library holds values per sensor band."""
        return self.band_names is not None

    @property
    def sensor(self) -> str | None:
        """Sensor id of a resampled library (``metadata["sensor"]``), else None."""
        s = self.metadata.get("sensor")
        return None if s is None else str(s)

    def _missing(self, names) -> list[str]:
        return [n for n in names if n not in self.names]

    def spectrum(self, name: str) -> np.ndarray:
        """The spectrum called ``name``, shape (n_wl,)."""
        return self.select([name]).spectra[0]

    def select(self, names: Sequence[str]) -> SpectralLibrary:
        """A library holding only ``names``, in the order given.

        Raises :class:`unmix.errors.UnknownNameError` listing the available names if one is unknown.
        """
        if isinstance(names, str):
            names = [names]
        names = list(names)
        missing = self._missing(names)
        if missing:
            raise UnknownNameError(
                f"spectrum {', '.join(map(repr, missing))} not in the library; available: {', '.join(self.names)}"
            )
        idx = [self.names.index(n) for n in names]
        return SpectralLibrary(
            self.wavelengths,
            self.spectra[idx],
            tuple(names),
            tuple(self.classes[i] for i in idx),
            self.band_names,
            dict(self.metadata),
        )

    def by_class(self) -> dict[str, np.ndarray]:
        """Spectra grouped by class label: ``{class: (n_members, n_wl) array}``.

        A spectrum without a class label forms its own group under its name. Classes appear in order of
        first occurrence.
        """
        out: dict[str, list[int]] = {}
        for i, (n, c) in enumerate(zip(self.names, self.classes)):
            out.setdefault(n if c is None else c, []).append(i)
        return {k: self.spectra[v] for k, v in out.items()}

    def with_metadata(self, **updates) -> SpectralLibrary:
        """A copy whose metadata is updated with ``updates``."""
        md = dict(self.metadata)
        md.update(updates)
        return SpectralLibrary(self.wavelengths, self.spectra, self.names, self.classes, self.band_names, md)
