"""Running a frozen calibration on routine samples.

* :mod:`~bandsolve.batch.predict` — files and folders in, one results table out.
* :mod:`~bandsolve.batch.tasks` — inputs cut into tasks of whole evaluation blocks.
* :mod:`~bandsolve.batch.writers` — CSV, JSON and Parquet results writers.
* :mod:`~bandsolve.batch.ledger` — the SQLite record of every run.
* :mod:`~bandsolve.batch.checks` — check standards in a batch: recovery and acceptance.
* :mod:`~bandsolve.batch.watch` — the drift watch: control charts over the ledger's runs.
* :mod:`~bandsolve.batch.images` — spectral images (``.npy`` cubes) to concentration maps.
* :mod:`~bandsolve.batch.scaleout` — the same prediction on a Dask cluster.
"""
