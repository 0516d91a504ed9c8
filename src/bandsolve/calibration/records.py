"""Typed records a :class:`~bandsolve.calibration.model.Calibration` carries.

Each record is a small frozen dataclass with ``to_dict`` (JSON-friendly: numbers, strings,
lists, None; NaN stays a float) and ``from_dict`` (its inverse, raising
:class:`~bandsolve.errors.ModelFileError` on a damaged entry). The model file stores exactly
``to_dict`` output, so a record's field names are part of the model-file schema.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from typing import Any, TypeVar

import numpy as np
import pandas as pd

from bandsolve.errors import ModelFileError

__all__ = ["ComponentChoice", "EstimatorLimits", "Limits", "Selection"]

_T = TypeVar("_T")
_NAN = float("nan")


def _floats(values: Any) -> tuple[float, ...]:
    return tuple(float(v) for v in values)


def _float(value: Any) -> float:
    return _NAN if value is None else float(value)


def _parse(kind: str, build: Callable[[], _T]) -> _T:
    """Run ``build``; a missing or malformed entry becomes one ModelFileError."""
    try:
        return build()
    except (KeyError, TypeError, ValueError, AttributeError) as exc:
        raise ModelFileError(f"the model's {kind} entry is damaged ({exc!r}); rebuild the "
                             "model and save it again") from None


@dataclass(frozen=True)
class EstimatorLimits:
    """Diagnostic limits of one fitted estimator (CLS, PLS2, or one PLS1 analyte model).

    Attributes
    ----------
    alpha : float
        Probability that an in-model sample exceeds a limit (NaN when no limit was set).
    residual : float
        Limit of the spectral-residual statistic: the CLS F ratio (unitless) or the PLS Q
        residual (AU² without scaling). NaN when none could be set.
    residual_method : str
        How the residual limit was obtained, in words or as a method name.
    residual_parameters : dict of str to float
        Numbers the residual limit came from (e.g. ``g``, ``h``, ``n_values``).
    t2 : float
        Hotelling T² limit for new samples (PLS); NaN for CLS.
    leverage : float
        Leverage warning limit; NaN where leverage is undefined (CLS from absorptivities).
    msec : tuple of float
        Mean squared error of calibration per analyte of this estimator (PLS standard error).
    rmsecv : tuple of float
        RMSECV per analyte at the chosen component count (PLS).
    reference_variance : tuple of float
        Variance of the reference values σ²_ref per analyte, subtracted in the PLS
        standard error (empty: zero).
    error_scale : tuple of float
        CLS: factor ≥ 1 per analyte applied to the white-noise SE, the ratio of the
        leave-one-out errors to their reported SEs (``CLSRegressor.error_scale``; empty: 1).
    relative_error : tuple of float
        CLS: relative error SD γ per analyte (fraction of the concentration), added in
        quadrature to the SE as ``γ·|ĉ|`` (``CLSRegressor.error_scale``; empty: 0).
    error_scale_dof : int
        Degrees of freedom behind ``error_scale`` and ``relative_error`` (of the t quantile
        where either departs from the white-noise model): the calibration samples (no more
        than those holding an analyte whose γ is kept), or the runs' effective degrees of
        freedom when whole runs were left out.
    error_scale_runs : int
        Runs left out one at a time for the errors the error model was fitted to; 0:
        leave-one-out (and in files written before schema 6).
    noise_floor : tuple of float
        PLS: variance per analyte of a prediction caused by the spectral noise alone,
        ``Σ_j b_j² σ²_j`` with σ²_j from second differences of the calibration residuals
        (concentration units²; empty: none). The error variance behind the SE is never
        taken below it.
    noise_floor_dof : int
        Degrees of freedom of ``noise_floor`` (the residual matrix's), used by the t quantile
        where the floor sets the SE.
    """

    alpha: float
    residual: float
    residual_method: str
    residual_parameters: dict[str, float] = field(default_factory=dict)
    t2: float = _NAN
    leverage: float = _NAN
    msec: tuple[float, ...] = ()
    rmsecv: tuple[float, ...] = ()
    reference_variance: tuple[float, ...] = ()
    error_scale: tuple[float, ...] = ()
    error_scale_dof: int = 0
    relative_error: tuple[float, ...] = ()
    error_scale_runs: int = 0
    noise_floor: tuple[float, ...] = ()
    noise_floor_dof: int = 0

    @property
    def error_scale_method(self) -> str:
        """The errors the error model was fitted to, in words."""
        return (f"leave-one-run-out errors, {self.error_scale_runs} runs"
                if self.error_scale_runs else "leave-one-out errors")

    def error_model_text(self) -> str:
        """The SE's error model in words, per analyte ("" when it has none)."""
        if not self.error_scale:
            return ""
        gamma = self.relative_error or (0.0,) * len(self.error_scale)
        return ("SE × " + ", ".join(f"{k:.3g}" for k in self.error_scale) + ", plus "
                + ", ".join(f"{100 * g:.2g} %" for g in gamma) + " of the result (per analyte; "
                f"from {self.error_scale_method}, "
                f"{self.error_scale_dof} degrees of freedom)")

    def to_dict(self) -> dict[str, Any]:
        """JSON-friendly dictionary (inverse of :meth:`from_dict`)."""
        return {"alpha": self.alpha, "residual": self.residual,
                "residual_method": self.residual_method,
                "residual_parameters": dict(self.residual_parameters), "t2": self.t2,
                "leverage": self.leverage, "msec": list(self.msec),
                "rmsecv": list(self.rmsecv),
                "reference_variance": list(self.reference_variance),
                "error_scale": list(self.error_scale), "error_scale_dof": self.error_scale_dof,
                "relative_error": list(self.relative_error),
                "error_scale_runs": self.error_scale_runs,
                "noise_floor": list(self.noise_floor), "noise_floor_dof": self.noise_floor_dof}

    @classmethod
    def from_dict(cls, data: Mapping[str, Any]) -> EstimatorLimits:
        """Rebuild from :meth:`to_dict` output."""
        return _parse("limits", lambda: cls(
            alpha=_float(data["alpha"]), residual=_float(data["residual"]),
            residual_method=str(data["residual_method"]),
            residual_parameters={str(k): float(v)
                                 for k, v in dict(data["residual_parameters"]).items()},
            t2=_float(data["t2"]), leverage=_float(data["leverage"]),
            msec=_floats(data["msec"]), rmsecv=_floats(data["rmsecv"]),
            reference_variance=_floats(data.get("reference_variance") or ()),
            error_scale=_floats(data.get("error_scale") or ()),
            error_scale_dof=int(data.get("error_scale_dof") or 0),
            relative_error=_floats(data.get("relative_error") or ()),
            error_scale_runs=int(data.get("error_scale_runs") or 0),
            noise_floor=_floats(data.get("noise_floor") or ()),
            noise_floor_dof=int(data.get("noise_floor_dof") or 0)))


@dataclass(frozen=True)
class Limits:
    """Diagnostic limits of a calibration, one :class:`EstimatorLimits` per estimator.

    Attributes
    ----------
    leverage_factor : float
        PLS: the leverage warning limit is this factor × (A + 1)/n (Hoaglin & Welsch 1978).
        CLS: this factor × the largest leverage of a composition inside the calibrated
        ranges (``CLSRegressor.leverage_limit``).
    models : tuple of EstimatorLimits
        In the order of ``Calibration.estimators``.
    """

    leverage_factor: float
    models: tuple[EstimatorLimits, ...]

    def to_frame(self) -> pd.DataFrame:
        """One row per estimator: residual, T² and leverage limits, how set, α (NaN: none)."""
        return pd.DataFrame([{"model": i + 1, "residual limit": m.residual,
                              "how the residual limit was set": m.residual_method,
                              "T² limit": m.t2, "leverage limit": m.leverage, "α": m.alpha}
                             for i, m in enumerate(self.models)])

    def to_dict(self) -> dict[str, Any]:
        """JSON-friendly dictionary (inverse of :meth:`from_dict`)."""
        return {"leverage_factor": self.leverage_factor,
                "models": [m.to_dict() for m in self.models]}

    @classmethod
    def from_dict(cls, data: Mapping[str, Any]) -> Limits:
        """Rebuild from :meth:`to_dict` output."""
        models = _parse("limits", lambda: list(data["models"]))
        return _parse("limits", lambda: cls(
            leverage_factor=float(data["leverage_factor"]),
            models=tuple(EstimatorLimits.from_dict(m) for m in models)))


@dataclass(frozen=True)
class ComponentChoice:
    """How the component count of one PLS model was chosen, with its cross-validation evidence.

    Attributes
    ----------
    n_components : int
        Components used by the model.
    rule : str
        Selection rule (``randomization``, ``one-se``, ``min``, or ``fixed (...)``).
    alpha : float or None
        Level of the randomization test.
    cv : str
        Cross-validation specification.
    settings : tuple of int
        Component counts tried.
    rmsecv : tuple of tuple of float, shape (len(settings), m)
        RMSECV per count and analyte (concentration units).
    rmsecv_total : tuple of float
        RMSECV over all analytes per count.
    pooled_mse : tuple of float
        Mean squared error on the variance-scaled concentrations per count.
    minimum_at : int
        Count with the smallest pooled MSE.
    pvalues : tuple of float or None, optional
        Randomization-test p-values of each smaller count against the minimum.
    n_permutations, standard_error, threshold : optional
        Permutations of the randomization test; the one-SE rule's SE and threshold.
    """

    n_components: int
    rule: str
    alpha: float | None
    cv: str
    settings: tuple[int, ...]
    rmsecv: tuple[tuple[float, ...], ...]
    rmsecv_total: tuple[float, ...]
    pooled_mse: tuple[float, ...]
    minimum_at: int
    pvalues: tuple[float | None, ...] | None = None
    n_permutations: int | None = None
    standard_error: float | None = None
    threshold: float | None = None

    def chosen_rmsecv(self) -> np.ndarray:
        """RMSECV per analyte at the chosen count, shape (m,)."""
        return np.asarray(self.rmsecv, dtype=float)[self.n_components - 1]

    def to_dict(self) -> dict[str, Any]:
        """JSON-friendly dictionary (inverse of :meth:`from_dict`)."""
        return {"n_components": self.n_components, "rule": self.rule, "alpha": self.alpha,
                "cv": self.cv, "settings": list(self.settings),
                "rmsecv": [list(row) for row in self.rmsecv],
                "rmsecv_total": list(self.rmsecv_total), "pooled_mse": list(self.pooled_mse),
                "minimum_at": self.minimum_at,
                "pvalues": None if self.pvalues is None else list(self.pvalues),
                "n_permutations": self.n_permutations, "standard_error": self.standard_error,
                "threshold": self.threshold}

    @classmethod
    def from_dict(cls, data: Mapping[str, Any]) -> ComponentChoice:
        """Rebuild from :meth:`to_dict` output (also the 0.1.0 evidence dictionary)."""
        def opt(key: str, kind: Callable[[Any], Any]) -> Any:
            value = data.get(key)
            return None if value is None else kind(value)

        return _parse("selection", lambda: cls(
            n_components=int(data["n_components"]), rule=str(data["rule"]),
            alpha=opt("alpha", float), cv=str(data["cv"]),
            settings=tuple(int(s) for s in data["settings"]),
            rmsecv=tuple(_floats(row) for row in data["rmsecv"]),
            rmsecv_total=_floats(data["rmsecv_total"]), pooled_mse=_floats(data["pooled_mse"]),
            minimum_at=int(data["minimum_at"]),
            pvalues=opt("pvalues", lambda v: tuple(None if p is None or (
                isinstance(p, float) and math.isnan(p)) else float(p) for p in v)),
            n_permutations=opt("n_permutations", int),
            standard_error=opt("standard_error", float), threshold=opt("threshold", float)))


def _p(value: float | None) -> str:
    if value is None:
        return "-"
    # 0.001 is the smallest p-value 999 permutations can give: the true one may be smaller.
    return "≤ 0.001" if value <= 0.001 else f"{value:.3f}"


@dataclass(frozen=True)
class Selection:
    """Component selection of a PLS calibration: one :class:`ComponentChoice` per model.

    Attributes
    ----------
    mode : {"pls2", "pls1"}
    models : tuple of ComponentChoice
        One for PLS2, one per analyte for PLS1, in the order of ``Calibration.estimators``.
    """

    mode: str
    models: tuple[ComponentChoice, ...]

    def curves(self, analytes: tuple[str, ...], width: int = 100) -> str:
        """The RMSECV curve of each model as a text table: full analyte labels, at most
        ``width`` characters a line, the chosen count marked ``*``, p-values explained.

        Parameters
        ----------
        analytes : tuple of str
            The calibration's analyte labels (one model for all, or one per analyte).
        """
        blocks = []
        for i, c in enumerate(self.models):
            names = list(analytes) if len(self.models) == 1 else [analytes[i]]
            rms = np.asarray(c.rmsecv, dtype=float)
            widths = [max(10, len(a)) + 2 for a in names]
            lines = [f"RMSECV by number of components ({c.rule}, chosen: {c.n_components})"]
            start = 0
            while start < len(names):  # as many analytes per block as fit in the width
                stop = start + 1
                while stop < len(names) and 5 + sum(widths[start:stop + 1]) + 10 <= width:
                    stop += 1
                pairs = list(zip(names[start:stop], widths[start:stop], strict=True))
                lines.append("   A " + "".join(f"{a:>{w}}" for a, w in pairs)
                             + ("   p-value" if c.pvalues else ""))
                for j, a in enumerate(c.settings):
                    mark = "*" if a == c.n_components else " "
                    row = f" {mark}{a:>2} " + "".join(
                        f"{v:>{w}.4g}" for v, w in zip(rms[j, start:stop], widths[start:stop],
                                                       strict=True))
                    lines.append(row + (f"  {_p(c.pvalues[j]):>8}" if c.pvalues else ""))
                start = stop
            if c.pvalues:
                lines.append("p-value: randomization test of that count against the count with "
                             "the lowest RMSECV")
                lines.append("(van der Voet 1994); - : not tested (the count with the lowest "
                             "RMSECV and larger counts).")
            blocks.append("\n".join(lines))
        return "\n\n".join(blocks)

    def to_dict(self) -> dict[str, Any]:
        """JSON-friendly dictionary (inverse of :meth:`from_dict`)."""
        return {"mode": self.mode, "models": [m.to_dict() for m in self.models]}

    @classmethod
    def from_dict(cls, data: Mapping[str, Any]) -> Selection:
        """Rebuild from :meth:`to_dict` output."""
        models = _parse("selection", lambda: list(data["models"]))
        return _parse("selection", lambda: cls(
            mode=str(data["mode"]), models=tuple(ComponentChoice.from_dict(m) for m in models)))
