"""The cautions every report and summary carries (results can feed release or compliance)."""

from __future__ import annotations

__all__ = ["CAUTIONS", "SHORT_CAUTION"]

#: One line for text summaries on the command line.
SHORT_CAUTION = (
    "Caution: a method must be validated for its intended use under the applicable guidelines "
    "and local regulations before its results are used; hazardous reference chemicals are "
    "handled under local safety rules."
)

#: The full list for reports.
CAUTIONS = (
    "A calibration model is only fit for purpose once the method has been validated for its "
    "intended use under the applicable guidelines and local regulations (for example ICH "
    "Q2(R2) where it applies); this report documents the model, it does not replace that "
    "validation.",
    "Results outside the calibrated range, or flagged by the residual, T² or leverage "
    "limits, must not be reported without investigation.",
    "Hazardous reference chemicals used to check or calibrate photometers (such as "
    "dichromate standards) are handled, stored and disposed of under local safety rules.",
    "Keep sample and calibration measurements under the same conditions: cell, path length, "
    "temperature, solvent and instrument settings.",
)
