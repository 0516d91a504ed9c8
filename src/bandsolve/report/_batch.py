"""The prediction-batch section: sample by sample for small batches, an overview for large ones.

A small batch is listed in tables of at most :data:`ANALYTES_PER_TABLE` analytes, each with the
sample id first and the flag codes last, so no table is wider than an A4 page whatever the
number of analytes. A large batch is summarised (counts by flag, distributions, the flagged
samples by name); its full table is the results file, not the report.
"""

from __future__ import annotations

from html import escape
from typing import Any

import numpy as np
import pandas as pd

from bandsolve.batch.overview import batch_overview, round_to_se, se_decimals
from bandsolve.calibration.model import INTERVAL_LEVEL, result_columns
from bandsolve.flags import FLAG_COLUMN, split_flags
from bandsolve.report._sections import frame_table, note
from bandsolve.report._views import LIST_ROWS

__all__ = ["ANALYTES_PER_TABLE", "FLAGGED_LISTED", "batch_section"]

#: Analytes per results table; more are spread over several tables.
ANALYTES_PER_TABLE = 4
#: Flagged samples named in the overview of a large batch.
FLAGGED_LISTED = 100


def _number(value: float, decimals: int) -> str:
    if not np.isfinite(value):
        return "–"
    return f"{value:.{max(decimals, 0)}f}"


def _cells(table: pd.DataFrame, analyte: str) -> list[str]:
    """``estimate ± SE`` over the interval, at the decimals the SE supports (HTML)."""
    name, se, low, high = result_columns(analyte)
    decimals = se_decimals(table[se].to_numpy(float))
    out = []
    for est, sd, lo, hi, d in zip(table[name], table[se], table[low], table[high], decimals,
                                  strict=True):
        if not np.isfinite(sd):
            out.append(f"{escape(f'{est:.4g}')} <span class=\"interval\">(no SE)</span>")
            continue
        out.append(f"{_number(est, d)} ± {_number(sd, d)}<br><span class=\"interval\">"
                   f"{_number(lo, d)} to {_number(hi, d)}</span>")
    return out


def _codes(text: str) -> str:
    """Flag codes one per line (the results file joins them with ';')."""
    return "<br>".join(escape(code) for code in split_flags(str(text)))


def _listed(table: pd.DataFrame, analytes: tuple[str, ...]) -> str:
    rounded = round_to_se(table, analytes)
    pct = round(INTERVAL_LEVEL * 100)
    parts = []
    for start in range(0, len(analytes), ANALYTES_PER_TABLE):
        group = analytes[start:start + ANALYTES_PER_TABLE]
        head = "".join(f"<th>{escape(a)}</th>" for a in ("sample", *group, FLAG_COLUMN))
        columns = [_cells(rounded, a) for a in group]
        body = "".join(
            f"<tr><td>{escape(str(sample))}</td>" + "".join(f"<td>{c[i]}</td>" for c in columns)
            + f"<td class=\"codes\">{_codes(codes)}</td></tr>"
            for i, (sample, codes) in enumerate(zip(table["sample"],
                                                    table[FLAG_COLUMN].fillna(""), strict=True)))
        parts.append(f'<table class="batch"><thead><tr>{head}</tr></thead>'
                     f"<tbody>{body}</tbody></table>")
    return (f"<p class=\"meta\">Each cell: estimate ± standard error, and below it the {pct} % "
            "prediction interval, rounded to two significant digits of the standard error."
            + (f" The {len(analytes)} analytes are shown {ANALYTES_PER_TABLE} at a time."
               if len(analytes) > ANALYTES_PER_TABLE else "") + "</p>" + "".join(parts))


def _overview(table: pd.DataFrame, analytes: tuple[str, ...]) -> str:
    view = batch_overview(table, analytes)
    counts = (frame_table(view.flag_counts.rename(columns={"percent": "% of samples"}))
              if len(view.flag_counts) else note("No result carries a flag."))
    shown = view.flagged.head(FLAGGED_LISTED).dropna(axis="columns", how="all")
    more = len(view.flagged) - len(shown)
    flagged = ""
    if len(shown):
        flagged = ("<h3>Flagged samples</h3>" + note("Farthest beyond a limit first.")
                   + frame_table(round_to_se(shown, analytes))
                   + (note(f"… and {more} more flagged samples: every row is in the results "
                           "file.") if more > 0 else ""))
    return (f"<p class=\"meta\">A batch of more than {LIST_ROWS} spectra is summarised here; "
            "the full table (every sample, its standard errors, intervals and flag codes) is "
            "the results file written by <code>bandsolve predict --out</code>.</p>"
            "<h3>Results by flag code</h3>" + counts
            + "<h3>Distribution of the estimates</h3>" + frame_table(view.distribution)
            + flagged)


def _skipped_html(failures: list[Any]) -> str:
    if not failures:
        return ""
    items = "".join(f"<li><code>{escape(str(f.input))}</code>: {escape(str(f.reason))}</li>"
                    for f in failures)
    return (f'<div class="banner"><p>{len(failures)} batch input(s) could not be read and '
            f"were skipped; their spectra are not in this table:</p>"
            f'<ul class="skipped">{items}</ul></div>')


def batch_section(analytes: tuple[str, ...], table: pd.DataFrame | None,
                  failures: list[Any] | None = None) -> str:
    """Results of the batch; ``failures`` (objects with ``input`` and ``reason``) listed
    first."""
    skipped = _skipped_html(failures or [])
    if table is None:
        return skipped or note("No prediction batch was included in this report.")
    n_flag = int((table[FLAG_COLUMN].fillna("") != "").sum())
    head = f"<p>{len(table)} spectra predicted, {n_flag} flagged.</p>"
    body = _listed(table, analytes) if len(table) <= LIST_ROWS else _overview(table, analytes)
    return skipped + head + body
