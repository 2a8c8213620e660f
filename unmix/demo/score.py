"""Scoring what the tool recovered on the invented scenario against its known truth."""

from __future__ import annotations

import numpy as np
import pandas as pd
import xarray as xr

from .scenario import ENDMEMBERS, ZONES, Scenario

__all__ = ["EXPECTED", "date_checks", "fraction_errors", "sample_areas", "strong_change", "trajectory_hits"]

#: Trajectory each zone should show, per endmember (what the invented story built into it).
#: Pixels where the designed change is too weak to detect are left out (see ``strong_change``).
EXPECTED = {
    ("stable", "green_vegetation"): "stable",
    ("stable", "sand"): "stable",
    ("grazing", "green_vegetation"): "gradual_decrease",
    ("grazing", "sand"): "gradual_increase",
    ("dune", "green_vegetation"): "gradual_decrease",
    ("dune", "sand"): "gradual_increase",
    ("pivot", "green_vegetation"): "abrupt_decrease",
    ("pivot", "sand"): "abrupt_increase",
    ("recovery", "green_vegetation"): "gradual_increase",
    ("recovery", "sand"): "gradual_decrease",
}


def fraction_errors(scenario: Scenario, fractions: xr.Dataset) -> pd.DataFrame:
    """Mean absolute error and bias of recovered fractions against the truth, per endmember."""
    rows = []
    # the product holds the dates used (the date checks leave some out): score those against their truth
    at = np.searchsorted(scenario.dates.astype("datetime64[D]"), fractions["time"].values.astype("datetime64[D]"))
    for k, name in enumerate(ENDMEMBERS):
        est = np.asarray(fractions["fractions"].sel(endmember=name).values, dtype=float)
        truth = scenario.fractions[at, k]
        ok = np.isfinite(est)
        err = est[ok] - truth[ok]
        rows.append({"endmember": name, "mae": float(np.mean(np.abs(err))), "bias": float(np.mean(err)),
                     "pixel_dates": int(ok.sum())})
    return pd.DataFrame(rows)


def strong_change(scenario: Scenario) -> np.ndarray:
    """Pixels whose designed change is large enough to be called (piosphere core, whole other zones)."""
    t = np.arange(scenario.fractions.shape[0])
    gv = scenario.fractions[:, 0]
    # Net change over the record of the noise-free green fraction, from a least-squares line.
    slope_per_step = np.tensordot(t - t.mean(), gv - gv.mean(0), axes=(0, 0)) / np.sum((t - t.mean()) ** 2)
    total = np.abs(slope_per_step) * (t.size - 1)
    zone = scenario.zone
    return (zone != ZONES.index("grazing")) | (total >= 0.08)


def trajectory_hits(scenario: Scenario, trends: xr.Dataset) -> pd.DataFrame:
    """Share of each zone's pixels given the expected trajectory label, per endmember."""
    traj = trends["trajectory"]
    meanings = str(traj.attrs["flag_meanings"]).split()
    values = np.atleast_1d(traj.attrs["flag_values"]).astype(int)
    code_of = dict(zip(meanings, values.tolist()))
    strong = strong_change(scenario)
    rows = []
    for (zone_name, endmember), label in EXPECTED.items():
        mask = (scenario.zone == ZONES.index(zone_name)) & strong
        codes = np.asarray(traj.sel(endmember=endmember).values)[mask]
        hits = int(np.count_nonzero(codes == code_of[label]))
        rows.append({"zone": zone_name, "endmember": endmember, "expected": label, "pixels": int(mask.sum()),
                     "hit_pct": 100.0 * hits / mask.sum() if mask.sum() else np.nan})
    return pd.DataFrame(rows)


def date_checks(faults: list[dict], ledger: xr.Dataset) -> pd.DataFrame:
    """What the date checks found on each fault built into the record, and what was done with the date.

    Parameters
    ----------
    faults : list of dict
        ``date`` and ``built in`` (a description) per fault (:func:`unmix.demo.run.inject_faults`).
    ledger : xarray.Dataset
        The ledger of the run (:func:`unmix.io.ledger.ledger_from_product`).
    """
    days = ledger["time"].values.astype("datetime64[D]")
    rows = []
    for fault in faults:
        i = int(np.flatnonzero(days == np.datetime64(fault["date"], "D"))[0])
        found = []
        if "shift_y" in ledger and np.isfinite(ledger["shift_y"].values[i]):
            found.append(f"shift {float(np.hypot(ledger['shift_y'].values[i], ledger['shift_x'].values[i])):.2f} px")
        if "gain" in ledger:
            gain = ledger["gain"].values[i]
            if np.isfinite(gain).any():
                j = int(np.nanargmax(np.abs(gain - 1.0)))
                found.append(f"gain {float(gain[j]):.3f} in {ledger['band'].values[j]}: the date reads "
                             f"{1 / float(gain[j]):.2f} x the reference")
        reason = str(ledger["reason"].values[i])
        rows.append({"date": fault["date"], "built in": fault["built in"], "measured": "; ".join(found) or "-",
                     "used": bool(ledger["used"].values[i]), "ledger says": reason or "-"})
    return pd.DataFrame(rows)


def sample_areas(accuracy: pd.DataFrame, truth: np.ndarray, rule: str, pixel_ha: float = 0.09) -> pd.DataFrame:
    """Mapped (pixel-count) and sample-based areas of each class of a rule map beside the invented truth.

    Parameters
    ----------
    accuracy : pandas.DataFrame
        ``accuracy.csv`` of ``unmix assess`` (one row per class).
    truth : (y, x) bool ndarray
        Where the rule truly holds.
    rule : str
    pixel_ha : float
        Area of one pixel [ha] (30 m pixels: 0.09 ha).
    """
    true_ha = {"true": float(truth.sum()) * pixel_ha, "false": float((~truth).sum()) * pixel_ha}
    rows = []
    for _, r in accuracy.iterrows():
        name = str(r["class"]).lower()  # pandas reads the classes 'true' / 'false' as booleans
        rows.append({"rule": rule, "class": name, "mapped [ha]": float(r["mapped_area_ha"]),
                     "sample-based [ha]": float(r["area_ha"]), "± 95 % [ha]": float(r["area_ci95_ha"]),
                     "true [ha]": true_ha.get(name, float("nan"))})
    return pd.DataFrame(rows)
