"""What a model's prediction intervals rest on beyond calibration: the validated record.

A record like those of :mod:`bandsolve.calibration.records` (``to_dict``/``from_dict``, its
field names part of the model-file schema), written by ``bandsolve assess --out-model``
(:mod:`bandsolve.evaluate.validated`).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

from bandsolve.calibration.records import _floats, _parse

__all__ = ["IntervalBasis"]


@dataclass(frozen=True)
class IntervalBasis:
    """What a model's prediction intervals rest on beyond calibration: an independent validation.

    Written by ``bandsolve assess --out-model`` (:mod:`bandsolve.evaluate.validated`); a
    model without it has calibration-only intervals.

    Attributes
    ----------
    method : str
        How validation enters the intervals, in words.
    model_error_sd : tuple of float
        τ per analyte (concentration units), added in quadrature to every SE.
    relative_error : tuple of float
        κ per analyte, a fraction of the result: ``κ·|ĉ|`` is added in quadrature too
        (``evaluate.validated``). Empty in files written before schema 6: κ = 0.
    analyte_dof : tuple of float
        Effective degrees of freedom of each analyte's model error; the t quantile uses them
        where τ or κ > 0. Empty in files written before schema 6: ``dof`` for every analyte.
    n_validation : int
        Independent validation samples τ was estimated from.
    n_runs : int
        Runs (days) the validation samples came from; 0 when not given.
    dof : float
        The smallest effective degrees of freedom over the analytes
        (``evaluate.validated.effective_dof``). 0 in older files: ``n_validation − 1``.
    validation_files : tuple of dict
        Name and SHA-256 of each validation file.
    created : str
        When the validated model was written (ISO 8601, UTC).
    calibration_dof : float
        Degrees of freedom of the calibration's own error model of runs when it was pooled
        with the validation (``evaluate.validated``): τ², κ² are then the validation's
        estimates times ``ν_v/(ν_c + ν_v)`` and :attr:`t_dof` is ``ν_c + ν_v``. 0: not
        pooled (a calibration measured on one occasion).
    """

    method: str
    model_error_sd: tuple[float, ...]
    n_validation: int
    validation_files: tuple[dict[str, str], ...] = ()
    created: str = ""
    n_runs: int = 0
    dof: float = 0.0
    relative_error: tuple[float, ...] = ()
    analyte_dof: tuple[float, ...] = ()
    calibration_dof: float = 0.0

    @property
    def pooled(self) -> bool:
        """True when the validation was pooled with the calibration's error model of runs."""
        return self.calibration_dof > 0

    @property
    def kappa(self) -> tuple[float, ...]:
        """κ per analyte (zeros for a model validated before the proportional part)."""
        return self.relative_error or (0.0,) * len(self.model_error_sd)

    def model_error_text(self, analytes: Sequence[str]) -> str:
        """The model error added per analyte, in words: ``"a: 0.003 and 1.8 % of the
        result"``."""
        return ", ".join(f"{a}: {t:.3g}" + (f" and {100 * k:.2g} % of the result" if k else "")
                         for a, t, k in zip(analytes, self.model_error_sd, self.kappa,
                                            strict=True))

    @property
    def t_dof(self) -> tuple[float, ...]:
        """Degrees of freedom of each analyte's t quantile: where τ or κ > 0, or everywhere
        when :attr:`pooled`."""
        if self.analyte_dof:
            return self.analyte_dof
        return (self.dof if self.dof > 0 else float(self.n_validation - 1),) * len(
            self.model_error_sd)

    @property
    def t_dof_text(self) -> str:
        """The t quantile's degrees of freedom in words: one value, or the span over analytes."""
        low, high = min(self.t_dof), max(self.t_dof)
        return f"{low:.3g}" if round(low, 1) == round(high, 1) else f"{low:.3g}–{high:.3g}"

    @property
    def label(self) -> str:
        """The basis in words, for every result row."""
        runs = f" from {self.n_runs} runs" if self.n_runs else ""
        pooled = (", pooled with the calibration's own runs" if self.pooled else "")
        return (f"validated on {self.n_validation} independent samples{runs} (calibration SE "
                f"plus model error{pooled})")

    def to_dict(self) -> dict[str, Any]:
        """JSON-friendly dictionary (inverse of :meth:`from_dict`)."""
        return {"basis": "validated", "method": self.method,
                "model_error_sd": list(self.model_error_sd),
                "relative_error": list(self.relative_error),
                "analyte_dof": list(self.analyte_dof), "n_validation": self.n_validation,
                "n_runs": self.n_runs, "dof": self.dof,
                "calibration_dof": self.calibration_dof,
                "validation_files": [dict(f) for f in self.validation_files],
                "created": self.created}

    @classmethod
    def from_dict(cls, data: Mapping[str, Any]) -> IntervalBasis:
        """Rebuild from :meth:`to_dict` output."""
        return _parse("interval", lambda: cls(
            method=str(data["method"]), model_error_sd=_floats(data["model_error_sd"]),
            n_validation=int(data["n_validation"]),
            validation_files=tuple({str(k): str(v) for k, v in dict(f).items()}
                                   for f in data.get("validation_files") or ()),
            created=str(data.get("created") or ""), n_runs=int(data.get("n_runs") or 0),
            dof=float(data.get("dof") or 0.0),
            relative_error=_floats(data.get("relative_error") or ()),
            analyte_dof=_floats(data.get("analyte_dof") or ()),
            calibration_dof=float(data.get("calibration_dof") or 0.0)))
