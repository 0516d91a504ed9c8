"""Control charts for a calibration in use (the ledger's series: :mod:`bandsolve.batch.watch`).

* :mod:`~bandsolve.monitor.charts` — Shewhart individuals chart, tabular CUSUM, EWMA and
  Western Electric run rules for one series, with its state in plain words.
* :mod:`~bandsolve.monitor.arl` — average run lengths (Markov-chain and closed form), to say
  how often a chart raises a false alarm and how fast it sees a shift.
"""
