"""The text summary of a calibration (:meth:`Calibration.summary`), laid out as a results sheet.

A header of two columns of ``key: value`` pairs, then one block per topic (analytes and their
calibrated ranges, component choice, diagnostic limits, figures of merit), then numbered notes
with the cautions. Built from :meth:`Calibration.describe` and the typed records only.
"""

from __future__ import annotations

import math
import textwrap
from typing import Any

from bandsolve.calibration.interval import IntervalBasis
from bandsolve.calibration.records import Limits, Selection
from bandsolve.cautions import SHORT_CAUTION
from bandsolve.concentrations import range_text
from bandsolve.merit import FiguresOfMerit

__all__ = ["WIDTH", "format_summary", "shared_error_note"]

#: Width of the summary in characters (fits a terminal and an A4 page in monospace).
WIDTH = 78


def _pairs(left: list[tuple[str, str]], right: list[tuple[str, str]]) -> list[str]:
    """Two columns of ``key: value``, each value right-aligned in its half."""
    half = (WIDTH - 2) // 2

    def cell(pair: tuple[str, str]) -> str:
        key = f"{pair[0]}:"
        return f"{key}{pair[1]:>{half - len(key)}}"

    blank = ("", "")
    rows = zip(left + [blank] * (len(right) - len(left)),
               right + [blank] * (len(left) - len(right)), strict=True)
    return [(cell(a) + "  " + (cell(b) if b[0] else "")).rstrip() for a, b in rows]


def _number(value: float | None) -> str:
    return "none" if value is None or (isinstance(value, float) and math.isnan(value)) \
        else f"{value:.4g}"


def _limits(limits: Limits) -> list[str]:
    """One paragraph per estimator: residual, T² and leverage limits, how set, α."""
    lines = textwrap.wrap(f"Diagnostic limits (a result above a limit is flagged; leverage "
                          f"limit = {limits.leverage_factor:g} × parameters / calibration "
                          "samples):", WIDTH, subsequent_indent="  ")
    for i, m in enumerate(limits.models):
        name = f"model {i + 1}: " if len(limits.models) > 1 else ""
        text = (f"{name}residual {_number(m.residual)} ({m.residual_method}); Hotelling T² "
                f"{_number(m.t2)}; leverage {_number(m.leverage)}; α = {_number(m.alpha)}")
        lines += textwrap.wrap(text, WIDTH, initial_indent="  ", subsequent_indent="    ")
        if m.error_scale:
            lines += textwrap.wrap(f"SE error model: {m.error_model_text()}", WIDTH,
                                   initial_indent="  ", subsequent_indent="    ")
    return lines


def _selection(selection: Selection, analytes: tuple[str, ...]) -> list[str]:
    lines = [f"Component choice ({selection.mode.upper()})"]
    for i, c in enumerate(selection.models):
        who = "all analytes" if len(selection.models) == 1 else analytes[i]
        level = f", α = {c.alpha:g}" if c.alpha is not None else ""
        lines.append(textwrap.fill(
            f"{who}: {c.n_components} component(s) by the {c.rule} rule{level}; "
            f"cross-validation {c.cv}; RMSECV minimum at {c.minimum_at}", WIDTH,
            subsequent_indent="    "))
    return lines


def format_summary(description: dict[str, Any], limits: Limits, selection: Selection | None,
                   merit: FiguresOfMerit | None, title: str) -> str:
    """The summary text of a calibration from its description and records."""
    d, prov = description, description["provenance"]
    axis = d["axis"]
    rule = "=" * WIDTH
    head = _pairs(
        [("Method", d["method"].upper()), ("Analytes", str(len(d["analytes"]))),
         ("Axis", f"{axis['first']:g}-{axis['last']:g} {axis['unit']}"),
         ("Points", str(axis["points"])), ("Path length", _path(d["path_length_cm"]))],
        [("Calibration samples", str(prov.get("n_calibration_samples", "-"))),
         ("Created", str(prov.get("created", "-"))), ("Ceiling", f"{d['ceiling_AU']:g} AU"),
         ("Preprocessing", str(d["preprocessing"])),
         ("Checksum", str(prov.get("model_checksum", "not saved yet"))[:16])])
    name_w = max(8, *(len(a["label"]) for a in d["analytes"]))
    lines = [rule, f"{title:^{WIDTH}}", rule, *head, rule,
             f"{'analyte':<{name_w}}  calibrated (or validated) range", "-" * WIDTH]
    lines += [f"{a['label']:<{name_w}}  {range_text(a['calibrated_min'], a['calibrated_max'])}"
              for a in d["analytes"]]
    if selection is not None:
        lines += [rule, *_selection(selection, tuple(a["label"] for a in d["analytes"]))]
    lines += [rule, *_limits(limits), rule]
    notes = [SHORT_CAUTION]
    if merit is not None:
        lines += [merit.summary(width=WIDTH), rule]
    else:
        notes.append(prov.get("merit_note") or "No figures of merit are stored in this model.")
    if prov.get("data_label"):
        notes.append(f"Data: {prov['data_label']}")
    notes += [f"Trained on {f['role']} {f['name']} (SHA-256 {f['sha256']})"
              for f in prov.get("training_files") or []]
    interval = d.get("interval") or {}
    if interval.get("basis") == "validated":
        basis = IntervalBasis.from_dict(interval)
        runs = f" from {basis.n_runs} runs" if basis.n_runs else ""
        notes.append(f"Intervals validated on {basis.n_validation} independent samples"
                     f"{runs} (t quantile on {basis.t_dof_text} effective degrees of freedom): "
                     "model error added to every SE: "
                     + basis.model_error_text([a["label"] for a in d["analytes"]]))
    else:
        notes.append("Intervals: calibration only (no independent validation carried into "
                     "the model; see bandsolve assess --out-model)")
    if d.get("shared_error"):
        notes.append(shared_error_note(d["shared_error"]))
    notes += [f"Reference value disagrees with the spectrum at build: {o['sample']} "
              f"({o['analyte']}, t = {o['t']:+.1f})" for o in prov.get("reference_outliers") or ()]
    if d.get("transfer"):
        notes.append(f"Transferred to another instrument by {d['transfer'].get('method')}")
    lines.append("Notes:")
    lines += [textwrap.fill(text, WIDTH, initial_indent=f"[{i}] ", subsequent_indent="    ")
              for i, text in enumerate(notes, start=1)]
    return "\n".join(lines)


#: Above this shared share, the summary advises replicate or more standards. Measured for this
#: package with exact (oracle) 95 % intervals, tests/benchmarks/shared_error_bound.py: at a
#: share of 0.10 (2 analytes, duplicate standards) 8 % of calibrations have an analyte
#: covered below 90 %, at 0.15 (3 analytes, duplicates) 17 %, at 0.41 (6 analytes, single) 31 %.
SHARED_ADVICE = 0.12


def shared_error_note(shared: dict[str, float]) -> str:
    """The note on the error every result of a CLS calibration from standards shares."""
    text = (f"Error shared by every result: at the centre of the calibrated ranges "
            f"{shared['share']:.0%} of a result's noise variance comes from the standards' own "
            f"noise through the estimated pure spectra (leverage h = "
            f"{shared['mid_range_leverage']:.3g}). It is the same for all results of this "
            "calibration: it does not average out over replicate measurements, and results "
            "of one calibration tend to err in the same direction.")
    if shared["share"] > SHARED_ADVICE:
        text += " Preparing each standard in duplicate, or at more levels, lowers it."
    return text


def _path(value: float | None) -> str:
    return f"{value:g} cm" if value else "not recorded"
