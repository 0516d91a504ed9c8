"""Figures of merit: net analyte signal, sensitivity, selectivity, detection limits, and the
statistics of predicted against reference values.

* :mod:`bandsolve.merit.signal` — SEN, SEL, γ, LOD and LOQ from pure spectra (CLS) or a
  regression vector (inverse models such as PLS).
* :mod:`bandsolve.merit.statistics` — noise estimates, prediction statistics and the
  single-wavelength baseline.
* :mod:`bandsolve.merit.table` — the per-analyte :class:`FiguresOfMerit` table.
"""

from __future__ import annotations

from bandsolve.merit.signal import (
    LOD_FACTOR,
    LOQ_FACTOR,
    SignalFigures,
    blank_leverage,
    cls_figures,
    cls_net_analyte_signal,
    inverse_figures,
)
from bandsolve.merit.statistics import (
    NoiseEstimate,
    RegressionStatistics,
    UnivariateCalibration,
    noise_from_blanks,
    noise_from_residuals,
    regression_statistics,
    univariate_calibration,
)
from bandsolve.merit.table import AnalyteFigures, FiguresOfMerit, figures_of_merit

__all__ = [
    "LOD_FACTOR",
    "LOQ_FACTOR",
    "AnalyteFigures",
    "FiguresOfMerit",
    "NoiseEstimate",
    "RegressionStatistics",
    "SignalFigures",
    "UnivariateCalibration",
    "blank_leverage",
    "cls_figures",
    "cls_net_analyte_signal",
    "figures_of_merit",
    "inverse_figures",
    "noise_from_blanks",
    "noise_from_residuals",
    "regression_statistics",
    "univariate_calibration",
]
