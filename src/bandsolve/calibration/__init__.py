"""The calibration: build it from data, judge it at build, freeze it and store it.

* :mod:`~bandsolve.calibration.model` — :class:`Calibration`, the frozen model that checks new
  spectra and returns results with standard errors, intervals, diagnostics and flags.
* :mod:`~bandsolve.calibration.build` and :mod:`~bandsolve.calibration.build_pls` — building
  CLS and PLS calibrations from spectra and concentrations.
* :mod:`~bandsolve.calibration.merit` — figures of merit computed once at build.
* :mod:`~bandsolve.calibration.from_estimator` — a fitted scikit-learn CLS or PLS estimator
  (or Pipeline) turned into a calibration with limits and figures of merit.
* :mod:`~bandsolve.calibration.modelfile` — the model file (checksummed, never pickled).
"""
