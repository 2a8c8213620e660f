"""Figure of fraction agreement: estimated against reference fractions, one panel per endmember."""

from __future__ import annotations

import numpy as np
import pandas as pd
from matplotlib.figure import Figure

__all__ = ["fraction_scatter_figure"]


def fraction_scatter_figure(estimated, reference, table: pd.DataFrame) -> Figure:
    """Scatter of estimated (y) against reference (x) fractions per endmember, with the 1:1 line.

    Dark markers on white, the 1:1 line dashed and the least-squares line solid, so the figure reads the
    same without colour (in grey, and for colour-blind readers). Each panel states n, MAE, RMSE, bias and
    R^2 from ``table``.

    Parameters
    ----------
    estimated, reference : (n_points, n_endmembers) array_like of float
        Fractions at the points; NaN pairs are not drawn.
    table : pandas.DataFrame
        From :func:`unmix.accuracy.fraction_agreement` (index: endmember names, same column order).

    Returns
    -------
    matplotlib.figure.Figure
        Built without pyplot (the IO layer saves it).

    References
    ----------
    Pineiro, G., Perelman, S., Guerschman, J. P., & Paruelo, J. M. (2008). How to evaluate models:
    observed vs. predicted or predicted vs. observed? Ecological Modelling 216, 316-322.
    https://doi.org/10.1016/j.ecolmodel.2008.05.006
    """
    e = np.asarray(estimated, dtype=float).reshape(len(np.asarray(estimated)), -1)
    r = np.asarray(reference, dtype=float).reshape(e.shape)
    names = [str(n) for n in table.index]
    fig = Figure(figsize=(3.1 * len(names) + 0.4, 3.4), layout="constrained")
    axes = fig.subplots(1, len(names), squeeze=False)[0]
    line = np.array([0.0, 1.0])
    for j, (ax, name) in enumerate(zip(axes, names)):
        ok = np.isfinite(e[:, j]) & np.isfinite(r[:, j])
        ax.plot(line, line, linestyle="--", color="0.45", linewidth=1, label="1:1")
        ax.scatter(r[ok, j], e[ok, j], s=14, marker="o", facecolors="none", edgecolors="#1f3b73", linewidths=0.9)
        row = table.loc[name]
        if np.isfinite(row["slope"]):
            ax.plot(line, row["intercept"] + row["slope"] * line, color="black", linewidth=1.2, label="least squares")
        ax.text(0.03, 0.97, f"n = {int(row['n'])}\nMAE = {row['mae']:.3f}\nRMSE = {row['rmse']:.3f}\n"
                f"bias = {row['bias']:+.3f}\nR² = {row['r2']:.2f}", transform=ax.transAxes, va="top", fontsize=8)
        ax.set_xlim(0, 1)
        ax.set_ylim(0, 1)
        ax.set_aspect("equal")
        ax.set_title(name, fontsize=9)
        ax.set_xlabel("reference fraction")
        if j == 0:
            ax.set_ylabel("estimated fraction")
            ax.legend(loc="lower right", fontsize=7, frameon=False)
    return fig
