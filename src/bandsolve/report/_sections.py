"""HTML fragments of the report's sections (text and tables; figures are added by html.py)."""

from __future__ import annotations

import base64
import io
import re
from html import escape
from typing import Any

import numpy as np
import pandas as pd
from matplotlib.figure import Figure

from bandsolve.calibration.model import Calibration
from bandsolve.calibration.summary import shared_error_note
from bandsolve.cautions import CAUTIONS
from bandsolve.concentrations import range_text
from bandsolve.flags import FLAG_CODES
from bandsolve.merit import FiguresOfMerit
from bandsolve.report._views import ReportFigure
from bandsolve.units import axis_label

#: Resolution of the embedded PNG figures (dots per inch).
DPI = 110


STYLE = """
:root { --ink:#1b1b1b; --muted:#555; --rule:#c8c8c8; --accent:#0072B2; --warn:#D55E00; }
body { font-family: system-ui, -apple-system, "Segoe UI", Roboto, "Helvetica Neue", Arial,
       sans-serif; color:var(--ink); max-width:1100px; margin:1.5rem auto; padding:0 1rem;
       line-height:1.45; }
h1 { font-size:1.6rem; margin-bottom:.2rem; }
h2 { font-size:1.25rem; border-bottom:2px solid var(--accent); padding-bottom:.2rem;
     margin-top:2.2rem; }
h3 { font-size:1.05rem; margin-top:1.4rem; }
.meta { color:var(--muted); font-size:.9rem; }
table { border-collapse:collapse; margin:.6rem 0; font-size:.85rem; }
th, td { border:1px solid var(--rule); padding:.25rem .5rem; text-align:left;
         font-variant-numeric:tabular-nums; }
th { background:#eef3f8; }
pre { background:#f6f6f6; border:1px solid var(--rule); padding:.6rem; font-size:.8rem;
      white-space:pre-wrap; overflow-wrap:anywhere; }
pre.summary { margin-bottom:0; } table.summary { margin-top:0; }
td code, li code { overflow-wrap:anywhere; } ul.skipped { font-weight:400; }
table.batch { width:100%; table-layout:fixed; } table.batch th:first-child { width:7em; }
table.batch th:last-child { width:24%; }
td.codes { overflow-wrap:anywhere; font-size:.9em; }
.interval { color:var(--muted); font-size:.9em; }
figure { margin:1rem 0; } figure img { max-width:100%; height:auto; border:1px solid #eee; }
figcaption { font-size:.85rem; color:var(--muted); }
.banner { border:2px solid var(--warn); background:#fff4ec; padding:.6rem .9rem;
          font-weight:600; }
.note { color:var(--muted); font-style:italic; }
dt { font-family:ui-monospace, "DejaVu Sans Mono", monospace; font-weight:600; }
dd { margin:0 0 .5rem 1.5rem; }
@media print {
  body { max-width:none; margin:0; font-size:10pt; }
  @page { size:A4; margin:14mm; }
  section { break-before:page; }
  section:first-of-type, section.banner-section { break-before:auto; }
  figure, table, pre { break-inside:avoid; }
  pre { white-space:pre-wrap; overflow-wrap:anywhere; font-size:8pt; }
  table { font-size:7.5pt; } th, td { padding:.15rem .3rem; }
  h2, h3 { break-after:avoid; }
  a { color:inherit; text-decoration:none; }
}
"""


def png_data_uri(fig: Figure) -> str:
    """The figure as an inline ``data:image/png;base64,…`` URI."""
    buffer = io.BytesIO()
    fig.savefig(buffer, format="png", dpi=DPI)
    return "data:image/png;base64," + base64.b64encode(buffer.getvalue()).decode("ascii")


def figure_html(item: ReportFigure) -> str:
    return (f'<figure id="{escape(item.key)}"><img alt="{escape(item.title)}" '
            f'src="{png_data_uri(item.figure)}"><figcaption><strong>{escape(item.title)}.'
            f"</strong> {escape(item.caption)}</figcaption></figure>")


def _fmt(value: Any) -> str:
    if value is None or (pd.api.types.is_scalar(value) and pd.isna(value)):
        return "–"
    if isinstance(value, float | np.floating) and not np.isfinite(value):
        return "–"
    if isinstance(value, float | np.floating):
        return f"{value:.4g}"
    if isinstance(value, list | tuple):
        return ", ".join(_fmt(v) for v in value)
    return str(value)


def kv_table(rows: list[tuple[str, Any]]) -> str:
    body = "".join(f"<tr><th>{escape(k)}</th><td>{escape(_fmt(v))}</td></tr>" for k, v in rows)
    return f'<table class="kv">{body}</table>'


#: Columns per HTML table: a wider frame is split into several tables (each repeating the
#: first column), so that no table runs past the printable width of an A4 page.
MAX_COLUMNS = 9


def frame_table(frame: pd.DataFrame) -> str:
    """The frame as HTML tables: missing values as "–", a named or labelled index as the
    first column, a plain row count (0, 1, 2, …) left out; more than :data:`MAX_COLUMNS`
    columns are spread over several tables that each repeat the first column."""
    if not isinstance(frame.index, pd.RangeIndex) or frame.index.name is not None:
        frame = frame.rename_axis(frame.index.name or "").reset_index()
    cells = frame.rename_axis(columns=None).astype(object).map(_fmt)
    if cells.shape[1] <= MAX_COLUMNS:
        return cells.to_html(index=False, escape=True, border=0)
    key, rest = cells.columns[0], list(cells.columns[1:])
    step = MAX_COLUMNS - 1
    return "".join(cells[[key, *rest[i:i + step]]].to_html(index=False, escape=True, border=0)
                   for i in range(0, len(rest), step))


#: Cells of a fixed-width text table are separated by two or more spaces.
_GAP = re.compile(r" {2,}")


def summary_html(text: str, tables: bool = True) -> str:
    """A fixed-width summary for print: aligned column blocks become tables, the rest wraps.

    A block is a run of at least two unindented lines splitting into the same number (three
    or more) of cells at gaps of two or more spaces; its first line is the header. With
    ``tables=False`` such blocks are left out (the caller shows the same numbers as a table
    of its own).
    """
    lines = text.splitlines()
    cells = [_GAP.split(line.strip()) for line in lines]
    parts, prose, i = [], [], 0
    while i < len(lines):
        j = i + 1
        while (j < len(lines) and len(cells[i]) >= 3 and len(cells[j]) == len(cells[i])
               and not lines[j].startswith(" ")):
            j += 1
        if j - i < 2 or lines[i].startswith(" "):
            prose.append(lines[i])
            i += 1
            continue
        if prose:
            parts.append(pre("\n".join(prose), "summary"))
            prose = []
        if not tables:
            i = j
            continue
        head = "".join(f"<th>{escape(c)}</th>" for c in cells[i])
        body = "".join("<tr>" + "".join(f"<td>{escape(c)}</td>" for c in row) + "</tr>"
                       for row in cells[i + 1:j])
        parts.append(f'<table class="summary"><thead><tr>{head}</tr></thead>'
                     f"<tbody>{body}</tbody></table>")
        i = j
    if prose:
        parts.append(pre("\n".join(prose), "summary"))
    return f'<div class="summary">{"".join(parts)}</div>'


def pre(text: str, css_class: str | None = None) -> str:
    cls = f' class="{css_class}"' if css_class else ""
    return f"<pre{cls}>{escape(text)}</pre>"


def note(text: str) -> str:
    return f'<p class="note">{escape(text)}</p>'


def _component_rule(cal: Calibration) -> str:
    return cal.kind.describe_components(cal.estimators, cal.selection, cal.n_analytes)


def model_section(cal: Calibration) -> str:
    used = cal.used_axis
    rows = [
        ("method", cal.kind.title),
        ("analytes", f"{cal.n_analytes}: {', '.join(cal.analytes)} (ranges in the data "
                     "summary)"),
        ("input axis", f"{cal.axis[0]:g} to {cal.axis[-1]:g} {cal.axis_unit}, "
                       f"{cal.axis.size} points"),
        ("used range", f"{used[0]:g} to {used[-1]:g} {cal.axis_unit}, {used.size} points"),
        ("preprocessing", cal.preprocessor.describe()),
        ("components and rule", _component_rule(cal)),
        ("path length", f"{cal.path_length_cm:g} cm" if cal.path_length_cm else "not recorded"),
        ("photometric ceiling", f"{cal.ceiling:g} AU"),
        ("prediction intervals rest on", cal.interval_basis),
    ]
    if cal.interval is not None:
        rows.append(("model error added (validation)",
                     cal.interval.model_error_text(cal.analytes)))
        rows.append(("validation degrees of freedom", cal.interval.t_dof_text + (
            f" ({cal.interval.n_runs} runs)" if cal.interval.n_runs else "")))
    if cal.shared_error:
        rows.append(("error shared by all results", shared_error_note(cal.shared_error)))
    rows += [(f"setting: {k}", v) for k, v in cal.settings.items()]
    return f"<h3>Definition</h3>{kv_table(rows)}" + _limits_html(cal)


def _limits_html(cal: Calibration) -> str:
    frame = cal.limits.to_frame()
    models = cal.limits.models
    return "<h3>Diagnostic limits</h3>" + frame_table(frame) + kv_table([
        ("leverage limit factor", cal.limits.leverage_factor),
        *((f"SE error model{f' (model {i + 1})' if len(models) > 1 else ''}",
           m.error_model_text()) for i, m in enumerate(models) if m.error_scale)])


def data_section(cal: Calibration, n_given: int | None) -> str:
    prov = cal.provenance
    rows = [("calibration samples", prov.get("n_calibration_samples")),
            ("model created", prov.get("created"))]
    if n_given is not None:
        rows.append(("calibration spectra given for this report", n_given))
    ranges = pd.DataFrame({"analyte": cal.analytes,
                           "calibrated (or validated) range": [
                               range_text(lo, hi) for lo, hi in cal.calibrated_range]})
    files = prov.get("training_files") or []
    files_html = (frame_table(pd.DataFrame(files)) if files
                  else note("No training-file fingerprints are recorded in this model."))
    versions = prov.get("versions") or {}
    return (kv_table(rows) + "<h3>Calibrated ranges</h3>" + frame_table(ranges)
            + "<h3>Training files (SHA-256 fingerprints)</h3>" + files_html
            + "<h3>Software</h3>" + kv_table(list(versions.items())))


def merit_section(merit: FiguresOfMerit | None, origin: str) -> str:
    if merit is None:
        return note("No figures of merit are stored in this model and no blank spectra were "
                    "given, so none are reported. Give replicate blank spectra (--blanks) to "
                    "compute sensitivity, selectivity and detection limits.")
    return f"<p>{escape(origin)}</p>" + summary_html(merit.summary())


#: Tables with more columns than this and no more rows are shown transposed (fit on A4).
WIDE_COLUMNS = 12


def result_section(result: Any, what: str, how: str) -> str:
    """Summary text and table of an assessment or comparison object (duck-typed)."""
    if result is None:
        return note(f"No {what} results are included in this report ({how}).")
    frame = result.to_frame()
    if len(frame.columns) > WIDE_COLUMNS >= len(frame):
        # one row per statistic, one column per analyte
        frame = frame.T.rename_axis(index="statistic", columns=None)
    return summary_html(result.summary(), tables=False) + frame_table(frame)


def flags_section() -> str:
    items = "".join(f"<dt>{escape(code)}</dt><dd>{escape(text)}</dd>"
                    for code, text in FLAG_CODES.items())
    return ("<p>Codes in the <code>flag_codes</code> column of every results table; codes "
            "about one analyte carry its name after a colon (<code>above_range:dye B</code>).</p>"
            f"<dl>{items}</dl>")


def cautions_section() -> str:
    return "<ul>" + "".join(f"<li>{escape(c)}</li>" for c in CAUTIONS) + "</ul>"


def header_html(cal: Calibration, title: str, generated: str, version: str) -> str:
    return (f"<header><h1>{escape(title)}</h1><p class=\"meta\">{escape(cal.method.upper())} "
            f"calibration for {escape(', '.join(cal.analytes))}; axis "
            f"{escape(axis_label(cal.axis_unit))}. Report generated {escape(generated)} by "
            f"bandsolve {escape(version)}.</p></header>")
