"""Calibration designs for multicomponent UV-Vis calibration, and how to prepare them.

Plan the mixtures of a calibration set (cyclic multilevel or D-optimal designs), add random
validation mixtures, judge the design (correlation between analytes, level balance,
D-efficiency, predicted absorbance against a photometric ceiling) and turn it into a
preparation sheet of stock and solvent volumes.

Examples
--------
>>> from bandsolve.design import calibration_plan, parse_analyte_range, preparation_sheet
>>> ranges = [parse_analyte_range("dye A=0-10 mg/L"), parse_analyte_range("dye B=0-5 mg/L")]
>>> plan = calibration_plan(ranges, n_validation=5)
>>> plan.concentrations.shape
(30, 2)
>>> sheet = preparation_sheet(plan, {"dye A": (1000, "mg/L"), "dye B": (0.5, "g/L")}, 50.0)
>>> float(sheet.volumes_ml.loc["cal-02"].sum())
50.0

References
----------
Brereton, R. G. (1997). Multilevel multifactor designs for multivariate calibration.
Analyst, 122, 1521–1529.
"""

from __future__ import annotations

from bandsolve.design.amounts import (
    Amount,
    AnalyteRange,
    absorptivities_for,
    concentration_factor,
    parse_amount,
    parse_analyte_range,
    parse_volume,
)
from bandsolve.design.plan import (
    AbsorbanceCheck,
    CalibrationPlan,
    DesignQuality,
    calibration_plan,
)
from bandsolve.design.points import (
    cyclic_design,
    d_efficiency,
    d_optimal_design,
    level_values,
    range_decimals,
    validation_set,
)
from bandsolve.design.prep_sheet import (
    VOLUME_FIGURES,
    PipetteFlag,
    PreparationSheet,
    preparation_html,
    preparation_sheet,
    write_plan_files,
    write_preparation_csv,
)

__all__ = [
    "VOLUME_FIGURES",
    "AbsorbanceCheck",
    "Amount",
    "AnalyteRange",
    "CalibrationPlan",
    "DesignQuality",
    "PipetteFlag",
    "PreparationSheet",
    "absorptivities_for",
    "calibration_plan",
    "concentration_factor",
    "cyclic_design",
    "d_efficiency",
    "d_optimal_design",
    "level_values",
    "parse_amount",
    "parse_analyte_range",
    "parse_volume",
    "preparation_html",
    "preparation_sheet",
    "range_decimals",
    "validation_set",
    "write_plan_files",
    "write_preparation_csv",
]
