"""CLS build time: closed-form leave-one-out against refitting once per left-out sample.

Run on demand (not collected by pytest)::

    python tests/benchmarks/bench_cls_build.py            # 2000 spectra × 300 points, 4 analytes
    python tests/benchmarks/bench_cls_build.py --shape 20000 1000 --against-pls

Prints the compute time of ``build_cls`` (fit, closed-form leave-one-out for the residual limit,
error scale, RMSECV and reference-value outliers, figures of merit) and of the fit alone, and,
measured in the same run, what a user would otherwise do for the same leave-one-out numbers:
refit K̂ with numpy's least squares once per sample (here on a subset, scaled to n).
With ``--against-pls`` it also times ``build_pls`` on the same data (default settings:
10-fold interleaved CV, up to 15 components, the randomization rule). Times are CPU time
(process time, best of the repeats), which a shared machine disturbs less than wall time.
"""

from __future__ import annotations

import argparse
import time

import numpy as np

from bandsolve.calibration.build import build_cls
from bandsolve.calibration.build_pls import build_pls
from bandsolve.cls import CLSRegressor
from bandsolve.concentrations import ConcentrationTable
from bandsolve.spectra import SpectralSet


def best_of(fn, repeats: int = 5) -> float:
    times = []
    for _ in range(repeats):
        t0 = time.process_time()
        fn()
        times.append(time.process_time() - t0)
    return min(times)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--shape", nargs=2, type=int, default=(2000, 300), metavar=("N", "P"))
    parser.add_argument("--against-pls", action="store_true")
    parser.add_argument("--repeats", type=int, default=5)
    args = parser.parse_args(argv)
    rng = np.random.default_rng(0)
    (n, p), m = args.shape, 4
    axis = np.linspace(400.0, 700.0, p)
    K = np.vstack([np.exp(-0.5 * ((axis - c) / 40.0) ** 2) for c in (450, 500, 560, 620)])
    C = rng.uniform(0.0, 1.0, (n, m))
    A = C @ K + rng.normal(0, 0.003, (n, p))
    ids = [f"s{i}" for i in range(n)]
    spectra, table = SpectralSet(axis, A, ids), ConcentrationTable(ids, list("abcd"), C)
    build = best_of(lambda: build_cls(spectra, table), args.repeats)
    fit = best_of(lambda: CLSRegressor().fit(A, C), args.repeats)

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
    if args.against_pls:
        pls = best_of(lambda: build_pls(spectra, table), args.repeats)
        print(f"PLS build, same data: {pls:.3f} s; ratio PLS / CLS = {pls / build:.1f}×")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
