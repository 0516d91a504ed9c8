"""The results table: estimates, SEs, 95 % intervals, diagnostic ratios and flag codes.

One row per spectrum, built from a calibration's :class:`~bandsolve.calibration.detail.Detail`
(the README's "Result columns and flags" describes every column).
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import numpy as np
import pandas as pd

from bandsolve._distributions import t_quantile
from bandsolve.calibration.detail import Detail
from bandsolve.flags import FLAG_COLUMN, join_flags
from bandsolve.spectra import SpectralSet

__all__ = ["FLAG_ALPHA", "INTERVAL_LEVEL", "TEXT_COLUMNS", "result_columns", "results_table"]

#: Coverage of the prediction intervals in every results table.
INTERVAL_LEVEL = 0.95

#: Level of the concentration flags (``negative``, ``above_range``, ``below_range``) of a model
#: that set no diagnostic limit, and so has no α of its own (the build default).
FLAG_ALPHA = 0.01

#: Columns of a results table that hold text; every other column is a number.
TEXT_COLUMNS = ("sample", "source", FLAG_COLUMN, "interval_basis", "notes")


def _flag_column(n: int, checks: list[tuple[np.ndarray, str]]) -> np.ndarray:
    """The ``flags`` text per row: codes of the true checks, in order, joined by ``;``.

    Each distinct combination of raised flags is turned into text once, so the cost does not
    grow with the number of flagged rows beyond a sort of integer keys.
    """
    masks = np.column_stack([np.asarray(m, dtype=bool) for m, _ in checks])
    packed = np.ascontiguousarray(np.packbits(masks, axis=1))
    keys = packed.view(np.dtype((np.void, packed.shape[1]))).ravel()  # one key per row
    _, first, inverse = np.unique(keys, return_index=True, return_inverse=True)
    texts = np.array([join_flags(code for (_, code), on in zip(checks, masks[i], strict=True)
                                 if on) for i in first], dtype=object)
    return texts[inverse.ravel()]


def result_columns(analyte: str) -> tuple[str, str, str, str]:
    """Column names for one analyte: estimate (the exact analyte label), SE, interval ends."""
    pct = round(INTERVAL_LEVEL * 100)
    return analyte, f"{analyte} SE", f"{analyte} low{pct}", f"{analyte} high{pct}"


def results_table(spectra: SpectralSet, d: Detail, analytes: Sequence[str],
                  calibrated_range: np.ndarray, interval_basis: str,
                  over_ceiling: np.ndarray, notes: list[str],
                  alpha: float = FLAG_ALPHA) -> pd.DataFrame:
    """One results row per spectrum (see the module docstring).

    Parameters
    ----------
    spectra : SpectralSet
        The spectra predicted (ids and source).
    d : Detail
        Their estimates and diagnostics.
    analytes : sequence of str
        Analyte labels, in the order of ``d``'s columns.
    calibrated_range : ndarray, shape (m, 2)
        Lowest and highest calibrated concentration per analyte (range flags).
    interval_basis : str
        What the intervals rest on, written on every row.
    over_ceiling : ndarray of bool, shape (n,)
        Spectra above the photometric ceiling.
    notes : list of str
        Model-level remarks for the ``notes`` column.
    alpha : float
        Level of the concentration flags, the model's diagnostic α: ``negative`` when
        ``ĉ + t_{1−α,ν}·SE < 0``, ``above_range``/``below_range`` alike against the calibrated
        range, with ν the interval's degrees of freedom. Each is a one-sided test at ``α`` of
        "the true concentration is inside", so an absent analyte is flagged ``negative`` in a
        share ``α`` of clean samples, as a residual or T² limit is exceeded (a fixed 2 SE would
        raise 2.3–5 % depending on ν).
    """
    n = d.concentrations.shape[0]
    t = t_quantile(0.5 + INTERVAL_LEVEL / 2, np.maximum(d.dof, 1))
    t = np.where(d.dof > 0, t, np.nan)
    t_flag = np.where(d.dof > 0, t_quantile(1.0 - alpha, np.maximum(d.dof, 1)), 0.0)
    cols: dict[str, Any] = {"sample": list(spectra.sample_ids),
                            "source": [spectra.source or ""] * n}
    checks = [(d.residual_ratio > 1, "residual"),
              (d.t2_ratio > 1, "t2"),
              (d.leverage_ratio > 1, "leverage"), (over_ceiling, "ceiling")]
    missing_se = np.zeros(n, dtype=bool)
    for k, label in enumerate(analytes):
        c, se = d.concentrations[:, k], d.standard_errors[:, k]
        name, name_se, name_lo, name_hi = result_columns(label)
        cols[name], cols[name_se] = c, se
        cols[name_lo], cols[name_hi] = c - t[k] * se, c + t[k] * se
        lo, hi = calibrated_range[k]
        finite = np.isfinite(se)
        margin = t_flag[k] * np.where(finite, se, 0.0)  # significantly outside, not by noise
        checks += [(c - margin > hi, f"above_range:{label}"),
                   ((c + margin < lo) & (lo > 0), f"below_range:{label}"),
                   (c < -margin, f"negative:{label}")]
        missing_se |= ~finite
    checks.append((missing_se, "no_se"))
    checks.append((~np.isfinite(d.residual_ratio), "unchecked"))
    cols["residual_ratio"] = d.residual_ratio
    cols["t2_ratio"] = d.t2_ratio
    cols["leverage_ratio"] = d.leverage_ratio
    cols[FLAG_COLUMN] = _flag_column(n, checks)
    cols["interval_basis"] = [interval_basis] * n
    cols["notes"] = ["; ".join(dict.fromkeys(notes))] * n
    return pd.DataFrame(cols)
