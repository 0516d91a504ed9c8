"""The calibration plan: concentrations of every mixture, design quality, absorbance check."""

from __future__ import annotations

import warnings
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike, NDArray

from bandsolve.design.amounts import AnalyteRange
from bandsolve.design.points import (
    CYCLIC_GENERATORS,
    cyclic_design,
    d_efficiency,
    d_optimal_design,
    validation_set,
)
from bandsolve.errors import BandsolveWarning, DataError
from bandsolve.progress import ProgressCallback
from bandsolve.spectra import DEFAULT_CEILING_AU

__all__ = ["AbsorbanceCheck", "CalibrationPlan", "DesignQuality", "calibration_plan"]


@dataclass(frozen=True)
class DesignQuality:
    """How well a calibration design separates the analytes.

    Attributes
    ----------
    correlation : DataFrame of shape (m, m)
        Pearson correlation between analyte concentrations over the calibration mixtures.
    max_abs_r : float
        Largest off-diagonal ``|r|`` (0 for one analyte); near 0 means the analytes vary
        independently.
    level_counts : DataFrame
        How often each coded level (rows) occurs for each analyte (columns).
    d_efficiency : float
        ``det(DᵀD)^(1/p) / n`` for intercept + linear terms with levels scaled to −1..1.
    """

    correlation: pd.DataFrame
    max_abs_r: float
    level_counts: pd.DataFrame
    d_efficiency: float


@dataclass(frozen=True)
class AbsorbanceCheck:
    """Largest predicted absorbance of every mixture against a photometric ceiling.

    Attributes
    ----------
    max_absorbance : Series
        Largest predicted absorbance (AU) over the wavelengths, per sample id.
    wavelength_at_max : Series
        Wavelength (axis units of the absorptivities) where that maximum lies.
    ceiling_au : float
        The ceiling (AU).
    path_length_cm : float
        Cell path length used for the prediction (cm).
    over_ceiling : tuple of str
        Sample ids whose maximum exceeds the ceiling.
    """

    max_absorbance: pd.Series
    wavelength_at_max: pd.Series
    ceiling_au: float
    path_length_cm: float
    over_ceiling: tuple[str, ...]


@dataclass(frozen=True)
class CalibrationPlan:
    """Concentrations of calibration and validation mixtures, with the design's quality.

    Attributes
    ----------
    analytes : tuple of AnalyteRange
        The analyte ranges, in column order.
    concentrations : DataFrame
        One row per mixture, indexed by sample id (``cal-01``..., ``val-01``...), columns
        exactly ``"<name> [<unit>]"``.
    coded_levels : ndarray of shape (n_cal, m)
        Coded levels of the calibration mixtures (−2..2 for 5 levels).
    design : str
        Which design produced the calibration mixtures.
    quality : DesignQuality
        Quality of the calibration mixtures.
    absorbance : AbsorbanceCheck or None
        Predicted absorbance check, when absorptivities were given.
    """

    analytes: tuple[AnalyteRange, ...]
    concentrations: pd.DataFrame
    coded_levels: NDArray[np.float64]
    design: str
    quality: DesignQuality
    absorbance: AbsorbanceCheck | None = None

    @property
    def is_calibration(self) -> np.ndarray:
        """True for calibration mixtures (``cal-…``), False for validation ones (n,)."""
        return np.asarray(self.concentrations.index.str.startswith("cal-"))

    def to_frame(self) -> pd.DataFrame:
        """Concentration table, plus the largest predicted absorbance when it was checked."""
        frame = self.concentrations.copy()
        if self.absorbance is not None:
            frame["max predicted A [AU]"] = self.absorbance.max_absorbance
        return frame

    def to_dict(self) -> dict[str, Any]:
        """Plain-Python form of the plan (JSON-serialisable)."""
        q = self.quality
        out: dict[str, Any] = {
            "design": self.design,
            "analytes": [vars(a).copy() for a in self.analytes],
            "concentrations": {
                sample: dict(row) for sample, row in self.concentrations.iterrows()
            },
            "coded_levels": self.coded_levels.tolist(),
            "quality": {
                "correlation": q.correlation.to_numpy().tolist(),
                "max_abs_r": q.max_abs_r,
                "level_counts": {col: {str(k): int(v) for k, v in q.level_counts[col].items()}
                                 for col in q.level_counts.columns},
                "d_efficiency": q.d_efficiency,
            },
        }
        if self.absorbance is not None:
            a = self.absorbance
            out["absorbance"] = {
                "max_absorbance": a.max_absorbance.to_dict(),
                "wavelength_at_max": a.wavelength_at_max.to_dict(),
                "ceiling_au": a.ceiling_au,
                "path_length_cm": a.path_length_cm,
                "over_ceiling": list(a.over_ceiling),
            }
        return out

    def summary(self) -> str:
        """Readable account of the design and its quality."""
        q = self.quality
        is_cal = self.is_calibration
        lines = [
            f"Calibration design: {self.design}",
            f"Mixtures: {int(is_cal.sum())} calibration, {int((~is_cal).sum())} validation",
            "Analytes: " + "; ".join(f"{a.name} {a.low:g}-{a.high:g} {a.unit}"
                                     for a in self.analytes),
            f"Largest |r| between analyte concentrations: {q.max_abs_r:.3f}",
            f"D-efficiency (intercept + linear terms, levels scaled to -1..1): "
            f"{q.d_efficiency:.3f}",
            "Level counts per analyte:",
            q.level_counts.to_string(),
        ]
        if self.absorbance is not None:
            a = self.absorbance
            worst = a.max_absorbance.idxmax()
            lines.append(
                f"Largest predicted absorbance ({a.path_length_cm:g} cm cell): "
                f"{a.max_absorbance[worst]:.3f} AU ({worst}); ceiling {a.ceiling_au:g} AU"
            )
            if a.over_ceiling:
                lines.append(
                    f"Above the ceiling: {', '.join(a.over_ceiling)} - use a shorter cell, "
                    "lower the top concentrations or dilute before measuring"
                )
        return "\n".join(lines)


def _quality(coded: NDArray[np.float64], columns: list[str], half_range: float) -> DesignQuality:
    frame = pd.DataFrame(coded, columns=columns)
    if len(columns) > 1:
        corr = frame.corr()
        off = corr.to_numpy()[~np.eye(len(columns), dtype=bool)]
        max_abs_r = float(np.max(np.abs(off)))
    else:
        corr, max_abs_r = pd.DataFrame([[1.0]], index=columns, columns=columns), 0.0
    counts = frame.apply(lambda col: col.value_counts()).fillna(0).astype(int).sort_index()
    counts.index.name = "coded level"
    return DesignQuality(corr, max_abs_r, counts, d_efficiency(coded, half_range))


def _to_concentration(coded: NDArray[np.float64], ranges: Sequence[AnalyteRange],
                      half_range: float) -> NDArray[np.float64]:
    low = np.array([r.low for r in ranges])
    high = np.array([r.high for r in ranges])
    return low + (coded + half_range) / (2 * half_range) * (high - low)


def _absorbance_check(conc: pd.DataFrame, absorptivity: NDArray[np.float64],
                      axis: NDArray[np.float64], path_length_cm: float,
                      ceiling_au: float) -> AbsorbanceCheck:
    predicted = path_length_cm * conc.to_numpy() @ absorptivity  # Beer-Lambert, A = b·Σ ε_k c_k
    peak = np.argmax(predicted, axis=1)
    max_a = pd.Series(predicted[np.arange(len(conc)), peak], index=conc.index)
    over = tuple(max_a.index[max_a > ceiling_au])
    return AbsorbanceCheck(max_a, pd.Series(axis[peak], index=conc.index), ceiling_au,
                           path_length_cm, over)


def _check_absorptivity(absorptivity: ArrayLike, wavelengths: ArrayLike | None,
                        n_analytes: int) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    values = np.atleast_2d(np.asarray(absorptivity, dtype=float))
    if values.shape[0] != n_analytes:
        raise DataError(f"absorptivities have {values.shape[0]} rows but there are {n_analytes} "
                        "analytes; give one pure spectrum per analyte, in analyte order")
    axis = (np.arange(values.shape[1], dtype=float) if wavelengths is None
            else np.asarray(wavelengths, dtype=float))
    if axis.shape != (values.shape[1],):
        raise DataError(f"the wavelength axis has {axis.size} values but the absorptivities "
                        f"have {values.shape[1]} columns; give one wavelength per column")
    return values, axis


def _warn_few_levels(coded: NDArray[np.float64], analytes: Sequence[AnalyteRange]) -> None:
    few = [f"{a.name} ({np.unique(coded[:, k]).size})" for k, a in enumerate(analytes)
           if np.unique(coded[:, k]).size < 3]
    if few:
        warnings.warn(
            f"fewer than three concentration levels for {', '.join(few)}: with two levels a "
            "curved (non-linear) response looks exactly like a straight line, so "
            "non-linearity cannot be seen; use 3 or 5 levels", BandsolveWarning, stacklevel=3)


def calibration_plan(
    analytes: Sequence[AnalyteRange],
    *,
    levels: int = 5,
    n_runs: int | None = None,
    n_validation: int = 0,
    absorptivity: ArrayLike | None = None,
    wavelengths: ArrayLike | None = None,
    path_length_cm: float = 1.0,
    ceiling_au: float = DEFAULT_CEILING_AU,
    validation_decimals: int | Sequence[int] | None = None,
    random_state: int | None = 0,
    progress: ProgressCallback | None = None,
) -> CalibrationPlan:
    """Plan the calibration (and validation) mixtures for a multicomponent calibration.

    With ``n_runs`` absent or equal to ``levels²`` a cyclic design is used (Brereton 1997);
    otherwise a D-optimal design with ``n_runs`` mixtures on the ``levels``-level grid. For the
    D-optimal design, mixtures whose predicted absorbance would exceed the ceiling are excluded
    from the candidates; for the cyclic design they are reported in ``absorbance.over_ceiling``.

    Parameters
    ----------
    analytes : sequence of AnalyteRange
        One concentration range per analyte (m analytes).
    levels : int, default 5
        Concentration levels per analyte; 5 or 3 for the cyclic design.
    n_runs : int, optional
        Number of calibration mixtures.
    n_validation : int, default 0
        Number of random validation mixtures inside the ranges.
    absorptivity : array-like of shape (m, p), optional
        Pure-component spectra per unit concentration (in each analyte's unit) and per cm of
        path (AU per unit concentration per cm), rows in analyte order.
    wavelengths : array-like of shape (p,), optional
        Spectral axis of the absorptivities (nm).
    path_length_cm : float, default 1.0
        Cell path length (cm).
    ceiling_au : float, default 2.0
        Photometric ceiling (AU). Accuracy is best for A of about 0.3-1 (Twyman & Lothian 1933,
        Proc. Phys. Soc. 45, 643), so a
        plan whose mixtures stay below about 1 AU is preferable.
    validation_decimals : int or sequence of int, optional
        Round validation concentrations to this many decimals, or one count per analyte
        (:func:`bandsolve.design.range_decimals` gives 3 significant figures of each range).
    random_state : int or None, default 0
        Random state of the D-optimal starts and the validation draws.
    progress : callable, optional
        ``progress(done, total, label)`` during the D-optimal search.

    Returns
    -------
    CalibrationPlan

    References
    ----------
    Brereton, R. G. (1997). Multilevel multifactor designs for multivariate calibration.
    Analyst, 122, 1521–1529.
    """
    analytes = tuple(analytes)
    names = [a.name for a in analytes]
    if not analytes or len(set(names)) != len(names):
        raise DataError(f"analyte names must be given and distinct, got {names}; "
                        "give each analyte once, e.g. 'dye A=0-10 mg/L'")
    columns = [a.column for a in analytes]
    half_range = (levels - 1) / 2
    values = axis = None
    if absorptivity is not None:
        values, axis = _check_absorptivity(absorptivity, wavelengths, len(analytes))
    cyclic = levels in CYCLIC_GENERATORS and n_runs in (None, levels**2)
    if cyclic:
        coded = cyclic_design(len(analytes), levels)
        design = f"cyclic {levels}-level, {len(coded)} mixtures (Brereton 1997)"
    else:
        if n_runs is None:
            raise DataError(f"cyclic designs exist for 3 or 5 levels only, not {levels}; "
                            "give the number of runs for a D-optimal design")
        constraint = None
        if values is not None:
            def constraint(grid: NDArray[np.float64]) -> NDArray[np.bool_]:
                conc = _to_concentration(grid, analytes, half_range)
                return np.max(path_length_cm * conc @ values, axis=1) <= ceiling_au
        coded = d_optimal_design(n_runs, len(analytes), levels, constraints=constraint,
                                 random_state=random_state, progress=progress,
                                 quadratic=levels >= 3)
        design = (f"D-optimal, {n_runs} mixtures on a {levels}-level grid (Fedorov exchange, "
                  "linear and squared terms so that every analyte has three levels)")
    _warn_few_levels(coded, analytes)
    cal = _to_concentration(coded, analytes, half_range)
    val = validation_set(analytes, n_validation, cal, random_state, validation_decimals)
    ids = [f"cal-{i + 1:02d}" for i in range(len(cal))]
    ids += [f"val-{i + 1:02d}" for i in range(len(val))]
    conc = pd.DataFrame(np.vstack([cal, val]), index=pd.Index(ids, name="sample"),
                        columns=columns)
    check = None
    if values is not None:
        check = _absorbance_check(conc, values, axis, path_length_cm, ceiling_au)
    return CalibrationPlan(analytes, conc, coded, design, _quality(coded, columns, half_range),
                           check)

