"""A calibration ready for routine use: preprocessing, estimator, limits and provenance.

:class:`Calibration` ties a fitted estimator to the axis, units and analytes it was built for,
checks every new set of spectra against them, and turns estimates into a results table with
standard errors, prediction intervals, diagnostics and flags.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Mapping
from dataclasses import dataclass, field
from types import MappingProxyType
from typing import Any

import numpy as np
import pandas as pd

from bandsolve.calibration.blocks import EVAL_ROWS, in_blocks, scan_block
from bandsolve.calibration.detail import Detail
from bandsolve.calibration.interval import IntervalBasis
from bandsolve.calibration.methods import CalibrationMethod, method_named
from bandsolve.calibration.records import Limits, Selection
from bandsolve.calibration.results import (
    FLAG_ALPHA,
    INTERVAL_LEVEL,
    TEXT_COLUMNS,
    result_columns,
    results_table,
)
from bandsolve.concentrations import ConcentrationTable, align, reference_matrix
from bandsolve.errors import DataError, where
from bandsolve.merit import FiguresOfMerit
from bandsolve.preprocess import SpectralPreprocessor
from bandsolve.spectra import DEFAULT_CEILING_AU, SpectralSet
from bandsolve.transfer import Transfer

__all__ = ["EVAL_ROWS", "INTERVAL_LEVEL", "TEXT_COLUMNS", "Aligned", "Calibration", "Detail",
           "result_columns"]


@dataclass(frozen=True)
class Aligned:
    """Spectra put on a model by :meth:`Calibration.align`.

    Attributes
    ----------
    sample_ids : tuple of str
    X : ndarray, shape (n, p)
        Absorbance on the model's axis (before preprocessing).
    reference : ndarray, shape (n, m) or None
        Known concentrations in the model's analyte order.
    notes : tuple of str
        What was done to make the spectra fit (conversion, resampling).
    """

    sample_ids: tuple[str, ...]
    X: np.ndarray
    reference: np.ndarray | None = None
    notes: tuple[str, ...] = ()


@dataclass(frozen=True, eq=False, repr=False)
class Calibration:
    """A frozen calibration model.

    Its fields cannot be reassigned; arrays are read-only and the dictionaries are read-only
    views. Make a changed copy with :func:`dataclasses.replace`. The fitted estimators are
    scikit-learn objects and are never refitted after a build.

    Parameters
    ----------
    method : {"cls", "pls"}
        Name of the :class:`~bandsolve.calibration.methods.CalibrationMethod` (``kind``).
    analytes : tuple of str
        Analyte labels exactly as in the training table (unit bracket included).
    axis : ndarray, shape (p,)
        Input grid the model expects, in ``axis_unit``, before preprocessing.
    axis_unit : str
    preprocessor : SpectralPreprocessor
        Fitted row-wise preprocessing.
    estimators : tuple
        Fitted estimators: one for CLS and PLS2, one per analyte for PLS1.
    calibrated_range : ndarray, shape (m, 2)
        Lowest and highest calibrated concentration per analyte.
    settings : mapping
        Method parameters as given by the user (JSON-serialisable).
    path_length_cm : float or None
        Cell path length of the calibration, checked against new spectra when both are known.
    ceiling : float
        Photometric ceiling in AU.
    limits : Limits
        Diagnostic limits per estimator and how they were obtained.
    selection : Selection or None
        Component-selection evidence (PLS).
    merit : FiguresOfMerit or None
        Figures of merit computed at build time.
    provenance : mapping
        Training-file fingerprints, creation time, library versions, data labels.
    transfer : Transfer or None
        For a model moved to another instrument: the map applied to that instrument's
        spectra (or the correction applied to its predictions) before anything else, with
        its record (:mod:`bandsolve.transfer`).
    interval : IntervalBasis or None
        What the intervals rest on beyond calibration. None: calibration only. Written by
        ``bandsolve assess --out-model``: the model-error SD τ per analyte that an
        independent validation revealed, added in quadrature to every SE
        (:mod:`bandsolve.evaluate.validated`).
    """

    method: str
    analytes: tuple[str, ...]
    axis: np.ndarray
    axis_unit: str
    preprocessor: SpectralPreprocessor
    estimators: tuple[Any, ...]
    calibrated_range: np.ndarray
    limits: Limits
    settings: Mapping[str, Any] = field(default_factory=dict)
    path_length_cm: float | None = None
    ceiling: float = DEFAULT_CEILING_AU
    selection: Selection | None = None
    merit: FiguresOfMerit | None = None
    provenance: Mapping[str, Any] = field(default_factory=dict)
    transfer: Transfer | None = None
    interval: IntervalBasis | None = None

    def __post_init__(self) -> None:
        method_named(self.method)  # refuse an unknown method at once
        freeze = {"analytes": tuple(self.analytes), "estimators": tuple(self.estimators),
                  "settings": MappingProxyType(dict(self.settings)),
                  "provenance": MappingProxyType(dict(self.provenance))}
        for name in ("axis", "calibrated_range"):
            arr = np.array(getattr(self, name), dtype=float)
            arr.flags.writeable = False
            freeze[name] = arr
        if len(self.limits.models) != len(freeze["estimators"]):
            raise DataError(f"{len(self.limits.models)} limit records for "
                            f"{len(freeze['estimators'])} estimators")
        for name, value in freeze.items():
            object.__setattr__(self, name, value)

    def __repr__(self) -> str:
        """One line: method, analytes, axis, path length and checksum (no arrays)."""
        checksum = str(self.provenance.get("model_checksum", "not saved"))[:12]
        path = f"{self.path_length_cm:g} cm" if self.path_length_cm else "not recorded"
        return (f"Calibration(method={self.method!r}, analytes={list(self.analytes)!r}, "
                f"axis={self.axis[0]:g}-{self.axis[-1]:g} {self.axis_unit} "
                f"({self.axis.size} points), path_length={path}, checksum={checksum})")

    @property
    def kind(self) -> CalibrationMethod:
        """The method's behaviour (:mod:`bandsolve.calibration.methods`)."""
        return method_named(self.method)

    @property
    def interval_basis(self) -> str:
        """What the intervals rest on, in words (the ``interval_basis`` column of results):
        ``calibration only``, with the runs when the SE's error model came from leaving runs
        of the calibration out, or the validation's label."""
        if self.interval is not None:
            return self.interval.label
        runs = [m.error_scale_method for m in self.limits.models if m.error_scale_runs]
        return "calibration only" + (f" ({runs[0]})" if runs else "")

    @property
    def flag_alpha(self) -> float:
        """Level of the concentration flags: the model's diagnostic α (of its first estimator
        that set limits; :data:`~bandsolve.calibration.results.FLAG_ALPHA` when none did)."""
        alphas = [m.alpha for m in self.limits.models if np.isfinite(m.alpha)]
        return float(alphas[0]) if alphas else FLAG_ALPHA

    @property
    def used_mask(self) -> np.ndarray:
        """Points of :attr:`axis` the model uses, bool of shape (p,)."""
        return self.preprocessor.used_mask

    @property
    def used_axis(self) -> np.ndarray:
        """Axis of the preprocessed spectra the estimators see, shape (p',)."""
        return self.preprocessor.used_axis

    @property
    def scales_with_path_length(self) -> bool:
        """True for CLS models from an absorptivity table: predictions for spectra measured in
        another cell use :meth:`at_path_length` (Beer's law, exact)."""
        return bool(self.settings.get("from_absorptivities")) and self.transfer is None

    def _other_cell(self, spectra: SpectralSet) -> bool:
        return bool(self.path_length_cm and spectra.path_length_cm and not np.isclose(
            self.path_length_cm, spectra.path_length_cm, rtol=1e-6))

    def at_path_length(self, path_length_cm: float) -> Calibration:
        """This absorptivity model for a cell of ``path_length_cm``: pure spectra scaled by
        Beer's law ``A = εbc`` (exact), limits and noise unchanged.

        Raises
        ------
        DataError
            For models that cannot scale (built from standards, or transferred).
        """
        if not self.scales_with_path_length:
            raise DataError(f"this model was built from standards in a {self.path_length_cm:g} "
                            "cm cell and cannot be scaled to another path length")
        factor = path_length_cm / self.path_length_cm
        return dataclasses.replace(
            self, estimators=tuple(e.for_path_factor(factor) for e in self.estimators),
            path_length_cm=path_length_cm,
            settings={**self.settings, "path_length_cm": path_length_cm})

    # ------------------------------------------------------------------ input checks
    def prepare(self, spectra: SpectralSet, *, whole_axis: bool = False
                ) -> tuple[np.ndarray, list[str]]:
        """Check spectra against the model and return absorbance on the model grid.

        Parameters
        ----------
        spectra : SpectralSet
        whole_axis : bool
            Resample every point of the grid, not only the used window (an instrument
            transfer maps each point from its neighbours).

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
        if self._other_cell(spectra):
            how = ("predict scales this absorptivity model by Beer's law, but assessments and "
                   "reports need spectra measured" if self.scales_with_path_length else
                   "a model built from standards cannot be scaled to another cell exactly (the "
                   "standards, the limits and any cell or solvent background belong to its "
                   "cell); measure")
            raise DataError(
                f"{where(src)}path length {spectra.path_length_cm:g} cm differs from the "
                f"calibration's {self.path_length_cm:g} cm; {how} in a "
                f"{self.path_length_cm:g} cm cell"
                + ("" if self.scales_with_path_length else
                   ", or build the model from an absorptivity table, which scales by Beer's law"))
        if spectra.quantity != "absorbance":
            notes.append(f"converted from {spectra.quantity.replace('_', ' ')} to absorbance")
            spectra = spectra.to_absorbance()
        if spectra.axis_unit != self.axis_unit:
            notes.append(f"axis converted from {spectra.axis_unit} to {self.axis_unit}")
            spectra = spectra.convert_axis(self.axis_unit)
        if spectra.same_grid(self.axis):
            return np.asarray(spectra.values), notes
        notes.append("resampled onto the model grid by linear interpolation")
        mask = self.used_mask
        if (self.preprocessor.savgol_window is not None or mask.all()
                or self.transfer is not None or whole_axis):
            return np.asarray(spectra.resample(self.axis).values), notes
        # Only the window is used (no filter or transfer map needs the points around it): the
        # spectra must cover the window, not the whole grid. Points outside it are never read.
        X = np.zeros((spectra.n_samples, self.axis.size))
        X[:, mask] = spectra.resample(self.axis[mask]).values
        return X, notes

    def align(self, spectra: SpectralSet, table: ConcentrationTable | None = None) -> Aligned:
        """Spectra (and their reference concentrations) put on the model.

        Matches ``table`` to the spectra by sample id (in the spectra's order), takes its
        columns in the model's analyte order and the spectra as absorbance on the model grid
        (:meth:`prepare`). Every evaluation starts here.

        Raises
        ------
        DataError
            Unmatched ids, a missing analyte column, or spectra the model cannot take.
        """
        reference = None
        if table is not None:
            spectra, table = align(spectra, table)
            reference = reference_matrix(table, self.analytes)
        X, notes = self.prepare(spectra)
        return Aligned(tuple(spectra.sample_ids), X, reference, tuple(notes))

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
            ``flags`` (codes in :data:`bandsolve.flags.FLAG_CODES`), ``interval_basis``
            (:attr:`interval_basis`) and ``notes``.
        """
        if self._other_cell(spectra) and self.scales_with_path_length:
            model = self.at_path_length(spectra.path_length_cm)
            scaled = (f"measured in a {spectra.path_length_cm:g} cm cell: pure spectra scaled "
                      f"from {self.path_length_cm:g} cm by Beer's law (A = εbc)")
        else:
            model, scaled = self, None
        X, notes = model.prepare(spectra)
        detail = model.detail(X)
        return results_table(spectra, detail, model.analytes, model.calibrated_range,
                             model.interval_basis, detail.max_absorbance > model.ceiling,
                             notes + ([scaled] if scaled else []) + detail.notes,
                             self.flag_alpha)

    def detail(self, X: np.ndarray) -> Detail:
        """Per-sample estimates and diagnostics for absorbance on the model grid (n × p).

        Rows are evaluated in fixed blocks of :data:`~bandsolve.calibration.blocks.EVAL_ROWS`
        (counted from the first row), so a spectrum's numbers never depend on how a batch was
        chunked. A transferred model maps the spectra first and corrects the estimates last
        (:attr:`transfer`).
        """
        # Row-major layout always: products of column-major data (for example from a pandas
        # frame) round differently in the last bit, and results must not depend on layout.
        X = np.ascontiguousarray(X, dtype=np.float64)
        if X.ndim != 2 or X.shape[1] != self.axis.size:
            raise DataError(f"expected spectra with {self.axis.size} points on the model grid, "
                            f"got an array of shape {X.shape}")
        if self.transfer is not None:
            return self._transferred_detail(X)
        return in_blocks(X, self._detail_block)

    def _transferred_detail(self, X: np.ndarray) -> Detail:
        """Detail of spectra from the instrument the model was transferred to."""
        assert self.transfer is not None
        # The photometric ceiling concerns what this instrument measured, not the mapped values.
        top = X.max(axis=1, where=self.used_mask, initial=-np.inf)
        d = dataclasses.replace(self, transfer=None).detail(
            np.ascontiguousarray(self.transfer.map_spectra(X)))
        c, se = self.transfer.correct(d.concentrations, d.standard_errors)
        note = f"spectra of another instrument, transferred by {self.transfer.method}"
        return dataclasses.replace(d, concentrations=c, standard_errors=se,
                                   notes=[*d.notes, note], max_absorbance=top)

    def _detail_block(self, X: np.ndarray) -> Detail:
        scans, top = scan_block(X, self.preprocessor, self.estimators)
        detail = self.kind.detail(self.estimators, self.limits.models, scans)
        return self._with_model_error(dataclasses.replace(detail, max_absorbance=top))

    def _with_model_error(self, d: Detail) -> Detail:
        """Add the validated model error to every SE: ``√(s² + τ² + κ²ĉ²)``.

        The t quantile then uses, where τ or κ > 0, the smaller of the calibration degrees of
        freedom and the validation's effective degrees of freedom (both are estimated from
        the validation samples; ``IntervalBasis.t_dof``); for a validation pooled with the
        calibration's error model of runs, the pooled ``ν_c + ν_v`` for every analyte (the
        validation adds its degrees of freedom even where it found nothing to add).
        """
        if self.interval is None:
            return d
        tau = np.asarray(self.interval.model_error_sd, dtype=float)
        kappa = np.asarray(self.interval.kappa, dtype=float)
        t_dof = np.asarray(self.interval.t_dof, dtype=float)
        added = (tau > 0) | (kappa > 0)
        dof = t_dof if self.interval.pooled else np.where(added, np.minimum(d.dof, t_dof), d.dof)
        var = d.standard_errors**2 + tau**2 + (kappa * d.concentrations) ** 2
        return dataclasses.replace(d, standard_errors=np.sqrt(var), dof=dof)

    # ------------------------------------------------------------------ description
    @property
    def n_analytes(self) -> int:
        """Number of analytes."""
        return len(self.analytes)

    def summary(self) -> str:
        """A readable results sheet: definition, calibrated ranges, component choice, limits,
        figures of merit and notes (with the cautions); see :mod:`.summary`."""
        from bandsolve.calibration.summary import format_summary

        return format_summary(self.describe(), self.limits, self.selection, self.merit,
                              f"Calibration: {self.kind.title}")

    @property
    def shared_error(self) -> dict[str, float] | None:
        """Leverage h at the centre of the calibrated ranges and the share ``h/(1 + h)`` of a
        result's noise variance that comes from the model's own estimation (CLS from
        standards), or None."""
        h = self.kind.mid_range_leverage(self.estimators, self.calibrated_range)
        return None if h is None else {"mid_range_leverage": h, "share": h / (1.0 + h)}

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
            "settings": dict(self.settings),
            "limits": self.limits.to_dict(),
            "selection": None if self.selection is None else self.selection.to_dict(),
            "merit": None if self.merit is None else self.merit.to_dict(),
            "provenance": dict(self.provenance),
            "interval": ({"basis": "calibration only"} if self.interval is None
                         else self.interval.to_dict()),
            "shared_error": self.shared_error,
        } | ({"transfer": self.transfer.describe()} if self.transfer is not None else {})
