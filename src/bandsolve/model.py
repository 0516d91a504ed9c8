"""A calibration ready for routine use: preprocessing, estimator, limits and provenance.

:class:`Calibration` ties a fitted estimator to the axis, units and analytes it was built for,
checks every new set of spectra against them, and turns estimates into a results table with
standard errors, prediction intervals, diagnostics and flags.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd
from scipy import stats

from .errors import DataError, ModelError, where
from .flags import join_flags
from .preprocess import SpectralPreprocessor
from .spectra import DEFAULT_CEILING_AU, SpectralSet

__all__ = ["Calibration", "Detail", "result_columns"]

#: Coverage of the prediction intervals in every results table.
INTERVAL_LEVEL = 0.95


@dataclass(frozen=True)
class Detail:
    """Method-independent per-sample results, before they become a table.

    Attributes
    ----------
    concentrations, standard_errors : ndarray, shape (n, m)
    dof : ndarray, shape (m,)
        Degrees of freedom of the Student t quantile for each analyte's interval.
    residual_ratio : ndarray, shape (n,)
        Spectral residual (CLS F ratio, or PLS Q) divided by its limit.
    t2_ratio : ndarray, shape (n,)
        Hotelling T² divided by its limit (NaN for CLS).
    leverage_ratio : ndarray, shape (n,)
        Leverage divided by its warning limit.
    notes : list of str
        Model-level remarks that apply to every row (for example why an SE is missing).
    """

    concentrations: np.ndarray
    standard_errors: np.ndarray
    dof: np.ndarray
    residual_ratio: np.ndarray
    t2_ratio: np.ndarray
    leverage_ratio: np.ndarray
    notes: list[str] = field(default_factory=list)


def result_columns(analyte: str) -> tuple[str, str, str, str]:
    """Column names for one analyte: estimate (the exact analyte label), SE, interval ends."""
    pct = round(INTERVAL_LEVEL * 100)
    return analyte, f"{analyte} SE", f"{analyte} low{pct}", f"{analyte} high{pct}"


@dataclass(eq=False)
class Calibration:
    """A frozen calibration model.

    Parameters
    ----------
    method : {"cls", "pls"}
    analytes : tuple of str
        Analyte labels exactly as in the training table (unit bracket included).
    axis : ndarray, shape (p,)
        Input grid the model expects, in ``axis_unit``, before preprocessing.
    axis_unit : str
    preprocessor : SpectralPreprocessor
        Fitted row-wise preprocessing.
    estimators : list
        Fitted estimators: one for CLS and PLS2, one per analyte for PLS1.
    calibrated_range : ndarray, shape (m, 2)
        Lowest and highest calibrated concentration per analyte.
    settings : dict
        Method parameters as given by the user (JSON-serialisable).
    path_length_cm : float or None
        Cell path length of the calibration, checked against new spectra when both are known.
    ceiling : float
        Photometric ceiling in AU.
    limits : dict
        Diagnostic limits and how they were obtained (JSON-serialisable).
    selection, merit : dict or None
        Component-selection evidence and figures of merit (JSON-serialisable).
    provenance : dict
        Training-file fingerprints, creation time, library versions, data labels.
    """

    method: str
    analytes: tuple[str, ...]
    axis: np.ndarray
    axis_unit: str
    preprocessor: SpectralPreprocessor
    estimators: list[Any]
    calibrated_range: np.ndarray
    settings: dict[str, Any] = field(default_factory=dict)
    path_length_cm: float | None = None
    ceiling: float = DEFAULT_CEILING_AU
    limits: dict[str, Any] = field(default_factory=dict)
    selection: dict[str, Any] | None = None
    merit: dict[str, Any] | None = None
    provenance: dict[str, Any] = field(default_factory=dict)

    # ------------------------------------------------------------------ input checks
    def prepare(self, spectra: SpectralSet) -> tuple[np.ndarray, list[str]]:
        """Check spectra against the model and return absorbance on the model grid.

        Returns
        -------
        X : ndarray, shape (n, p)
            Absorbance on :attr:`axis`.
        notes : list of str
            What was done to make them fit (unit conversion, resampling).
        """
        notes: list[str] = []
        src = spectra.source
        if spectra.quantity == "absorptivity":
            raise DataError(f"{where(src)}these are absorptivities, not sample spectra")
        if (self.path_length_cm and spectra.path_length_cm
                and not np.isclose(self.path_length_cm, spectra.path_length_cm, rtol=1e-6)):
            raise DataError(
                f"{where(src)}path length {spectra.path_length_cm:g} cm differs from the "
                f"calibration's {self.path_length_cm:g} cm; measure in the calibrated cell"
            )
        if spectra.quantity != "absorbance":
            notes.append(f"converted from {spectra.quantity.replace('_', ' ')} to absorbance")
            spectra = spectra.to_absorbance()
        if spectra.axis_unit != self.axis_unit:
            notes.append(f"axis converted from {spectra.axis_unit} to {self.axis_unit}")
            spectra = spectra.convert_axis(self.axis_unit)
        if not spectra.same_grid(self.axis):
            spectra = spectra.resample(self.axis)
            notes.append("resampled onto the model grid by linear interpolation")
        return np.asarray(spectra.values), notes

    # ------------------------------------------------------------------ prediction
    def predict(self, spectra: SpectralSet) -> pd.DataFrame:
        """Concentrations with standard errors, 95 % prediction intervals, diagnostics, flags.

        Parameters
        ----------
        spectra : SpectralSet
            Routine spectra (absorbance or transmittance) covering the model's axis range.

        Returns
        -------
        pandas.DataFrame
            One row per spectrum: ``sample``, ``source``, then per analyte the estimate (column
            named exactly as the analyte), ``<analyte> SE``, ``<analyte> low95``,
            ``<analyte> high95``; then ``residual_ratio``, ``t2_ratio``, ``leverage_ratio``,
            ``flags`` (codes in :data:`bandsolve.flags.FLAG_CODES`) and ``notes``.
        """
        X, notes = self.prepare(spectra)
        over = np.max(X[:, self.preprocessor.mask_], axis=1) > self.ceiling
        detail = self.detail(X)
        return self._table(spectra, detail, over, notes + detail.notes)

    def detail(self, X: np.ndarray) -> Detail:
        """Per-sample estimates and diagnostics for absorbance on the model grid (n × p)."""
        from .model_detail import cls_detail, pls_detail

        Z = self.preprocessor.transform(X)
        if self.method == "cls":
            return cls_detail(self.estimators[0], Z)
        if self.method == "pls":
            return pls_detail(self.estimators, self.limits, Z)
        raise ModelError(f"unknown method {self.method!r} in the model")

    def _table(self, spectra: SpectralSet, d: Detail, over_ceiling: np.ndarray,
               notes: list[str]) -> pd.DataFrame:
        n = d.concentrations.shape[0]
        t = stats.t.ppf(0.5 + INTERVAL_LEVEL / 2, np.maximum(d.dof, 1))
        t = np.where(d.dof > 0, t, np.nan)
        cols: dict[str, Any] = {"sample": list(spectra.sample_ids),
                                "source": [spectra.source or ""] * n}
        flags: list[list[str]] = [[] for _ in range(n)]
        for k, label in enumerate(self.analytes):
            c, se = d.concentrations[:, k], d.standard_errors[:, k]
            name, name_se, name_lo, name_hi = result_columns(label)
            cols[name], cols[name_se] = c, se
            cols[name_lo], cols[name_hi] = c - t[k] * se, c + t[k] * se
            lo, hi = self.calibrated_range[k]
            for i in range(n):
                if c[i] > hi:
                    flags[i].append(f"above_range:{label}")
                elif c[i] < lo and lo > 0:
                    flags[i].append(f"below_range:{label}")
                if np.isfinite(se[i]) and c[i] < -2 * se[i]:
                    flags[i].append(f"negative:{label}")
                if not np.isfinite(se[i]):
                    flags[i].append("no_se")
        cols["residual_ratio"] = d.residual_ratio
        cols["t2_ratio"] = d.t2_ratio
        cols["leverage_ratio"] = d.leverage_ratio
        for i in range(n):
            head = []
            if d.residual_ratio[i] > 1:
                head.append("residual")
            if d.t2_ratio[i] > 1:
                head.append("t2")
            if d.leverage_ratio[i] > 1:
                head.append("leverage")
            if over_ceiling[i]:
                head.append("ceiling")
            flags[i] = head + flags[i]
        cols["flags"] = [join_flags(f) for f in flags]
        cols["notes"] = ["; ".join(dict.fromkeys(notes))] * n
        return pd.DataFrame(cols)

    # ------------------------------------------------------------------ description
    @property
    def n_analytes(self) -> int:
        """Number of analytes."""
        return len(self.analytes)

    def describe(self) -> dict[str, Any]:
        """JSON-friendly summary: method, analytes and ranges, axis, preprocessing, limits."""
        return {
            "method": self.method,
            "analytes": [
                {"label": a, "calibrated_min": float(lo), "calibrated_max": float(hi)}
                for a, (lo, hi) in zip(self.analytes, self.calibrated_range, strict=True)
            ],
            "axis": {"unit": self.axis_unit, "first": float(self.axis[0]),
                     "last": float(self.axis[-1]), "points": int(self.axis.size)},
            "preprocessing": self.preprocessor.describe(),
            "path_length_cm": self.path_length_cm,
            "ceiling_AU": self.ceiling,
            "settings": self.settings,
            "limits": self.limits,
            "selection": self.selection,
            "merit": self.merit,
            "provenance": self.provenance,
        }
