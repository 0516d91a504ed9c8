"""The calibration: build it from data, judge it at build, freeze it and store it.

* :mod:`~bandsolve.calibration.model` — :class:`Calibration`, the frozen model that checks new
  spectra and returns results with standard errors, intervals, diagnostics and flags.
* :mod:`~bandsolve.calibration.blocks` — how it reads spectra: fixed blocks of rows, one scan
  pass each, on all cores.
* :mod:`~bandsolve.calibration.build` and :mod:`~bandsolve.calibration.build_pls` — building
  CLS and PLS calibrations from spectra and concentrations.
* :mod:`~bandsolve.calibration.records` — the typed limits and component-selection records.
* :mod:`~bandsolve.calibration.methods` — what differs between CLS and PLS (``cal.kind``),
  the one place that dispatches on the method; :mod:`~bandsolve.calibration.detail` — the
  per-sample detail it returns.
* :mod:`~bandsolve.calibration.merit` — figures of merit computed once at build.
* :mod:`~bandsolve.calibration.from_estimator` — a fitted scikit-learn CLS or PLS estimator
  (or Pipeline) turned into a calibration with limits and figures of merit.
* :mod:`~bandsolve.calibration.summary` — the one-page text summary.
* :mod:`~bandsolve.calibration.modelfile` — the model file (checksummed, never pickled).
* :mod:`~bandsolve.calibration.transferred` — a model moved to another instrument.
"""
