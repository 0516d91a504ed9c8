"""The figures-of-merit table: one row per analyte, readable, tabular and JSON forms."""

from __future__ import annotations

import math
import textwrap
from collections.abc import Sequence
from dataclasses import asdict, dataclass
from typing import TYPE_CHECKING

import pandas as pd

from bandsolve.errors import DataError, ModelFileError
from bandsolve.merit.statistics import RegressionStatistics, UnivariateCalibration

if TYPE_CHECKING:  # only for annotations: merit imports this module
    from bandsolve.merit.signal import SignalFigures

__all__ = ["AnalyteFigures", "FiguresOfMerit", "figures_of_merit"]


def split_name(label: str) -> str:
    """The analyte name without a trailing unit bracket (``"dye A [mg/L]"`` → ``"dye A"``)."""
    return label.split(" [")[0] if label.endswith("]") else label


@dataclass(frozen=True)
class AnalyteFigures:
    """One analyte's row of :class:`FiguresOfMerit` (None where not available)."""

    analyte: str
    unit: str
    sensitivity: float
    selectivity: float | None
    gamma: float
    gamma_inv: float
    lod: float
    loq: float
    h0: float
    sigma_x: float
    sigma_x_origin: str
    rmsec: float | None = None
    rmsecv: float | None = None
    univariate_wavelength: float | None = None
    univariate_lod: float | None = None
    univariate_rmsec: float | None = None


_HEADERS = {
    "sensitivity": ("SEN", "{s} per {u}"),
    "selectivity": ("SEL", "-"),
    "gamma": ("γ", "per {u}"),
    "gamma_inv": ("γ⁻¹", "{u}"),
    "lod": ("LOD", "{u}"),
    "loq": ("LOQ", "{u}"),
    "h0": ("h0", "-"),
    "sigma_x": ("σx", "{s}"),
    "rmsec": ("RMSEC", "{u}"),
    "rmsecv": ("RMSECV", "{u}"),
    "univariate_wavelength": ("univ. λ", "nm"),
    "univariate_lod": ("univ. LOD", "{u}"),
    "univariate_rmsec": ("univ. RMSEC", "{u}"),
}

#: What each abbreviation of the summary means (printed under it).
ABBREVIATIONS = (
    "SEN sensitivity (net analyte signal per unit concentration); SEL selectivity (0-1, 1 = "
    "no overlap); γ analytical sensitivity SEN/σx and γ⁻¹ its inverse (the smallest "
    "concentration difference the noise lets you tell apart); LOD, LOQ detection and "
    "quantitation limits; h0 leverage of a blank; σx spectral noise; RMSEC, RMSECV root-mean-"
    "square error of calibration and of cross-validation; univ. the best single wavelength "
    "used alone (λ, its LOD and RMSEC), for comparison; - not available."
)


#: How SEL of an inverse (PLS) model is obtained: an estimate, since the model holds no pure
#: spectra (IUPAC SEL = SEN/‖s_k‖ needs them; Olivieri et al. 2006).
SEL_ESTIMATE_NOTE = ("SEL (PLS): estimate, SEN/‖s_k‖ with the pure spectra s_k estimated by "
                     "least squares from the calibration mixtures (all analytes at once)")


@dataclass(frozen=True)
class FiguresOfMerit:
    """Figures of merit of one calibration model, one row per analyte.

    Attributes
    ----------
    method : str
        ``"CLS"`` or ``"inverse"``.
    signal_unit : str
        Unit of the spectra (``"AU"``).
    condition_number : float or None
        Condition number of ``K_aug`` (CLS).
    analytes : tuple of AnalyteFigures
    """

    method: str
    signal_unit: str
    condition_number: float | None
    analytes: tuple[AnalyteFigures, ...]

    def to_frame(self) -> pd.DataFrame:
        """Return the per-analyte table, indexed by analyte name (field names as columns)."""
        frame = pd.DataFrame([asdict(row) for row in self.analytes])
        return frame.set_index("analyte")

    def summary(self, width: int = 100) -> str:
        """Return a readable fixed-width table, one row per figure (unit in brackets) and one
        column per analyte, split into blocks no wider than ``width`` characters, followed by
        what each abbreviation means."""
        units = {row.unit for row in self.analytes}
        u = units.pop() if len(units) == 1 else "unit"
        present = [
            name for name in _HEADERS
            if any(getattr(row, name) is not None for row in self.analytes)
        ]
        heads = [f"{_HEADERS[n][0]} [{_HEADERS[n][1].format(s=self.signal_unit, u=u)}]"
                 for n in present]
        head_w = max(len("figure"), *(len(h) for h in heads))
        names = [split_name(row.analyte) for row in self.analytes]
        col_w = max(10, *(len(n) for n in names))
        per_block = max(1, (width - head_w) // (col_w + 2))
        lines = [f"Figures of merit ({self.method} model)"]
        if self.condition_number is not None:
            lines.append(f"condition number of K: {self.condition_number:.4g}")
        for start in range(0, len(self.analytes), per_block):
            rows = self.analytes[start:start + per_block]
            lines.append(f"{'figure':<{head_w}}"
                         + "".join(f"  {n:>{col_w}}" for n in names[start:start + per_block]))
            for name, head in zip(present, heads, strict=True):
                cells = ["-" if (v := getattr(r, name)) is None else format(v, ".4g")
                         for r in rows]
                lines.append(f"{head:<{head_w}}" + "".join(f"  {c:>{col_w}}" for c in cells))
        origins = sorted({row.sigma_x_origin for row in self.analytes})
        lines.append(f"σx from: {', '.join(origins)}")
        lines += textwrap.wrap(ABBREVIATIONS, width)
        if self.method == "inverse":
            lines += textwrap.wrap(SEL_ESTIMATE_NOTE, width)
        return "\n".join(lines)

    def to_dict(self) -> dict[str, object]:
        """Return a JSON-serialisable dictionary (round-trips through :meth:`from_dict`)."""
        return {
            "method": self.method,
            "signal_unit": self.signal_unit,
            "condition_number": self.condition_number,
            "analytes": [asdict(row) for row in self.analytes],
        }

    @classmethod
    def from_dict(cls, data: dict[str, object]) -> FiguresOfMerit:
        """Rebuild from :meth:`to_dict` output; raise ModelFileError if the entry is damaged."""
        try:
            rows = tuple(AnalyteFigures(**row) for row in data["analytes"])
            cond = data["condition_number"]
            return cls(
                method=str(data["method"]),
                signal_unit=str(data["signal_unit"]),
                condition_number=None if cond is None else float(cond),
                analytes=rows,
            )
        except (KeyError, TypeError, ValueError) as exc:
            raise ModelFileError(
                f"figures-of-merit entry is damaged ({exc!r}); recompute them from the model."
            ) from exc


def _optional(value: float | None) -> float | None:
    return None if value is None or not math.isfinite(value) else float(value)


def figures_of_merit(
    signal: SignalFigures,
    analytes: Sequence[str],
    units: str | Sequence[str],
    calibration: Sequence[RegressionStatistics] | None = None,
    cross_validation: Sequence[RegressionStatistics] | None = None,
    univariate: Sequence[UnivariateCalibration] | None = None,
    signal_unit: str = "AU",
) -> FiguresOfMerit:
    """Assemble :class:`FiguresOfMerit` from the pieces computed by this module (no file I/O).

    Parameters
    ----------
    signal : SignalFigures
        From :func:`cls_figures` or :func:`inverse_figures`.
    analytes : sequence of str, length m
        Analyte names.
    units : str or sequence of str
        Concentration unit(s), e.g. ``"mg/L"``.
    calibration, cross_validation : sequence of RegressionStatistics, optional
        Per analyte; their ``rmse`` fills RMSEC and RMSECV.
    univariate : sequence of UnivariateCalibration, optional
        Single-wavelength baseline per analyte.
    signal_unit : str
        Unit of the spectra.
    """
    m = signal.sensitivity.size
    unit_list = [units] * m if isinstance(units, str) else list(units)
    extras = {"calibration": calibration, "cross_validation": cross_validation,
              "univariate": univariate}
    for label, seq in {"analytes": analytes, "units": unit_list, **extras}.items():
        if seq is not None and len(seq) != m:
            raise DataError(f"{label} has {len(seq)} entries but the model has {m} analytes.")
    rows = []
    for k in range(m):
        uni = None if univariate is None else univariate[k]
        rows.append(AnalyteFigures(
            analyte=str(analytes[k]),
            unit=str(unit_list[k]),
            sensitivity=float(signal.sensitivity[k]),
            selectivity=_optional(float(signal.selectivity[k])),
            gamma=float(signal.analytical_sensitivity[k]),
            gamma_inv=float(1.0 / signal.analytical_sensitivity[k]),
            lod=float(signal.lod[k]),
            loq=float(signal.loq[k]),
            h0=float(signal.h0[k]),
            sigma_x=float(signal.sigma_x),
            sigma_x_origin=signal.sigma_x_origin,
            rmsec=None if calibration is None else _optional(calibration[k].rmse),
            rmsecv=None if cross_validation is None else _optional(cross_validation[k].rmse),
            univariate_wavelength=None if uni is None else uni.wavelength,
            univariate_lod=None if uni is None else uni.lod,
            univariate_rmsec=None if uni is None else uni.rmsec,
        ))
    return FiguresOfMerit(signal.method, signal_unit, _optional(signal.condition_number),
                          tuple(rows))
