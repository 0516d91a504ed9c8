"""What a person reads of a results table: values rounded to what their standard error
supports, and an overview of a large batch (counts by flag, distributions, flagged samples).

Rounding follows the GUM convention of quoting an uncertainty to at most two significant
digits and the value to the same decimal place; the full-precision table stays the default
output for pipelines (``bandsolve predict --round`` asks for the rounded one).

References
----------
JCGM 100:2008. Evaluation of measurement data — Guide to the expression of uncertainty in
measurement (GUM), section 7.2.6 (two significant digits at most for an uncertainty).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd

from bandsolve.calibration.model import result_columns
from bandsolve.flags import FLAG_COLUMN, SEPARATOR

__all__ = ["BatchOverview", "RoundingSink", "batch_overview", "round_to_se", "se_decimals"]

#: Significant digits kept in a standard error when rounding (GUM 7.2.6).
SE_DIGITS = 2


def se_decimals(se: np.ndarray, digits: int = SE_DIGITS) -> np.ndarray:
    """Decimal places that keep ``digits`` significant digits of each standard error.

    Parameters
    ----------
    se : ndarray, shape (n,)
        Standard errors (positive; zero, NaN or infinite give -1, meaning "do not round").

    Returns
    -------
    ndarray of int, shape (n,)
        ``digits − 1 − floor(log10(se))`` (negative for SE ≥ 10^digits: round to tens…).
    """
    se = np.asarray(se, dtype=float)
    ok = np.isfinite(se) & (se > 0)
    out = np.full(se.shape, -1, dtype=int)
    out[ok] = digits - 1 - np.floor(np.log10(se[ok])).astype(int)
    return out


def _round(values: np.ndarray, decimals: np.ndarray, keep: np.ndarray) -> np.ndarray:
    """Each value rounded to its own number of decimals (exact powers of ten both ways)."""
    out = np.array(values, dtype=float, copy=True)
    pos = keep & (decimals >= 0)
    neg = keep & (decimals < 0)
    scale = 10.0 ** np.abs(decimals)
    out[pos] = np.round(out[pos] * scale[pos]) / scale[pos]
    out[neg] = np.round(out[neg] / scale[neg]) * scale[neg]
    return out


def round_to_se(table: pd.DataFrame, analytes: Sequence[str],
                digits: int = SE_DIGITS) -> pd.DataFrame:
    """A copy of a results table with each analyte's numbers rounded to what its SE supports.

    Per row and analyte, the SE keeps ``digits`` significant digits and the estimate and the
    interval ends are rounded to the same decimal place (8.180232916782774 with SE 0.01123
    becomes 8.180 with SE 0.011). Rows without a finite positive SE are left unrounded.
    Diagnostic ratios keep three significant digits.

    Parameters
    ----------
    table : DataFrame
        Columns of :meth:`bandsolve.calibration.model.Calibration.predict`.
    analytes : sequence of str
        The model's analyte labels.

    References
    ----------
    JCGM 100:2008 (GUM), section 7.2.6.
    """
    out = table.copy()
    for analyte in analytes:
        name, se, low, high = result_columns(analyte)
        if name not in out.columns or se not in out.columns:
            continue
        sd = out[se].to_numpy(float)
        decimals = se_decimals(sd, digits)
        keep = np.isfinite(sd) & (sd > 0)
        for column in (name, se, low, high):
            if column in out.columns:
                out[column] = _round(out[column].to_numpy(float), decimals, keep)
    for column in ("residual_ratio", "t2_ratio", "leverage_ratio"):
        if column in out.columns:
            values = out[column].to_numpy(float)
            mag = np.where(np.isfinite(values) & (values != 0), np.abs(values), 1.0)
            decimals = 2 - np.floor(np.log10(mag)).astype(int)
            out[column] = _round(values, decimals, np.isfinite(values))
    return out


class RoundingSink:
    """A batch sink (:class:`bandsolve.batch.predict.Sink`) that rounds each results frame
    with :func:`round_to_se` before passing it on; other sinks (the ledger) keep every digit."""

    def __init__(self, inner, analytes: Sequence[str]) -> None:
        self.inner = inner
        self.analytes = tuple(analytes)

    def begin_input(self, position: int, item: str) -> None:
        self.inner.begin_input(position, item)

    def write(self, frame: pd.DataFrame) -> None:
        self.inner.write(round_to_se(frame, self.analytes))

    def discard_input(self) -> None:
        self.inner.discard_input()

    def commit_input(self) -> None:
        self.inner.commit_input()


@dataclass(frozen=True)
class BatchOverview:
    """A batch in a few tables: how many were flagged and why, and how values are spread.

    Attributes
    ----------
    n_samples, n_flagged : int
        Result rows, and rows with at least one flag.
    flag_counts : DataFrame
        ``flag``, ``analyte`` (empty for sample-wide codes), ``samples``, ``percent``; most
        frequent first.
    distribution : DataFrame
        One row per analyte: ``analyte``, ``n``, ``min``, ``5 %``, ``median``, ``95 %``,
        ``max`` of the estimates, and ``median SE``.
    flagged : DataFrame
        The flagged rows: ``sample``, ``source``, the flag codes and the diagnostic ratios,
        farthest beyond a limit first (largest of the three ratios).
    """

    n_samples: int
    n_flagged: int
    flag_counts: pd.DataFrame
    distribution: pd.DataFrame
    flagged: pd.DataFrame

    def summary(self) -> str:
        """One line: counts of samples and of flagged samples."""
        share = 100.0 * self.n_flagged / self.n_samples if self.n_samples else 0.0
        return (f"{self.n_samples} spectra predicted, {self.n_flagged} flagged "
                f"({share:.1f} %).")


def _flag_counts(codes: pd.Series, n: int) -> pd.DataFrame:
    parts = codes[codes != ""].str.split(SEPARATOR).explode()
    counts = parts.value_counts()
    rows = []
    for text, count in counts.items():
        code, _, analyte = str(text).partition(":")
        rows.append({"flag": code, "analyte": analyte, "samples": int(count),
                     "percent": 100.0 * int(count) / n})
    return pd.DataFrame(rows, columns=["flag", "analyte", "samples", "percent"])


def batch_overview(table: pd.DataFrame, analytes: Sequence[str]) -> BatchOverview:
    """Counts by flag code, distributions of the estimates, and the flagged rows.

    Parameters
    ----------
    table : DataFrame, n rows
        Columns of :meth:`bandsolve.calibration.model.Calibration.predict`.
    analytes : sequence of str, length m
    """
    codes = table[FLAG_COLUMN].fillna("").astype(str)
    flagged_mask = (codes != "").to_numpy()
    n = len(table)
    rows = []
    for analyte in analytes:
        name, se = result_columns(analyte)[:2]
        values = table[name].to_numpy(float)
        values = values[np.isfinite(values)]
        sds = table[se].to_numpy(float)
        sds = sds[np.isfinite(sds)]
        q = (np.quantile(values, [0.0, 0.05, 0.5, 0.95, 1.0]) if values.size
             else np.full(5, np.nan))
        rows.append({"analyte": analyte, "n": int(values.size), "min": q[0], "5 %": q[1],
                     "median": q[2], "95 %": q[3], "max": q[4],
                     "median SE": float(np.median(sds)) if sds.size else np.nan})
    keep = [c for c in ("sample", "source", FLAG_COLUMN, "residual_ratio", "t2_ratio",
                        "leverage_ratio") if c in table.columns]
    flagged = table.loc[flagged_mask, keep]
    ratios = [c for c in ("residual_ratio", "t2_ratio", "leverage_ratio") if c in keep]
    if ratios:
        worst = flagged[ratios].astype(float).max(axis=1, skipna=True).fillna(-np.inf)
        flagged = flagged.iloc[np.argsort(-worst.to_numpy(), kind="stable")]
    return BatchOverview(n_samples=n, n_flagged=int(flagged_mask.sum()),
                         flag_counts=_flag_counts(codes, max(n, 1)),
                         distribution=pd.DataFrame(rows),
                         flagged=flagged.reset_index(drop=True))
