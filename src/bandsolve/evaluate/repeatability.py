"""Do replicate measurements of one sample agree within their stated standard errors?

A 95 % interval is honest for a sample only if the errors the SE leaves out are small. One of
them shows whenever a lab measures a sample more than once: if the results of replicate
spectra of one sample scatter more than their SEs allow, something varies between
measurements that the model does not know (a path length or cell change, sample evaporation
or reaction, instrument drift), and every interval of that sample is too narrow.

For each sample (group of replicate results) and analyte with n ≥ 2 finite results, the
replicate variance ``s²`` is compared with the mean squared SE of those results,
``SE²``, by the χ² test of a variance against a stated value (NIST/SEMATECH e-Handbook of
Statistical Methods, §1.3.5.8):

``X = (n − 1)s²/SE²``, upper-tail p from χ²_{n−1}.

The replicates share the calibration's own error (the error of K̂ or of the regression
vector, and any validated model error for samples measured together), which is part of the SE
but does not vary between them, so under "the SE is right" their scatter is at most SE: the
test is conservative, and a small p means the intervals of that sample are too narrow. The SE
is taken as known (its own degrees of freedom are not in a results table); with SEs from few
degrees of freedom the test fires somewhat more often than α.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
from scipy import stats

from bandsolve.concentrations import groups_in_order, labels_from_ids
from bandsolve.errors import DataError

__all__ = ["Repeatability", "repeatability", "result_analytes"]


def result_analytes(results: pd.DataFrame) -> list[str]:
    """Analytes of a results table: columns ``a`` that have an ``a SE`` column beside them."""
    return [c[:-3] for c in results.columns
            if isinstance(c, str) and c.endswith(" SE") and c[:-3] in results.columns]


def _groups(samples: list[str], key: str | Mapping[str, str]) -> list[str]:
    """Sample group of each result: ``~REGEX`` on the sample ids, or a mapping from sample id
    to group (:mod:`bandsolve.concentrations`, as for cross-validation groups)."""
    if isinstance(key, Mapping):
        return [str(g) for g in groups_in_order(key, samples)]
    if not key.startswith("~"):
        raise DataError(f"the sample key {key!r} must be ~REGEX on the sample ids, e.g. "
                        r"'~(.*)_rep\d+' for mixA_rep1, mixA_rep2")
    return labels_from_ids(samples, key[1:])


@dataclass(frozen=True)
class Repeatability:
    """Replicate agreement per sample and analyte (:func:`repeatability`).

    Attributes
    ----------
    table : pandas.DataFrame
        One row per sample group and analyte with n ≥ 2 finite results: ``sample``,
        ``analyte``, ``n``, ``mean``, ``replicate SD``, ``SE`` (root mean square of the
        results' SEs), ``SD/SE``, ``p`` and ``disagree`` (p < α). Concentration units.
    alpha : float
        Level of the test.
    single : int
        Sample groups with one result only (nothing to compare).
    """

    table: pd.DataFrame
    alpha: float
    single: int

    @property
    def n_disagree(self) -> int:
        """Rows (sample and analyte) whose replicates scatter more than their SE allows."""
        return int(self.table["disagree"].sum())

    def summary(self) -> list[str]:
        """Plain-language lines: the count, then each disagreeing sample and analyte."""
        groups = self.table["sample"].nunique()
        lines = [f"{groups} samples with replicates ({self.single} measured once); "
                 f"{self.n_disagree} sample-analyte pairs scatter more than their SE allows "
                 f"(χ² test, α = {self.alpha:g})"]
        for row in self.table[self.table["disagree"]].to_dict(orient="records"):
            lines.append(f"{row['sample']}, {row['analyte']}: {row['n']} replicates, SD "
                         f"{row['replicate SD']:.3g} = {row['SD/SE']:.2f} × SE {row['SE']:.3g}, "
                         f"p = {row['p']:.2g}: the intervals of this sample are too narrow; "
                         "look for what changed between its measurements (cell, path length, "
                         "evaporation, drift)")
        return lines

    def to_dict(self) -> dict[str, Any]:
        """JSON-friendly dictionary."""
        return {"alpha": self.alpha, "single": self.single, "disagree": self.n_disagree,
                "rows": self.table.to_dict(orient="records")}


def repeatability(results: pd.DataFrame, key: str | Mapping[str, str], *,
                  alpha: float = 0.01) -> Repeatability:
    """Test whether replicate results of each sample agree within their SEs.

    Parameters
    ----------
    results : pandas.DataFrame
        A results table (:meth:`bandsolve.Calibration.predict`, or a file ``predict`` wrote):
        ``sample``, and per analyte its estimate and ``<analyte> SE``.
    key : str or mapping
        ``~REGEX`` on the sample ids whose first capture group names the sample (replicates
        share it), or a mapping from sample id to sample.
    alpha : float
        Level of the χ² test (module docstring).

    Returns
    -------
    Repeatability
    """
    if not 0 < alpha < 1:
        raise DataError(f"alpha must lie between 0 and 1, not {alpha}")
    analytes = result_analytes(results)
    if "sample" not in results.columns or not analytes:
        raise DataError("not a results table: it needs a 'sample' column and, per analyte, "
                        "its estimate and '<analyte> SE' columns (as predict writes them)")
    groups = pd.Series(_groups([str(s) for s in results["sample"]], key), index=results.index)
    rows, single = [], 0
    for name, idx in groups.groupby(groups, sort=False).groups.items():
        if len(idx) < 2:
            single += 1
            continue
        for a in analytes:
            c = results.loc[idx, a].to_numpy(float)
            se = results.loc[idx, f"{a} SE"].to_numpy(float)
            ok = np.isfinite(c) & np.isfinite(se) & (se > 0)
            n = int(ok.sum())
            if n < 2:
                continue
            sd = float(np.std(c[ok], ddof=1))
            se_rms = float(np.sqrt(np.mean(se[ok] ** 2)))
            p = float(stats.chi2.sf((n - 1) * sd**2 / se_rms**2, n - 1))
            rows.append({"sample": name, "analyte": a, "n": n, "mean": float(c[ok].mean()),
                         "replicate SD": sd, "SE": se_rms, "SD/SE": sd / se_rms, "p": p,
                         "disagree": p < alpha})
    columns = ["sample", "analyte", "n", "mean", "replicate SD", "SE", "SD/SE", "p", "disagree"]
    return Repeatability(pd.DataFrame(rows, columns=columns), float(alpha), single)
