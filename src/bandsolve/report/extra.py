"""Report sections beyond the calibration itself: a generic section, drift watch, transfer.

A :class:`ReportSection` is a heading, a few lines of text, figures and a table; any part of
bandsolve that has something to show in the report builds one, and
:func:`bandsolve.report.html.render_report` places them before the flags legend. Nothing is
computed here: the drift state comes from :mod:`bandsolve.batch.watch`, the accuracies from
:func:`bandsolve.evaluate.assess.assess`.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from html import escape

import pandas as pd

from bandsolve.report import _sections as S
from bandsolve.report._views import ReportFigure
from bandsolve.report.control_charts import series_figure

__all__ = ["ReportSection", "drift_section", "section_html", "transfer_section"]


@dataclass
class ReportSection:
    """One extra report section.

    Attributes
    ----------
    key : str
        HTML id (letters, digits, hyphens).
    heading : str
    lines : list of str
        Paragraphs of plain text.
    figures : list of ReportFigure
    table : pandas.DataFrame or None
    """

    key: str
    heading: str
    lines: list[str] = field(default_factory=list)
    figures: list[ReportFigure] = field(default_factory=list)
    table: pd.DataFrame | None = None


def section_html(section: ReportSection) -> str:
    """The section as HTML (figures are cleared once drawn)."""
    parts = [f"<p>{escape(line)}</p>" for line in section.lines]
    if section.table is not None:
        parts.append(S.frame_table(section.table))
    for item in section.figures:
        parts.append(S.figure_html(item))
        item.figure.clear()
    return (f'<section id="{escape(section.key)}"><h2>{escape(section.heading)}</h2>'
            f'{"".join(parts)}</section>')


def drift_section(report) -> ReportSection:
    """The drift watch of a :class:`bandsolve.batch.watch.DriftReport`: states and charts."""
    figures = []
    for i, series in enumerate(report.series):
        fig = series_figure(series)
        if fig is not None:
            figures.append(ReportFigure(
                f"control-chart-{i + 1}", "drift", f"Control chart: {series.name}",
                "Top: one point per run with the centre line and 2σ/3σ limits from the shaded "
                "reference runs (σ from the mean moving range / 1.128); alarms as crosses. "
                "Bottom: two-sided CUSUM (k = 0.5σ) against its decision interval.", fig))
    lines = [f"Check standards recorded in {report.ledger} for model "
             f"{report.model_checksum[:12]}:", *report.summary()]
    return ReportSection("drift", "Drift watch", lines, figures)


def transfer_section(moved, before, after, label: str) -> ReportSection:
    """Accuracy on a second instrument before and after transfer.

    Parameters
    ----------
    moved : Calibration
        The transferred model (its ``transfer`` record is summarised).
    before, after : Assessment
        :func:`bandsolve.evaluate.assess.assess` of the original and of the transferred
        model on the same samples measured on the new instrument.
    label : str
        What those samples are.
    """
    rec = moved.transfer.describe()
    rows = []
    for b, a in zip(before.analytes, after.analytes, strict=True):
        rows.append({"analyte": b.analyte, "unit": b.unit,
                     "RMSEP without transfer": b.statistics.rmse,
                     "RMSEP with transfer": a.statistics.rmse,
                     "bias without transfer": b.statistics.bias,
                     "bias with transfer": a.statistics.bias})
    lines = [f"Model moved to a second instrument by {rec['method'].upper()} with "
             f"{rec['transfer_samples']} transfer samples"
             + (f" (window {rec['window_channels']} channels)." if "window_channels" in rec
                else ".")]
    shift = rec.get("axis_shift")
    if shift:
        lines.append(f"Axis offset of the new instrument estimated from the transfer samples: "
                     f"{shift['value']:+.2f} {shift['unit']}.")
    lines.append(f"Accuracy on {label}, measured on the new instrument:")
    return ReportSection("transfer", "Instrument transfer", lines, [], pd.DataFrame(rows))
