"""Figures of a calibration, drawn headless with matplotlib (Agg); every function returns a Figure.

Each function takes plain inputs (arrays, labels, units) and returns a Figure attached to the
Agg canvas: nothing opens a window and the global pyplot backend of the caller is untouched.
Colours come from the Okabe–Ito palette, which stays distinguishable for the common forms of
colour-vision deficiency, and every series also gets its own line style or marker so that a
grey-scale print still separates them. Continuous colour (concentration) uses ``cividis``.

Axis labels always carry units: the spectral axis from its unit (``wavelength [nm]``),
absorbance in AU, and concentrations from the bracket of the analyte label
(``dye A [mg/L]``).

References
----------
Okabe, M. & Ito, K. (2008). Color Universal Design (CUD): how to make figures and
presentations that are friendly to colorblind people. J*FLY, https://jfly.uni-koeln.de/color/.
Nuñez, J. R., Anderton, C. R. & Renslow, R. S. (2018). Optimizing colormaps with consideration
for color vision deficiency to enable accurate interpretation of scientific data. PLoS ONE 13,
e0199239 (the cividis colormap).
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.collections import LineCollection
from matplotlib.colors import Normalize
from matplotlib.figure import Figure

from bandsolve.concentrations import split_unit
from bandsolve.units import axis_label

__all__ = [
    "LINE_STYLES",
    "MARKERS",
    "OKABE_ITO",
    "batch_figure",
    "component_spectra_figure",
    "concentration_label",
    "nas_selectivity_figure",
    "outlier_map_figure",
    "predicted_reference_figure",
    "residual_spectra_figure",
    "rmsecv_figure",
    "spectra_overlay_figure",
]

#: Okabe–Ito colours, ordered so that the first ones contrast best on white paper.
OKABE_ITO = ("#0072B2", "#D55E00", "#009E73", "#CC79A7", "#E69F00", "#56B4E9", "#000000",
             "#F0E442")
LINE_STYLES = ("-", "--", "-.", ":")
MARKERS = ("o", "s", "^", "D", "v", "P", "X", "*")
#: Colour of highlighted (flagged, over-limit) points: vermilion, distinct from the blue default.
HIGHLIGHT = "#D55E00"
NORMAL = "#0072B2"
SPECTRUM_SIZE = (7.0, 4.0)


def _style(i: int) -> dict[str, str]:
    return {"color": OKABE_ITO[i % len(OKABE_ITO)], "linestyle": LINE_STYLES[i % len(LINE_STYLES)]}


def _marker(i: int) -> dict[str, str]:
    return {"color": OKABE_ITO[i % len(OKABE_ITO)], "marker": MARKERS[i % len(MARKERS)]}


def concentration_label(analyte: str, prefix: str = "") -> str:
    """Axis label for an analyte, unit from its bracket: ``"predicted dye A [mg/L]"``."""
    name, unit = split_unit(analyte)
    text = f"{prefix} {name}".strip()
    return f"{text} [{unit}]" if unit else f"{text} [concentration units]"


def _figure(size: tuple[float, float]) -> Figure:
    fig = Figure(figsize=size, layout="constrained")
    FigureCanvasAgg(fig)
    return fig


def _new(size: tuple[float, float] = SPECTRUM_SIZE, ncols: int = 1, nrows: int = 1,
         **kwargs) -> tuple[Figure, np.ndarray]:
    fig = _figure(size)
    axes = fig.subplots(nrows, ncols, squeeze=False, **kwargs)
    return fig, axes.ravel()


def _panel_grid(m: int) -> tuple[int, int]:
    ncols = min(m, 3)
    return int(np.ceil(m / ncols)), ncols


def component_spectra_figure(axis: np.ndarray, spectra: np.ndarray, labels: Sequence[str], *,
                             axis_unit: str = "nm",
                             ylabel: str = "absorbance per unit concentration [AU]",
                             title: str = "Pure-component spectra") -> Figure:
    """One line per component: pure (CLS) or estimated spectra, or regression vectors (PLS).

    Parameters
    ----------
    axis : ndarray, shape (p,)
        Spectral axis in ``axis_unit``.
    spectra : ndarray, shape (m, p)
        One row per component.
    labels : sequence of str, length m
    ylabel : str
        Quantity and unit of the rows (AU per concentration unit for pure spectra).
    """
    fig, (ax,) = _new()
    for i, (row, label) in enumerate(zip(np.atleast_2d(spectra), labels, strict=True)):
        ax.plot(axis, row, label=label, linewidth=1.6, **_style(i))
    ax.axhline(0.0, color="0.6", linewidth=0.6)
    ax.set(xlabel=axis_label(axis_unit), ylabel=ylabel, title=title)
    ax.legend(frameon=False)
    return fig


def spectra_overlay_figure(axis: np.ndarray, spectra: np.ndarray, concentration: np.ndarray,
                           analyte: str, *, axis_unit: str = "nm",
                           ylabel: str = "absorbance [AU]",
                           title: str = "Calibration spectra") -> Figure:
    """Calibration spectra overlaid, each coloured by one analyte's concentration.

    Parameters
    ----------
    spectra : ndarray, shape (n, p)
        Absorbance (AU) on ``axis``.
    concentration : ndarray, shape (n,)
        Concentration of ``analyte`` in each spectrum (unit from the label bracket).
    """
    fig, (ax,) = _new()
    c = np.asarray(concentration, dtype=float)
    norm = Normalize(vmin=float(np.min(c)), vmax=float(np.max(c)) or 1.0)
    segments = [np.column_stack([axis, row]) for row in np.atleast_2d(spectra)]
    lines = LineCollection(segments, cmap="cividis", norm=norm, linewidths=1.0)
    lines.set_array(c)
    ax.add_collection(lines)
    ax.autoscale()
    ax.set(xlabel=axis_label(axis_unit), ylabel=ylabel,
           title=f"{title}, coloured by {split_unit(analyte)[0]}")
    fig.colorbar(lines, ax=ax, label=concentration_label(analyte))
    return fig


def rmsecv_figure(components: Sequence[int], rmsecv: np.ndarray, analytes: Sequence[str], *,
                  chosen: int, rule: str, pvalues: Sequence[float | None] | None = None,
                  alpha: float | None = None) -> Figure:
    """RMSECV against the number of components, one panel per analyte, chosen count marked.

    Parameters
    ----------
    components : sequence of int, length k
        Component counts tried.
    rmsecv : ndarray, shape (k, m)
        Root-mean-square error of cross-validation per count and analyte (analyte units).
    chosen : int
        The count the rule chose (marked with a ring and a dotted line).
    rule : str
        Name of the selection rule, shown in the title.
    pvalues : sequence of float or None, length k, optional
        Randomization-test p-values against the minimum (written above each point).
    alpha : float, optional
        Significance level of the rule, shown in the title.
    """
    values = np.asarray(rmsecv, dtype=float).reshape(len(components), -1)
    nrows, ncols = _panel_grid(values.shape[1])
    fig, axes = _new((3.6 * ncols + 0.6, 3.2 * nrows + 0.4), ncols, nrows, sharex=True)
    a = np.asarray(components)
    for k, (ax, analyte) in enumerate(zip(axes, analytes, strict=False)):
        ax.plot(a, values[:, k], marker=MARKERS[0], color=OKABE_ITO[0], linewidth=1.2)
        at = int(np.flatnonzero(a == chosen)[0]) if chosen in a else None
        if at is not None:
            ax.plot(chosen, values[at, k], marker="o", markersize=13, markerfacecolor="none",
                    markeredgecolor=HIGHLIGHT, markeredgewidth=2, linestyle="none",
                    label=f"chosen: {chosen}")
            ax.axvline(chosen, color=HIGHLIGHT, linestyle=":", linewidth=1)
            ax.legend(frameon=False, loc="upper right")
        for j, p in enumerate(pvalues or []):
            if p is not None:
                ax.annotate(f"p={p:.3g}", (a[j], values[j, k]), textcoords="offset points",
                            xytext=(0, 7), ha="center", fontsize=7, color="0.25")
        positive = values[:, k][values[:, k] > 0]
        if positive.size and positive.max() / positive.min() > 20:
            ax.set_yscale("log")  # the plateau after the last useful component stays visible
        ax.set(xlabel="number of PLS components",
               ylabel=concentration_label(analyte, "RMSECV"), title=split_unit(analyte)[0])
        ax.set_xticks(a)
    for ax in axes[values.shape[1]:]:
        ax.set_visible(False)
    level = f", α = {alpha:g}" if alpha is not None else ""
    fig.suptitle(f"Cross-validation curve (rule: {rule}{level})")
    return fig


def predicted_reference_figure(reference: np.ndarray, predicted: np.ndarray,
                               analytes: Sequence[str], *,
                               lod: Sequence[float] | None = None,
                               loq: Sequence[float] | None = None,
                               title: str = "Predicted against reference") -> Figure:
    """Predicted against reference concentration per analyte, with the identity line.

    Parameters
    ----------
    reference, predicted : ndarray, shape (n, m)
        Concentrations in each analyte's unit.
    lod, loq : sequence of float, length m, optional
        Detection and quantitation limits, drawn as vertical dashed lines.
    """
    ref = np.asarray(reference, dtype=float).reshape(-1, len(analytes))
    pred = np.asarray(predicted, dtype=float).reshape(ref.shape)
    nrows, ncols = _panel_grid(ref.shape[1])
    fig, axes = _new((3.6 * ncols + 0.4, 3.5 * nrows + 0.4), ncols, nrows)
    for k, (ax, analyte) in enumerate(zip(axes, analytes, strict=False)):
        lo = float(np.nanmin([ref[:, k].min(), pred[:, k].min(), 0.0]))
        hi = float(np.nanmax([ref[:, k].max(), pred[:, k].max()]))
        ax.plot([lo, hi], [lo, hi], color="0.5", linewidth=1, label="identity")
        ax.plot(ref[:, k], pred[:, k], linestyle="none", **_marker(0), markersize=5,
                markerfacecolor="none", label="samples")
        for values, name, style in ((lod, "LOD", "--"), (loq, "LOQ", ":")):
            if values is not None and np.isfinite(values[k]):
                ax.axvline(values[k], color=OKABE_ITO[2], linestyle=style, linewidth=1.2,
                           label=f"{name} {values[k]:.3g}")
        ax.set(xlabel=concentration_label(analyte, "reference"),
               ylabel=concentration_label(analyte, "predicted"), title=split_unit(analyte)[0])
        ax.legend(frameon=False, fontsize=7, loc="upper left")
    for ax in axes[ref.shape[1]:]:
        ax.set_visible(False)
    fig.suptitle(title)
    return fig


def residual_spectra_figure(axis: np.ndarray, residuals: np.ndarray, *, axis_unit: str = "nm",
                            highlight: Sequence[bool] | None = None,
                            ylabel: str = "spectral residual [AU]",
                            title: str = "Residual spectra") -> Figure:
    """Spectral residuals (measured minus modelled), highlighted rows drawn in vermilion.

    Parameters
    ----------
    residuals : ndarray, shape (n, p)
        Residual absorbance on ``axis``.
    highlight : sequence of bool, length n, optional
        Rows to emphasise (flagged samples).
    """
    fig, (ax,) = _new()
    rows = np.atleast_2d(residuals)
    marked = np.zeros(len(rows), bool) if highlight is None else np.asarray(highlight, bool)
    for row in rows[~marked]:
        ax.plot(axis, row, color=NORMAL, linewidth=0.7, alpha=0.6)
    for row in rows[marked]:
        ax.plot(axis, row, color=HIGHLIGHT, linewidth=1.2, linestyle="--")
    ax.axhline(0.0, color="0.4", linewidth=0.6)
    handles = [ax.plot([], [], color=NORMAL, label="within limits")[0]]
    if marked.any():
        handles.append(ax.plot([], [], color=HIGHLIGHT, linestyle="--", label="flagged")[0])
    ax.legend(handles=handles, frameon=False)
    ax.set(xlabel=axis_label(axis_unit), ylabel=ylabel, title=title)
    return fig


def nas_selectivity_figure(axis: np.ndarray, nas: np.ndarray, selectivity: np.ndarray,
                           analytes: Sequence[str], *, axis_unit: str = "nm",
                           ylabel: str = "net analyte signal [AU per unit concentration]"
                           ) -> Figure:
    """Net analyte signal vectors per unit concentration (left) and selectivity (right).

    Parameters
    ----------
    nas : ndarray, shape (m, p)
        Net analyte signal of each analyte at unit concentration.
    selectivity : ndarray, shape (m,)
        SEL between 0 and 1 (NaN when unknown: shown as a missing bar).
    """
    fig = _figure((9.0, 3.8))
    left, right = fig.subplots(1, 2, width_ratios=[2.2, 1])
    for i, (row, label) in enumerate(zip(np.atleast_2d(nas), analytes, strict=True)):
        left.plot(axis, row, label=split_unit(label)[0], linewidth=1.4, **_style(i))
    left.axhline(0.0, color="0.6", linewidth=0.6)
    left.set(xlabel=axis_label(axis_unit), ylabel=ylabel, title="Net analyte signal")
    left.legend(frameon=False, fontsize=8)
    sel = np.asarray(selectivity, dtype=float)
    names = [split_unit(a)[0] for a in analytes]
    pos = np.arange(len(names))
    right.bar(pos, np.nan_to_num(sel), color=[OKABE_ITO[i % 8] for i in pos],
              edgecolor="black", linewidth=0.6)
    for i, s in enumerate(sel):
        right.annotate("n/a" if not np.isfinite(s) else f"{s:.2f}", (i, np.nan_to_num(s)),
                       textcoords="offset points", xytext=(0, 3), ha="center", fontsize=8)
    right.set_xticks(pos, names, rotation=30, ha="right")
    right.set(ylim=(0, 1.1), ylabel="selectivity SEL [dimensionless, 0–1]",
              title="Selectivity")
    return fig


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
        Q residual (PLS) or residual F ratio (CLS) divided by its limit.
    groups : sequence of str, length n, optional
        Set of each point (calibration, validation, batch): one marker per set.
    """
    x = np.asarray(x_ratio, dtype=float)
    y = np.asarray(residual_ratio, dtype=float)
    names = list(groups) if groups is not None else ["samples"] * x.size
    ids = list(sample_ids) if sample_ids is not None else [""] * x.size
    over = (np.nan_to_num(x) >= 1) | (np.nan_to_num(y) >= 1)
    fig, (ax,) = _new((6.4, 4.6))
    for i, name in enumerate(dict.fromkeys(names)):
        sel = np.array([g == name for g in names])
        for flag, colour, fill in ((False, NORMAL, "none"), (True, HIGHLIGHT, HIGHLIGHT)):
            pick = sel & (over == flag)
            if pick.any():
                ax.plot(x[pick], y[pick], linestyle="none", marker=MARKERS[i % 8],
                        color=colour, markerfacecolor=fill, markersize=6,
                        label=f"{name}{' (over a limit)' if flag else ''}")
    for xi, yi, sid in zip(x[over], y[over], np.asarray(ids, dtype=object)[over], strict=True):
        ax.annotate(str(sid), (xi, yi), textcoords="offset points", xytext=(4, 3), fontsize=7)
    ax.axvline(1.0, color="0.3", linestyle="--", linewidth=1)
    ax.axhline(1.0, color="0.3", linestyle="--", linewidth=1, label="limit (ratio 1)")
    finite = np.concatenate([x[np.isfinite(x)], y[np.isfinite(y)], [1.0]])
    if finite.max() > 20 and finite[finite > 0].min() > 0:
        ax.set_xscale("log")
        ax.set_yscale("log")
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
    """
    est = np.asarray(estimates, dtype=float).reshape(len(sample_ids), -1)
    lo = np.asarray(low, dtype=float).reshape(est.shape)
    hi = np.asarray(high, dtype=float).reshape(est.shape)
    bad = np.asarray(flagged, dtype=bool)
    m = est.shape[1]
    pos = np.arange(len(sample_ids))
    fig, axes = _new((max(6.0, 0.32 * len(pos) + 2.5), 2.3 * m + 1.0), 1, m, sharex=True)
    for k, (ax, analyte) in enumerate(zip(axes, analytes, strict=True)):
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
    axes[-1].set_xticks(pos, list(sample_ids), rotation=60, ha="right", fontsize=7)
    axes[-1].set_xlabel("sample")
    fig.suptitle(title)
    return fig
