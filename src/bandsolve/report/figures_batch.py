"""Figures of routine results: the batch (per sample or as distributions) and the outlier
map, drawn headless like :mod:`bandsolve.report.figures` (same palette and conventions).

They stay readable from one sample to 100,000: the per-sample view is kept for small batches,
distributions replace it for large ones, and the outlier map names at most
:data:`MAX_LABELS` points (the farthest beyond a limit).
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
from matplotlib.figure import Figure

from bandsolve.concentrations import split_unit
from bandsolve.report.figures import (
    HIGHLIGHT,
    MARKERS,
    NORMAL,
    _new,
    _panel_grid,
    concentration_label,
    readable_log_axis,
)

__all__ = ["MAX_LABELS", "batch_distribution_figure", "batch_figure", "outlier_map_figure"]

#: Points of the outlier map named by their sample id, at most.
MAX_LABELS = 12


def outlier_map_figure(x_ratio: np.ndarray, residual_ratio: np.ndarray, *,
                       groups: Sequence[str] | None = None,
                       sample_ids: Sequence[str] | None = None,
                       x_label: str = "Hotelling T² / limit [ratio]",
                       y_label: str = "Q residual / limit [ratio]",
                       title: str = "Outlier map") -> Figure:
    """Spectral residual against distance inside the model, both as ratios to their limits.

    Points with either ratio at or above 1 are filled vermilion and labelled with their id.

    Parameters
    ----------
    x_ratio : ndarray, shape (n,)
        Hotelling T² (PLS) or leverage (CLS) divided by its limit.
    residual_ratio : ndarray, shape (n,)
        Q residual (PLS; ``Q/(1 + h)`` where the limit is set on it) or residual F ratio (CLS)
        divided by its limit.
    groups : sequence of str, length n, optional
        Set of each point (calibration, validation, batch): one marker per set.
    """
    x = np.asarray(x_ratio, dtype=float)
    y = np.asarray(residual_ratio, dtype=float)
    names = list(groups) if groups is not None else ["samples"] * x.size
    ids = list(sample_ids) if sample_ids is not None else [""] * x.size
    over = (np.nan_to_num(x) >= 1) | (np.nan_to_num(y) >= 1)
    fig, (ax,) = _new((6.4, 4.6))
    size = 6 if x.size <= 200 else 3 if x.size <= 5000 else 1.5
    for i, name in enumerate(dict.fromkeys(names)):
        sel = np.array([g == name for g in names])
        for flag, colour, fill in ((False, NORMAL, "none"), (True, HIGHLIGHT, HIGHLIGHT)):
            pick = sel & (over == flag)
            if pick.any():
                ax.plot(x[pick], y[pick], linestyle="none", marker=MARKERS[i % 8],
                        color=colour, markerfacecolor=fill, markersize=size,
                        label=f"{name}{' (over a limit)' if flag else ''}")
    # Name the points farthest beyond a limit; a crowd of labels names nothing legibly.
    worst = np.flatnonzero(over)
    if worst.size > MAX_LABELS:
        beyond = np.fmax(np.nan_to_num(x[worst]), np.nan_to_num(y[worst]))
        worst = worst[np.argsort(-beyond, kind="stable")[:MAX_LABELS]]
    # Neighbours along x get labels at staggered heights, so close points stay readable.
    for j, i in enumerate(sorted(worst, key=lambda i: np.nan_to_num(x[i]))):
        ax.annotate(str(ids[i]), (x[i], y[i]), textcoords="offset points",
                    xytext=(4 + 14 * (j % 2), (-12, 8, -26, 22, -40, 36)[j % 6]), fontsize=7,
                    arrowprops={"arrowstyle": "-", "color": "0.5", "linewidth": 0.5})
    ax.axvline(1.0, color="0.3", linestyle="--", linewidth=1)
    ax.axhline(1.0, color="0.3", linestyle="--", linewidth=1, label="limit (ratio 1)")
    finite = np.concatenate([x[np.isfinite(x)], y[np.isfinite(y)], [1.0]])
    if finite.max() > 20 and finite[finite > 0].min() > 0:
        ax.set_xscale("log")
        ax.set_yscale("log")
        readable_log_axis(ax.xaxis)
        readable_log_axis(ax.yaxis)
    if worst.size:  # head room above the highest points for their names
        low, high = ax.get_ylim()
        ax.set_ylim(low, high * 10 if ax.get_yscale() == "log" else high + 0.25 * (high - low))
    ax.set(xlabel=x_label, ylabel=y_label, title=title)
    ax.legend(frameon=False, fontsize=8)
    return fig


def batch_figure(sample_ids: Sequence[str], estimates: np.ndarray, low: np.ndarray,
                 high: np.ndarray, analytes: Sequence[str], flagged: Sequence[bool], *,
                 interval: str = "95 % prediction interval",
                 title: str = "Prediction batch") -> Figure:
    """Concentration per sample with its interval, one panel per analyte, flags marked.

    Parameters
    ----------
    estimates, low, high : ndarray, shape (n, m)
        Estimates and interval ends in each analyte's unit (NaN ends: no interval drawn).
    flagged : sequence of bool, length n
        Samples with at least one flag (drawn as vermilion crosses).

    One legend serves all panels; it sits right of the axes, so it never covers a point.
    More than three analytes are laid out in two columns of panels, so the figure keeps a
    page's proportions.
    """
    est = np.asarray(estimates, dtype=float).reshape(len(sample_ids), -1)
    lo = np.asarray(low, dtype=float).reshape(est.shape)
    hi = np.asarray(high, dtype=float).reshape(est.shape)
    bad = np.asarray(flagged, dtype=bool)
    m = est.shape[1]
    pos = np.arange(len(sample_ids))
    ncols = 1 if m <= 3 else 2
    nrows = -(-m // ncols)
    width = min(11.0, max(6.0, ncols * (0.12 * len(pos) + 1.5) + 1.2))
    fig, axes = _new((width, 2.3 * nrows + 1.0), ncols, nrows, sharex=True)
    for k, (ax, analyte) in enumerate(zip(axes, analytes, strict=False)):
        err = np.vstack([est[:, k] - lo[:, k], hi[:, k] - est[:, k]])
        for flag, colour, marker, label in ((False, NORMAL, "o", "estimate"),
                                            (True, HIGHLIGHT, "X", "flagged sample")):
            pick = bad == flag
            if pick.any():
                ax.errorbar(pos[pick], est[pick, k], yerr=np.nan_to_num(err[:, pick]),
                            linestyle="none", marker=marker, color=colour, capsize=3,
                            markersize=6, label=label)
        ax.axhline(0.0, color="0.6", linewidth=0.6)
        ax.set_ylabel(concentration_label(analyte), fontsize=8)
    # One legend for all panels, outside the axes (right of them): it never hides a point.
    handles, labels = axes[0].get_legend_handles_labels()
    fig.legend(handles, labels, loc="outside right upper", frameon=False, fontsize=7,
               title=f"bars:\n{interval}", title_fontsize=7)
    for ax in axes[m:]:
        ax.set_visible(False)
    for column in range(ncols):  # sample names under the lowest panel of each column
        ax = axes[[k for k in range(m) if k % ncols == column][-1]]
        ax.tick_params(labelbottom=True)
        ax.set_xticks(pos, list(sample_ids), rotation=60, ha="right",
                      fontsize=7 if len(pos) <= 30 else 5)
        ax.set_xlabel("sample")
    fig.suptitle(title)
    return fig


def batch_distribution_figure(estimates: np.ndarray, analytes: Sequence[str],
                              flagged: Sequence[bool], *, bins: int = 40,
                              title: str = "Prediction batch") -> Figure:
    """Histogram of each analyte's estimates, flagged samples stacked on top in vermilion.

    Parameters
    ----------
    estimates : ndarray, shape (n, m)
        Concentrations in each analyte's unit (NaN left out).
    flagged : sequence of bool, length n
        Samples with at least one flag.
    """
    est = np.asarray(estimates, dtype=float).reshape(len(flagged), -1)
    bad = np.asarray(flagged, dtype=bool)
    nrows, ncols = _panel_grid(est.shape[1])
    fig, axes = _new((3.6 * ncols + 0.4, 2.8 * nrows + 0.6), ncols, nrows)
    for k, (ax, analyte) in enumerate(zip(axes, analytes, strict=False)):
        values = est[:, k]
        ok = np.isfinite(values)
        ax.hist([values[ok & ~bad], values[ok & bad]], bins=bins, stacked=True,
                color=[NORMAL, HIGHLIGHT], label=["not flagged", "flagged"])
        ax.set(xlabel=concentration_label(analyte), ylabel="samples [count]",
               title=split_unit(analyte)[0])
    for ax in axes[est.shape[1]:]:
        ax.set_visible(False)
    handles, labels = axes[0].get_legend_handles_labels()
    fig.legend(handles, labels, loc="outside right upper", frameon=False, fontsize=8)
    fig.suptitle(f"{title}: {len(est)} spectra")
    return fig
