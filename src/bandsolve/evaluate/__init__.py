"""Judging a calibration against data it has not seen, and choosing between methods.

* :mod:`~bandsolve.evaluate.assess` — test-set assessment (RMSEP, bias, coverage).
* :mod:`~bandsolve.evaluate.compare` — CLS against PLS on identical folds, with the evidence
  (paired tests, absorber and non-linearity checks) in :mod:`~bandsolve.evaluate.evidence`
  and its result in :mod:`~bandsolve.evaluate.compare_result`.
"""
