"""Benchmark: prediction with full diagnostics against the memory-read floor.

Run on demand (not collected by pytest)::

    /work/main/.venv/bin/python tests/benchmarks/bench_predict.py [--n 1000000] [--p 300]

Simulates n spectra × p wavelengths (float64) of 4 overlapping bands, builds CLS, PLS2 and PLS1
models on 60 mixtures, then times on the same array

* floor: one pass over X (``X @ ones``), the memory-read floor;
* detail: ``Calibration.detail`` on all n spectra — concentrations, standard errors, the
  residual/Q, T² and leverage ratios and the ceiling check: the full numerical prediction;
* table: ``Calibration.predict``, the same plus the results table (intervals, flag texts,
  sample ids) as a pandas DataFrame;
* building the ``SpectralSet`` from the array (checks; no copy of the values);

for CLS, PLS2 and PLS1 with four models (unscaled and autoscaled: one pass for all models),
reporting each as a multiple of the floor (target ≤ 6×). Then it streams wide CSV files of
20 000 and 80 000 spectra through ``predict_inputs`` and reports the tracemalloc peak of each:
the peak must not grow with the number of spectra.
"""

from __future__ import annotations

import argparse
import tempfile
import time
import tracemalloc
from pathlib import Path

import numpy as np

from bandsolve.batch.predict import predict_inputs
from bandsolve.calibration.blocks import EVAL_ROWS
from bandsolve.calibration.build import build_cls
from bandsolve.calibration.build_pls import build_pls
from bandsolve.concentrations import ConcentrationTable
from bandsolve.spectra import SpectralSet


def bands(p: int) -> tuple[np.ndarray, np.ndarray]:
    axis = np.linspace(400.0, 700.0, p)
    centres = (450, 500, 560, 620)
    return axis, np.vstack([np.exp(-0.5 * ((axis - c) / 40) ** 2) for c in centres])


def models(axis, pure, rng):
    C = rng.uniform(0.1, 1.0, (60, 4))
    X = C @ pure + 0.002 * rng.standard_normal((60, axis.size))
    ids = [f"cal{i}" for i in range(60)]
    spectra = SpectralSet(axis=axis, values=X, sample_ids=ids)
    table = ConcentrationTable(ids, ("a", "b", "c", "d"), C)
    pls = {"components": 4, "cv": "contiguous:5", "max_components": 6}
    return {"CLS": build_cls(spectra, table),
            "PLS2": build_pls(spectra, table, **pls),
            "PLS1 x4": build_pls(spectra, table, mode="pls1", **pls),
            "PLS1 x4 scaled": build_pls(spectra, table, mode="pls1", scale=True, **pls)}


#: Clock of :func:`best_of`: wall time, or process (CPU) time with ``--cpu``.
CLOCK = [time.perf_counter]


def best_of(func, repeats: int = 3) -> float:
    times = []
    for _ in range(repeats):
        start = CLOCK[0]()
        func()
        times.append(CLOCK[0]() - start)
    return min(times)


def streaming_peak(model, axis, n: int, rng, folder: Path) -> float:
    path = folder / f"stream{n}.csv"
    with open(path, "w") as handle:
        handle.write("sample," + ",".join(f"{a:.6g}" for a in axis) + "\n")
        for start in range(0, n, 5000):
            block = rng.uniform(0.1, 1.0, (min(5000, n - start), 4)) @ bands(axis.size)[1]
            handle.writelines(f"x{start + i}," + ",".join(f"{v:.5f}" for v in row) + "\n"
                              for i, row in enumerate(block))
    tracemalloc.start()
    result = predict_inputs(model, [str(path)], read_options={"layout": "wide"},
                            chunk_size=2000)
    n_rows = len(result.table)
    del result
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    assert n_rows == n
    return peak / 2**20


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--n", type=int, default=1_000_000)
    parser.add_argument("--p", type=int, default=300)
    parser.add_argument("--cpu", action="store_true",
                        help="time with process (CPU) time, summed over threads: the work "
                             "done, steady on a shared machine (wall time by default)")
    args = parser.parse_args()
    if args.cpu:
        CLOCK[0] = time.process_time
    rng = np.random.default_rng(0)
    axis, pure = bands(args.p)
    fitted = models(axis, pure, rng)
    X = np.empty((args.n, args.p))
    for i in range(0, args.n, 100_000):
        k = min(100_000, args.n - i)
        X[i:i + k] = rng.uniform(0, 1, (k, 4)) @ pure + 0.002 * rng.standard_normal((k, args.p))
    ones = np.ones(args.p)
    floor = best_of(lambda: X @ ones)
    print(f"{args.n} spectra x {args.p} points, float64 ({X.nbytes / 2**30:.2f} GiB); "
          f"EVAL_ROWS = {EVAL_ROWS}")
    print(f"floor (X @ ones): {floor * 1e3:.0f} ms ({'CPU' if args.cpu else 'wall'} time)")
    ids = [f"s{i}" for i in range(args.n)]
    t_set = best_of(lambda: SpectralSet(axis=axis, values=X, sample_ids=ids))
    spectra = SpectralSet(axis=axis, values=X, sample_ids=ids)
    print(f"SpectralSet from the array: {t_set:.2f} s = {t_set / floor:.1f}x floor")
    for name, model in fitted.items():
        t_detail = best_of(lambda model=model: model.detail(X), repeats=3)
        t_table = best_of(lambda model=model: model.predict(spectra), repeats=2)
        print(f"{name}: prediction with diagnostics {t_detail:.2f} s = "
              f"{t_detail / floor:.1f}x floor (target <= 6x); with the results table "
              f"{t_table:.2f} s = {t_table / floor:.1f}x floor")
    with tempfile.TemporaryDirectory() as tmp:
        for n in (20_000, 80_000):
            peak = streaming_peak(fitted["CLS"], axis, n, rng, Path(tmp))
            print(f"streaming {n} spectra from CSV (chunks of 2000): tracemalloc peak "
                  f"{peak:.1f} MiB (includes the in-memory results table)")


if __name__ == "__main__":
    main()
