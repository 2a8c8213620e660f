"""Band names, per-band scale/offset and quality-mask options of a stack."""

from __future__ import annotations

import os
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

import numpy as np

from ...errors import BandMismatchError, InputError, UnknownNameError
from ...sensors.roles import role_of_description
from .dates import _dates_for, _lookup_date, read_dates_csv
from .files import find_stack_files
from .geotiff import _Header


def _resolve_sensor(sensor: Any) -> Any:
    if sensor is None or not isinstance(sensor, str):
        return sensor
    from ...sensors import get_sensor

    return get_sensor(sensor)


def _as_per_band(value: Any, n: int, name: str, where: str) -> tuple[float, ...] | None:
    if value is None:
        return None
    if np.ndim(value) == 0:
        return (float(value),) * n
    values = tuple(float(v) for v in value)
    if len(values) != n:
        raise BandMismatchError(f"{len(values)} {name} values given for {n} bands of {where}; give one value or one per band")
    return values


def _resolve_qa_band(qa: Any, head: _Header, band_names: Sequence[str] | None) -> int:
    if isinstance(qa, (int, np.integer)) and not isinstance(qa, bool):
        if not 1 <= int(qa) <= head.count:
            raise InputError(f"QA band {qa} is outside bands 1..{head.count} of {head.path}; band numbers start at 1")
        return int(qa)
    name = str(qa)
    if name.isdigit():
        return _resolve_qa_band(int(name), head, band_names)
    for i, desc in enumerate(head.descriptions, start=1):
        if desc is not None and desc.lower() == name.lower():
            return i
    if band_names is not None and len(band_names) == head.count:
        for i, bn in enumerate(band_names, start=1):
            if bn.lower() == name.lower():
                return i
    known = [d for d in head.descriptions if d] or list(band_names or [])
    raise UnknownNameError(
        f"QA band {name!r} is neither a band of {head.path} nor an existing mask file or folder; "
        f"bands named in the file: {', '.join(known) if known else 'none (use a 1-based band number)'}"
    )


def _band_names_for(
    head: _Header, refl_indexes: list[int], band_names: Sequence[str] | None, sensor: Any, qa_band: int | None
) -> list[str]:
    n = len(refl_indexes)
    if band_names is not None:
        names = [str(b).strip() for b in band_names]
        if qa_band is not None and len(names) == head.count:
            names = [nm for i, nm in enumerate(names, start=1) if i != qa_band]
        if len(names) != n:
            extra = f" (plus the QA band {qa_band})" if qa_band is not None else ""
            raise BandMismatchError(
                f"{len(names)} band names given ({', '.join(names)}) but {head.path} holds {n} reflectance bands{extra}; "
                "list one name per band of the file, in file order"
            )
    else:
        descs = [head.descriptions[i - 1] for i in refl_indexes]
        sensor_bands = tuple(getattr(sensor, "band_names", ()) or ())
        roles = [role_of_description(d) for d in descs]
        if all(descs) and (not sensor_bands or all(d in sensor_bands for d in descs)):
            names = [str(d) for d in descs]
        elif any(roles) and not all(d in sensor_bands for d in descs):
            names = _names_from_roles(head, descs, roles, sensor)
        elif sensor_bands:
            if len(sensor_bands) != n:
                raise BandMismatchError(
                    f"{head.path} holds {n} reflectance bands but sensor {getattr(sensor, 'id', sensor)} has "
                    f"{len(sensor_bands)} ({', '.join(sensor_bands)}); say which bands the file holds with "
                    "band_names (--band-names B2,B3,...)"
                )
            names = list(sensor_bands)
        else:
            names = [f"band_{i}" for i in refl_indexes]
    if len(set(names)) != len(names):
        raise BandMismatchError(f"band names repeat ({', '.join(names)}); give each band of {head.path} its own name")
    return names


def _names_from_roles(head: _Header, descs: list, roles: list, sensor: Any) -> list[str]:
    """Band names of a file whose band descriptions name roles ('Red', 'SWIR1', ...), never ignored."""
    from ...sensors.roles import band_roles

    sensor_id = getattr(sensor, "id", sensor)
    unknown = [d for d, r in zip(descs, roles) if r is None]
    if unknown:
        raise BandMismatchError(f"{head.path}: band descriptions {', '.join(map(repr, descs))} mix band roles with "
                                f"names that are neither roles nor bands of {sensor_id} ({', '.join(map(repr, unknown))}); "
                                "say which bands the file holds with --band-names")
    try:
        table = band_roles(str(sensor_id))
    except Exception:
        raise BandMismatchError(f"{head.path}: band descriptions {', '.join(map(repr, descs))} name band roles, but "
                                f"sensor {sensor_id} has no role table; give --band-names") from None
    lacking = [d for d, r in zip(descs, roles) if r not in table]
    if lacking:
        raise BandMismatchError(f"{head.path}: sensor {sensor_id} has no band for the description(s) "
                                f"{', '.join(map(repr, lacking))}; give --band-names or choose the sensor that "
                                "made the file")
    return [table[r] for r in roles]


def _find_qa_files(qa: Any, files: Sequence[Path], dates: list[np.datetime64], dates_arg: Any) -> list[Path]:
    qa_files = find_stack_files(qa)
    qa_dates = _dates_for(qa_files, dates_arg if isinstance(dates_arg, (str, os.PathLike, Mapping)) and _all_listed(qa_files, dates_arg) else None)
    by_date: dict[Any, Path] = {}
    for f, d in zip(qa_files, qa_dates):
        by_date.setdefault(d, f)
    out = []
    for f, d in zip(files, dates):
        if d not in by_date:
            raise InputError(
                f"no quality-mask file for {d} (stack file {f.name}) among {len(qa_files)} mask files "
                f"({qa}); give one mask per date with the date in its name"
            )
        out.append(by_date[d])
    return out


def _all_listed(files: Sequence[Path], dates_arg: Any) -> bool:
    mapping = read_dates_csv(dates_arg) if isinstance(dates_arg, (str, os.PathLike)) else dates_arg
    return all(_lookup_date(mapping, f) is not None for f in files)

