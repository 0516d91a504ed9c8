"""One self-contained, printable HTML report of a calibration.

The file has no external references: figures are inline PNG (``data:`` URIs), the style sheet
is inline and uses the reader's system fonts, and there is no script. A print style sheet
starts each section on a new page. The file is written atomically.
"""

from __future__ import annotations

from collections.abc import Sequence
from datetime import datetime, timezone
from html import escape
from pathlib import Path
from typing import Any

import matplotlib
import pandas as pd

from bandsolve import __version__
from bandsolve.calibration.model import Calibration
from bandsolve.concentrations import ConcentrationTable
from bandsolve.io.atomic import atomic_write
from bandsolve.merit import FiguresOfMerit
from bandsolve.progress import ProgressCallback, step
from bandsolve.report import _sections as S
from bandsolve.report import _views as V
from bandsolve.report._batch import batch_section
from bandsolve.report.extra import ReportSection, section_html
from bandsolve.spectra import SpectralSet

__all__ = ["SECTION_IDS", "render_report", "write_report"]

#: Every section of the report, in order: (id, heading).
SECTION_IDS: tuple[tuple[str, str], ...] = (
    ("model", "Model definition"),
    ("data", "Data summary"),
    ("merit", "Figures of merit"),
    ("validation", "Validation results"),
    ("comparison", "Method comparison"),
    ("batch", "Prediction batch"),
    ("flags", "Flags legend"),
    ("cautions", "Cautions"),
)


def _merit(cal: Calibration, spectra: SpectralSet | None, table: ConcentrationTable | None,
           blanks: SpectralSet | None) -> tuple[FiguresOfMerit | None, str]:
    # Replicate blanks given for the report give a better σx than what the model stored.
    stored_from_blanks = cal.merit is not None and all(
        row.sigma_x_origin == "blank replicates" for row in cal.merit.analytes)
    if cal.merit is not None and (blanks is None or stored_from_blanks):
        return cal.merit, "Figures of merit stored with the model."
    if spectra is None and blanks is None:
        return None, cal.provenance.get("merit_note", "")
    from bandsolve.calibration.merit import calibration_merit

    noise = (f"{len(blanks.sample_ids)} replicate blank spectra" if blanks is not None
             else "the calibration residuals")
    origin = (f"Computed for this report from the calibration data, with the spectral noise "
              f"σx from {noise}; these values are not stored in the model file.")
    return calibration_merit(cal, spectra, table, blanks=blanks), origin


def _batch_table(batch: Any) -> pd.DataFrame | None:
    if batch is None:
        return None
    return batch if isinstance(batch, pd.DataFrame) else batch.table


def render_report(cal: Calibration, *, calibration_spectra: SpectralSet | None = None,
                  calibration_table: ConcentrationTable | None = None,
                  validation_spectra: SpectralSet | None = None,
                  validation_table: ConcentrationTable | None = None,
                  blanks: SpectralSet | None = None, assessment: Any = None,
                  comparison: Any = None, batch: Any = None, title: str | None = None,
                  sections: Sequence[ReportSection] = (),
                  progress: ProgressCallback | None = None) -> str:
    """The report as an HTML string; see :func:`write_report` for the parameters."""
    cal_set = val_set = None
    if calibration_spectra is not None and calibration_table is not None:
        cal_set = V.sample_set(cal, "calibration", calibration_spectra, calibration_table)
    if validation_spectra is not None:
        val_set = V.sample_set(cal, "validation", validation_spectra, validation_table)
    table = _batch_table(batch)
    merit, merit_origin = _merit(cal, calibration_spectra, calibration_table, blanks)

    # Each entry makes one figure when called; built lazily so progress can be reported.
    makers: list[Any] = [lambda: V.component_figure(cal), lambda: V.rmsecv_figures(cal)]
    if cal_set is not None:
        makers.append(lambda: V.overlay_figure(cal, cal_set))
    makers.append(lambda: V.nas_figure(cal, merit))
    points = []
    for sset in (cal_set, val_set):
        if sset is not None:
            makers.append(lambda s=sset: V.assessment_figures(cal, s, merit))
            points.append((sset.name, list(sset.sample_ids), *V.set_ratios(cal, sset)))
    if points:
        makers.append(lambda: V.outlier_figure(cal, points, "validation"))
    if table is not None and len(table):
        makers.append(lambda: V.batch_view(cal, table))
        makers.append(lambda: V.outlier_figure(
            cal, [("batch", list(table["sample"].astype(str)), *V.table_ratios(cal, table))],
            "batch"))

    figures: dict[str, list[str]] = {sid: [] for sid, _ in SECTION_IDS}
    # Sample ids and analyte names are shown as written: a "$" is not mathematics.
    with matplotlib.rc_context({"text.parse_math": False}):
        for i, make in enumerate(makers):
            made = make()
            for item in made if isinstance(made, list) else [made]:
                if item is not None:
                    figures[item.section].append(S.figure_html(item))
                    item.figure.clear()
            step(progress, i + 1, len(makers), "figures")

    bodies = {
        "model": S.model_section(cal),
        "data": S.data_section(cal, None if cal_set is None else len(cal_set.sample_ids)),
        "merit": S.merit_section(merit, merit_origin),
        "validation": _validation_text(assessment, val_set),
        "comparison": S.result_section(comparison, "method comparison",
                                       "use --compare SPECTRA CONC"),
        "batch": batch_section(cal.analytes, table, getattr(batch, "failures", None)),
        "flags": S.flags_section(),
        "cautions": S.cautions_section(),
    }
    label = cal.provenance.get("data_label")
    banner = (f'<section id="data-label" class="banner-section"><p class="banner">'
              f"{escape(str(label))}</p></section>" if label else "")
    # Extra sections (drift watch, instrument transfer, ...) go before the flags legend.
    html_parts = [f'<section id="{sid}"><h2>{escape(heading)}</h2>{bodies[sid]}'
                  f'{"".join(figures[sid])}</section>' for sid, heading in SECTION_IDS]
    at = [sid for sid, _ in SECTION_IDS].index("flags")
    html_parts[at:at] = [section_html(extra) for extra in sections]
    sections_html = "".join(html_parts)
    generated = datetime.now(timezone.utc).isoformat(timespec="seconds")
    title = title or f"Calibration report: {cal.method.upper()} model"
    footer = (f"<footer><p class=\"meta\">{escape(str(label))}</p></footer>" if label else "")
    return ("<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
            f"<title>{escape(title)}</title><style>{S.STYLE}</style></head><body>"
            f"{S.header_html(cal, title, generated, __version__)}{banner}{sections_html}{footer}"
            "</body></html>\n")


def _validation_text(assessment: Any, val_set: V.SampleSet | None) -> str:
    if assessment is not None or val_set is None:
        return S.result_section(assessment, "validation", "use --assess SPECTRA CONC")
    return S.note(f"Figures for {len(val_set.sample_ids)} validation samples are shown; the "
                  "validation statistics were not computed for this report.")


def write_report(cal: Calibration, path: str | Path, *,
                 calibration_spectra: SpectralSet | None = None,
                 calibration_table: ConcentrationTable | None = None,
                 assessment: Any = None, comparison: Any = None, batch: Any = None,
                 validation_spectra: SpectralSet | None = None,
                 validation_table: ConcentrationTable | None = None,
                 blanks: SpectralSet | None = None, title: str | None = None,
                 sections: Sequence[ReportSection] = (),
                 progress: ProgressCallback | None = None) -> Path:
    """Write the self-contained HTML report of a calibration.

    Parameters
    ----------
    cal : Calibration
        The model (as built or loaded from a model file).
    path : str or Path
        Output file (``.html``), written atomically.
    calibration_spectra, calibration_table : optional
        The calibration data, matched by sample id: adds the spectra overlay, the fitted
        predictions, residuals and outlier map, and PLS selectivities.
    assessment, comparison : optional
        Objects with ``summary() -> str`` and ``to_frame() -> DataFrame`` (from
        :func:`bandsolve.evaluate.assess.assess` and
        :func:`bandsolve.evaluate.compare.compare_methods`).
    batch : BatchResult or DataFrame, optional
        Prediction results (columns of :meth:`Calibration.predict`); the failures of a
        BatchResult (inputs that could not be read) are listed with their reasons.
    validation_spectra, validation_table : optional
        Independent test samples for the predicted-against-reference, residual and outlier
        figures of the validation section (the table is optional).
    blanks : SpectralSet, optional
        Replicate blank spectra for the noise of the figures of merit, which are computed
        (:func:`bandsolve.calibration.merit.calibration_merit`) when the model stores none and
        calibration data or blanks are given.
    title : str, optional
    sections : sequence of ReportSection, optional
        Further sections (:mod:`bandsolve.report.extra`: drift watch, instrument transfer),
        placed before the flags legend.
    progress : callable, optional
        ``progress(done, total, label)`` after each figure (see :mod:`bandsolve.progress`).

    Returns
    -------
    Path
        The file written.

    References
    ----------
    Olivieri, A. C. et al. (2006). Uncertainty estimation and figures of merit for multivariate
    calibration. Pure Appl. Chem. 78, 633-661.
    """
    text = render_report(cal, calibration_spectra=calibration_spectra,
                         calibration_table=calibration_table,
                         validation_spectra=validation_spectra,
                         validation_table=validation_table, blanks=blanks,
                         assessment=assessment, comparison=comparison, batch=batch,
                         title=title, sections=sections, progress=progress)
    path = Path(path)
    with atomic_write(path, "w", encoding="utf-8") as handle:
        handle.write(text)
    return path
