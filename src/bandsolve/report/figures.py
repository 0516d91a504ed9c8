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
from matplotlib.ticker import LogLocator, NullFormatter

from bandsolve.concentrations import split_unit
from bandsolve.units import axis_label

__all__ = [
    "LINE_STYLES",
    "MARKERS",
    "OKABE_ITO",
    "component_spectra_figure",
    "concentration_label",
    "nas_selectivity_figure",
    "predicted_reference_figure",
    "residual_spectra_figure",
    "rmsecv_figure",
    "readable_log_axis",
    "standards_overlay_figure",
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


def readable_log_axis(axis) -> None:
    """Log scale with at most a handful of labelled ticks: whole decades (1, 2, 5 within
    them when the range is short) and unlabelled minor ticks, so labels never collide."""
    axis.set_major_locator(LogLocator(base=10.0, subs=(1.0, 2.0, 5.0), numticks=6))
    axis.set_minor_locator(LogLocator(base=10.0, subs="auto", numticks=12))
    axis.set_minor_formatter(NullFormatter())


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


def standards_overlay_figure(axis: np.ndarray, spectra: np.ndarray, reference: np.ndarray,
                             analytes: Sequence[str], *, axis_unit: str = "nm",
                             ylabel: str = "absorbance [AU]",
                             title: str = "Calibration spectra") -> Figure:
    """Calibration spectra with every analyte told apart.

    Pure standards (at most one non-zero concentration per spectrum) are drawn in the colour
    and line style of their analyte, blanks in grey; calibration mixtures get one panel per
    analyte, each coloured by that analyte's concentration (``cividis``).

    Parameters
    ----------
    spectra : ndarray, shape (n, p)
        Absorbance (AU) on ``axis``.
    reference : ndarray, shape (n, m)
        Concentrations, one column per analyte (unit from each label's bracket).
    """
    X = np.atleast_2d(spectra)
    C = np.asarray(reference, dtype=float).reshape(len(X), -1)
    present = C != 0
    if present.sum(axis=1).max(initial=0) <= 1:
        fig, (ax,) = _new()
        for k, analyte in enumerate(analytes):
            rows = X[present[:, k]]
            for j, row in enumerate(rows):
                ax.plot(axis, row, linewidth=1.1, label=split_unit(analyte)[0] if j == 0
                        else None, **_style(k))
        blanks = X[~present.any(axis=1)]
        for j, row in enumerate(blanks):
            ax.plot(axis, row, color="0.6", linewidth=0.8, label="blank" if j == 0 else None)
        ax.set(xlabel=axis_label(axis_unit), ylabel=ylabel, title=f"{title}: pure standards")
        ax.legend(frameon=False, fontsize=8, ncols=2 if len(analytes) > 5 else 1)
        return fig
    nrows, ncols = _panel_grid(len(analytes))
    fig, axes = _new((3.6 * ncols + 0.9, 2.9 * nrows + 0.4), ncols, nrows, sharex=True,
                     sharey=True)
    for k, (ax, analyte) in enumerate(zip(axes, analytes, strict=False)):
        c = C[:, k]
        norm = Normalize(vmin=float(np.min(c)), vmax=float(np.max(c)) or 1.0)
        lines = LineCollection([np.column_stack([axis, row]) for row in X], cmap="cividis",
                               norm=norm, linewidths=0.8)
        lines.set_array(c)
        ax.add_collection(lines)
        ax.autoscale()
        ax.set_title(f"coloured by {split_unit(analyte)[0]}", fontsize=9)
        fig.colorbar(lines, ax=ax, label=concentration_label(analyte), shrink=0.9)
        ax.set(xlabel=axis_label(axis_unit), ylabel=ylabel)
    for ax in axes[len(analytes):]:
        ax.set_visible(False)
    fig.suptitle(f"{title}: mixtures")
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
            readable_log_axis(ax.yaxis)
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
    # Many noisy rows drawn opaque merge into a solid block: thin, faint grey lines keep the
    # band of ordinary noise visible as a band, and flagged rows stand out on top of it.
    faint = min(0.5, max(0.05, 8.0 / max(1, int((~marked).sum()))))
    for row in rows[~marked]:
        ax.plot(axis, row, color="0.35", linewidth=0.5, alpha=faint)
    for row in rows[marked]:
        ax.plot(axis, row, color=HIGHLIGHT, linewidth=1.2, linestyle="--")
    ax.axhline(0.0, color="0.1", linewidth=0.8)
    handles = [ax.plot([], [], color="0.35", label="within limits")[0]]
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
    fig = _figure((9.0, 3.8 if len(analytes) <= 4 else 4.6))
    left, right = fig.subplots(1, 2, width_ratios=[2.2, 1])
    for i, (row, label) in enumerate(zip(np.atleast_2d(nas), analytes, strict=True)):
        left.plot(axis, row, label=split_unit(label)[0], linewidth=1.4, **_style(i))
    left.axhline(0.0, color="0.6", linewidth=0.6)
    left.set(xlabel=axis_label(axis_unit), ylabel=ylabel, title="Net analyte signal")
    if len(analytes) > 4:  # many lines: the legend goes beside the panels, not over them
        left.legend(frameon=False, fontsize=7, loc="upper left", bbox_to_anchor=(0.0, -0.18),
                    ncols=min(5, len(analytes)))
    else:
        left.legend(frameon=False, fontsize=8)
    sel = np.asarray(selectivity, dtype=float)
    names = [split_unit(a)[0] for a in analytes]
    pos = np.arange(len(names))
    right.bar(pos, np.nan_to_num(sel), color=[OKABE_ITO[i % 8] for i in pos],
              edgecolor="black", linewidth=0.6)
    for i, s in enumerate(sel):
        right.annotate("n/a" if not np.isfinite(s) else f"{s:.2f}", (i, np.nan_to_num(s)),
                       textcoords="offset points", xytext=(0, 3), ha="center",
                       fontsize=8 if len(sel) <= 6 else 6,
                       rotation=0 if len(sel) <= 6 else 90, va="bottom")
    right.set_xticks(pos, names, rotation=30, ha="right")
    right.set(ylim=(0, 1.1), ylabel="selectivity SEL [dimensionless, 0–1]",
              title="Selectivity")
    return fig
