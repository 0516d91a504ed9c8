"""CLS build time: closed-form leave-one-out against refitting once per left-out sample.

Run on demand (not collected by pytest)::

    python tests/benchmarks/bench_cls_build.py            # 2000 spectra × 300 points, 4 analytes

Prints the compute time of ``build_cls`` (fit, closed-form leave-one-out for the residual limit,
error scale, RMSECV and reference-value outliers, figures of merit) and of the fit alone, and,
measured in the same run, what a user would otherwise do for the same leave-one-out numbers:
refit K̂ with numpy's least squares once per sample (here on a subset, scaled to n).
"""

from __future__ import annotations

import time

import numpy as np

from bandsolve.calibration.build import build_cls
from bandsolve.cls import CLSRegressor
from bandsolve.concentrations import ConcentrationTable
from bandsolve.spectra import SpectralSet


def best_of(fn, repeats: int = 5) -> float:
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return min(times)


def main() -> int:
    rng = np.random.default_rng(0)
    n, p, m = 2000, 300, 4
    axis = np.linspace(400.0, 700.0, p)
    K = np.vstack([np.exp(-0.5 * ((axis - c) / 40.0) ** 2) for c in (450, 500, 560, 620)])
    C = rng.uniform(0.0, 1.0, (n, m))
    A = C @ K + rng.normal(0, 0.003, (n, p))
    ids = [f"s{i}" for i in range(n)]
    spectra, table = SpectralSet(axis, A, ids), ConcentrationTable(ids, list("abcd"), C)
    build = best_of(lambda: build_cls(spectra, table))
    fit = best_of(lambda: CLSRegressor().fit(A, C))

    def refits(k: int) -> None:
        for i in range(k):
            keep = np.arange(n) != i
            coef = np.linalg.lstsq(C[keep], A[keep], rcond=None)[0]
            np.linalg.lstsq(coef.T, A[i], rcond=None)

    k = 100
    naive = best_of(lambda: refits(k), repeats=3) * n / k
    print(f"CLS build, {n} × {p}, {m} analytes: {build:.3f} s (fit with closed-form "
          f"leave-one-out {fit:.3f} s)")
    print(f"leave-one-out by {n} numpy refits (scaled from {k}): {naive:.2f} s; "
          f"ratio refits / whole build = {naive / build:.0f}×")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
