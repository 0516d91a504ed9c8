"""From a Calibration and optional sample sets to the arrays and figures of the report.

The numbers come from the model's own methods and from :mod:`bandsolve.merit`; this module only
arranges them for :mod:`.figures`.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from matplotlib.figure import Figure

from bandsolve.calibration.model import Calibration, result_columns
from bandsolve.concentrations import ConcentrationTable, split_unit
from bandsolve.flags import FLAG_COLUMN, split_flags
from bandsolve.merit import FiguresOfMerit
from bandsolve.report import figures as F
from bandsolve.report import figures_batch as FB
from bandsolve.spectra import SpectralSet

#: Batches up to this many spectra are shown sample by sample; larger ones as distributions.
LIST_ROWS = 50


@dataclass(frozen=True)
class SampleSet:
    """Spectra of one role (calibration, validation, batch) on the model grid.

    Attributes
    ----------
    name : str
    sample_ids : tuple of str
    X : ndarray, shape (n, p)
        Absorbance on the model's axis (before preprocessing).
    reference : ndarray, shape (n, m) or None
        Known concentrations in the model's analyte order.
    """

    name: str
    sample_ids: tuple[str, ...]
    X: np.ndarray
    reference: np.ndarray | None = None


@dataclass(frozen=True)
class ReportFigure:
    """One figure of the report with its section, title and caption."""

    key: str
    section: str
    title: str
    caption: str
    figure: Figure


def sample_set(cal: Calibration, name: str, spectra: SpectralSet,
               table: ConcentrationTable | None = None) -> SampleSet:
    """Put spectra (and, matched by sample id, their concentrations) onto the model grid."""
    data = cal.align(spectra, table)
    return SampleSet(name, data.sample_ids, data.X, data.reference)


def _unit_label(cal: Calibration) -> str:
    units = {split_unit(a)[1] for a in cal.analytes}
    unit = units.pop() if len(units) == 1 else None
    return unit or "concentration unit"


def component_figure(cal: Calibration) -> ReportFigure:
    """CLS pure spectra, or PLS regression vectors."""
    kind = cal.kind
    names = [split_unit(a)[0] for a in cal.analytes]
    fig = F.component_spectra_figure(
        cal.used_axis, kind.component_spectra(cal.estimators), names, axis_unit=cal.axis_unit,
        ylabel=kind.component_unit(_unit_label(cal)),
        title=f"{kind.component_title} ({cal.method.upper()})")
    return ReportFigure("fig-components", "model", kind.component_title,
                        kind.component_caption, fig)


def rmsecv_figures(cal: Calibration) -> list[ReportFigure]:
    """The cross-validation curve of each PLS model, with the chosen count and p-values."""
    models = cal.selection.models if cal.selection is not None else ()
    out = []
    for i, ev in enumerate(models):
        names = list(cal.analytes) if len(models) == 1 else [cal.analytes[i]]
        fig = F.rmsecv_figure(list(ev.settings), np.asarray(ev.rmsecv, dtype=float), names,
                              chosen=ev.n_components, rule=ev.rule,
                              pvalues=None if ev.pvalues is None else list(ev.pvalues),
                              alpha=ev.alpha)
        out.append(ReportFigure(
            f"fig-rmsecv-{i + 1}", "model", "Cross-validation curve",
            f"RMSECV ({ev.cv}) by number of components; ringed: "
            f"the count chosen by the {ev.rule} rule. p-values: randomization test of "
            "each smaller count against the minimum (van der Voet 1994).", fig))
    return out


def overlay_figure(cal: Calibration, cal_set: SampleSet) -> ReportFigure:
    """Calibration spectra: pure standards in their analyte's colour, mixtures coloured by
    each analyte's concentration in turn."""
    fig = F.standards_overlay_figure(cal.axis, cal_set.X, cal_set.reference, cal.analytes,
                                     axis_unit=cal.axis_unit)
    return ReportFigure("fig-overlay", "data", "Calibration spectra",
                        f"{len(cal_set.sample_ids)} calibration spectra as absorbance on the "
                        "model grid: pure standards in the colour of their analyte (blanks "
                        "grey), mixtures once per analyte, coloured by its concentration.",
                        fig)


def net_signal(cal: Calibration, merit: FiguresOfMerit | None) -> tuple[np.ndarray, np.ndarray]:
    """NAS vectors at unit concentration (m, p') and selectivities (m,; NaN when unknown)."""
    nas = np.vstack([est.net_analyte_signal() for est in cal.estimators])
    if merit is not None:
        return nas, np.array([np.nan if r.selectivity is None else r.selectivity
                              for r in merit.analytes])
    return nas, cal.kind.selectivity(cal.estimators, cal.n_analytes)


def nas_figure(cal: Calibration, merit: FiguresOfMerit | None) -> ReportFigure:
    nas, sel = net_signal(cal, merit)
    fig = F.nas_selectivity_figure(cal.used_axis, nas, sel, cal.analytes,
                                   axis_unit=cal.axis_unit)
    how = cal.kind.nas_caption
    return ReportFigure("fig-nas", "merit", "Net analyte signal and selectivity",
                        f"Net analyte signal at unit concentration: {how}. Selectivity "
                        "SEL = ‖NAS‖/‖pure spectrum‖; 1 means no overlap.", fig)


def residual_spectra(cal: Calibration, X: np.ndarray) -> np.ndarray:
    """Measured minus modelled spectra after preprocessing (PLS: first model, centred)."""
    return cal.estimators[0].residuals(cal.preprocessor.transform(X))


def _over(cal: Calibration, X: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    d = cal.detail(X)
    x = getattr(d, cal.kind.x_ratio)
    flagged = (np.nan_to_num(x) > 1) | (np.nan_to_num(d.residual_ratio) > 1)
    return x, d.residual_ratio, flagged


def assessment_figures(cal: Calibration, sset: SampleSet,
                       merit: FiguresOfMerit | None) -> list[ReportFigure]:
    """Predicted against reference, residual spectra and the outlier map of one set."""
    out = []
    if sset.reference is not None:
        pred = cal.detail(sset.X).concentrations
        lod = loq = None
        if merit is not None:
            lod = [row.lod for row in merit.analytes]
            loq = [row.loq for row in merit.analytes]
        out.append(ReportFigure(
            f"fig-pred-{sset.name}", "validation", f"Predicted against reference ({sset.name})",
            f"{len(sset.sample_ids)} {sset.name} samples; grey line: identity"
            + ("; dashed and dotted: LOD and LOQ." if lod is not None else "."),
            F.predicted_reference_figure(sset.reference, pred, cal.analytes, lod=lod, loq=loq,
                                         title=f"Predicted against reference, {sset.name}")))
    _, _, flagged = _over(cal, sset.X)
    scaled = bool(cal.settings.get("scale"))
    fig = F.residual_spectra_figure(
        cal.used_axis, residual_spectra(cal, sset.X), axis_unit=cal.axis_unit,
        highlight=flagged, title=f"Residual spectra, {sset.name}",
        ylabel="scaled residual [dimensionless]" if scaled else "spectral residual [AU]")
    out.append(ReportFigure(f"fig-resid-{sset.name}", "validation",
                            f"Residual spectra ({sset.name})",
                            "Measured minus modelled absorbance; structure instead of noise "
                            "points to an absorber or baseline the model does not know.", fig))
    return out


def set_ratios(cal: Calibration, sset: SampleSet) -> tuple[np.ndarray, np.ndarray]:
    """T² (PLS) or leverage (CLS) ratio and residual ratio of a sample set."""
    x, y, _ = _over(cal, sset.X)
    return x, y


def table_ratios(cal: Calibration, table: pd.DataFrame) -> tuple[np.ndarray, np.ndarray]:
    """The same two ratios read from a prediction table."""
    x = table[cal.kind.x_ratio].to_numpy(float)
    return x, table["residual_ratio"].to_numpy(float)


def outlier_figure(cal: Calibration, points: list[tuple[str, list[str], np.ndarray, np.ndarray]],
                   section: str) -> ReportFigure | None:
    """Residual ratio against T² (PLS) or leverage (CLS) ratio; ``points``: (set, ids, x, y)."""
    groups = [name for name, ids, _, _ in points for _ in ids]
    ids = [i for _, set_ids, _, _ in points for i in set_ids]
    x = np.concatenate([p[2] for p in points])
    y = np.concatenate([p[3] for p in points])
    if not np.isfinite(y).any():
        return None
    fig = FB.outlier_map_figure(x, y, groups=groups, sample_ids=ids, x_label=cal.kind.x_label,
                                y_label=cal.kind.residual_label)
    return ReportFigure(f"fig-outliers-{section}", section, "Outlier map",
                        "Each diagnostic divided by its limit: points at or beyond the dashed "
                        f"lines (ratio 1) are flagged; up to {FB.MAX_LABELS} of them, the "
                        "farthest beyond a limit, are named.", fig)


def batch_view(cal: Calibration, table: pd.DataFrame) -> ReportFigure:
    """Concentrations of a prediction table: per sample with intervals and flags up to
    :data:`LIST_ROWS` spectra, as distributions (clean and flagged) beyond."""
    cols = [result_columns(a) for a in cal.analytes]
    est = table[[c[0] for c in cols]].to_numpy(float)
    flagged = [bool(split_flags(f)) for f in table[FLAG_COLUMN].fillna("")]
    if len(table) > LIST_ROWS:
        fig = FB.batch_distribution_figure(est, cal.analytes, flagged)
        return ReportFigure("fig-batch", "batch", "Prediction batch",
                            f"Distribution of the {len(table)} estimates of each analyte; "
                            "flagged samples stacked in vermilion on top of the others.", fig)
    low = table[[c[2] for c in cols]].to_numpy(float)
    high = table[[c[3] for c in cols]].to_numpy(float)
    fig = FB.batch_figure(list(table["sample"].astype(str)), est, low, high, cal.analytes,
                         flagged)
    return ReportFigure("fig-batch", "batch", "Prediction batch",
                        "Estimate and 95 % prediction interval per sample; crosses: samples "
                        "with at least one flag (see the flags legend).", fig)
