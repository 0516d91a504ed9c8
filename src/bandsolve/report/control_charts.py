"""Figures of the drift watch: a control chart and its CUSUM for one watched series.

Plain inputs in, a headless matplotlib Figure out (see :mod:`bandsolve.report.figures` for
the palette and conventions). All numbers (limits, CUSUM, alarms) come from
:mod:`bandsolve.monitor`; nothing is computed here.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
from matplotlib.figure import Figure

from bandsolve.report.figures import HIGHLIGHT, NORMAL, _new

__all__ = ["control_chart_figure", "series_figure"]


def control_chart_figure(runs: Sequence[int], values: np.ndarray, centre: float, sigma: float,
                         upper: np.ndarray, lower: np.ndarray, h: float,
                         alarm_runs: Sequence[int], *, width: float = 3.0,
                         value_label: str = "recovery [%]", title: str = "Control chart",
                         reference_runs: int = 0) -> Figure:
    """Individuals chart (top) and two-sided CUSUM in σ units (bottom) against run id.

    Parameters
    ----------
    runs : sequence of int, length n
        Ledger run ids.
    values : ndarray, shape (n,)
        Charted values in their unit.
    centre, sigma : float
        Centre line and σ of the chart (same unit as ``values``).
    upper, lower : ndarray, shape (n,)
        CUSUM sides, σ units.
    h : float
        CUSUM decision interval.
    alarm_runs : sequence of int
        Runs with an alarm (drawn as vermilion crosses).
    reference_runs : int
        The first runs that set the limits (shaded).
    """
    fig, (ax, ax2) = _new((7.5, 5.0), 1, 2, sharex=True, height_ratios=(2, 1))
    x = np.asarray(runs)
    y = np.asarray(values, dtype=float)
    bad = np.isin(x, np.asarray(alarm_runs))
    ax.plot(x, y, color="0.55", linewidth=0.8)
    ax.plot(x[~bad], y[~bad], "o", color=NORMAL, markersize=4, label="run")
    if bad.any():
        ax.plot(x[bad], y[bad], "X", color=HIGHLIGHT, markersize=7, label="alarm")
    ax.axhline(centre, color="0.2", linewidth=1, label="centre")
    for k, style in ((width, "--"), (2.0, ":")):
        for sign in (1, -1):
            ax.axhline(centre + sign * k * sigma, color="0.35", linestyle=style, linewidth=0.9,
                       label=f"±{k:g}σ" if sign > 0 else None)
    if reference_runs:
        ax.axvspan(x[0] - 0.5, x[min(reference_runs, len(x)) - 1] + 0.5, color="0.92",
                   zorder=0, label="reference runs")
    ax.set(ylabel=value_label, title=title)
    ax.legend(frameon=False, fontsize=7, ncols=3, loc="upper left")
    ax2.plot(x, upper, color=NORMAL, label="CUSUM upward")
    ax2.plot(x, -np.asarray(lower), color=HIGHLIGHT, linestyle="--", label="CUSUM downward")
    for sign in (1, -1):
        ax2.axhline(sign * h, color="0.35", linestyle="--", linewidth=0.9)
    ax2.set(xlabel="run", ylabel="CUSUM [σ]")
    ax2.legend(frameon=False, fontsize=7, loc="upper left")
    return fig


def series_figure(series) -> Figure | None:
    """The chart of one :class:`bandsolve.batch.watch.Series` (None when not charted)."""
    chart = series.chart
    if chart is None:
        return None
    alarm_runs = [series.runs[a.index] for a in chart.alarms]
    label = {"%": "recovery [%]", "log10 ratio": "log10 median residual ratio"}.get(
        series.unit, f"found [{series.unit}]")
    return control_chart_figure(series.runs, series.values, chart.limits.centre,
                                chart.limits.sigma, chart.upper, chart.lower, chart.design.h,
                                alarm_runs, width=chart.design.width, value_label=label,
                                title=series.words(), reference_runs=chart.limits.n)
