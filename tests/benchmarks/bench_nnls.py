"""Benchmark: batched non-negative CLS against scipy's per-spectrum ``nnls``.

Run on demand (not collected by pytest)::

    /work/main/.venv/bin/python tests/benchmarks/bench_nnls.py [--n 10000] [--repeat 5]
        [--analytes 2,4,6,8,10] [--points 300,1000]

Simulates (invented data) n spectra × p points of k overlapping Gaussian bands plus noise of
0.01 AU, in two scenarios:

* spread: every concentration uniform on [−0.3, 1], so about a quarter sit at the zero bound;
* absent: each analyte truly absent (concentration exactly 0) from half the samples and
  uniform on [0.05, 1] otherwise, so the noise puts about a quarter at the bound as well,
  in many different combinations per sample.

and times, with one BLAS thread,

* scipy: ``scipy.optimize.nnls(Kᵀ, x)`` for every spectrum (what a user would otherwise write);
* solver: :func:`bandsolve.nnls.nnls_gram` from the products ``H = X Kᵀ`` that the prediction
  scan computes anyway;
* with products: the same plus computing ``H`` from X;

best CPU time (process time, one thread) of ``--repeat`` alternating runs. Prints the ratios,
the share of concentrations at the bound and the largest difference from scipy.
"""

from __future__ import annotations

import argparse
import time

import numpy as np
from scipy.optimize import nnls
from threadpoolctl import threadpool_limits

from bandsolve.nnls import nnls_gram


def best_of(funcs, repeat):
    best = [np.inf] * len(funcs)
    outs = [None] * len(funcs)
    for _ in range(repeat):
        for i, func in enumerate(funcs):
            start = time.process_time()  # CPU time: steady on a shared machine, one thread
            outs[i] = func()
            best[i] = min(best[i], time.process_time() - start)
    return outs, best


def concentrations(rng, scenario: str, n: int, k: int) -> np.ndarray:
    """Invented concentrations for one scenario (see the module docstring)."""
    if scenario == "spread":
        return rng.uniform(-0.3, 1.0, (n, k))
    return np.where(rng.random((n, k)) < 0.5, 0.0, rng.uniform(0.05, 1.0, (n, k)))


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--n", type=int, default=10_000)
    parser.add_argument("--repeat", type=int, default=5)
    parser.add_argument("--analytes", default="2,4,6,8,10")
    parser.add_argument("--points", default="300,1000")
    parser.add_argument("--scenarios", default="spread,absent")
    args = parser.parse_args()
    rng = np.random.default_rng(12345)
    print(f"n = {args.n} spectra, one BLAS thread, best of {args.repeat} alternating runs")
    print(f"{'scenario':>8} {'p':>5} {'k':>3} {'scipy s':>9} {'solver s':>9} {'+H s':>8} "
          f"{'x solver':>9} {'x +H':>6} {'at bound':>8} {'max|d|':>8}")
    with threadpool_limits(limits=1):
        for scenario in args.scenarios.split(","):
            for p in map(int, args.points.split(",")):
                for k in map(int, args.analytes.split(",")):
                    axis = np.linspace(0.0, 1.0, p)
                    K = np.vstack([np.exp(-0.5 * ((axis - c) / 0.12) ** 2)
                                   for c in np.linspace(0.2, 0.8, k)])
                    X = (concentrations(rng, scenario, args.n, k) @ K
                         + 0.01 * rng.standard_normal((args.n, p)))
                    G, H = K @ K.T, X @ K.T
                    (ref, res, _), (t_ref, t_solver, t_full) = best_of(
                        [lambda K=K, X=X: np.array([nnls(K.T, x)[0] for x in X]),
                         lambda G=G, H=H: nnls_gram(G, H),
                         lambda G=G, K=K, X=X: nnls_gram(G, X @ K.T)], args.repeat)
                    diff = np.abs(res.coef - ref).max()
                    print(f"{scenario:>8} {p:>5} {k:>3} {t_ref:>9.4f} {t_solver:>9.4f} "
                          f"{t_full:>8.4f} {t_ref / t_solver:>9.1f} {t_ref / t_full:>6.1f} "
                          f"{res.at_bound.mean():>8.2f} {diff:>8.1e}", flush=True)


if __name__ == "__main__":
    main()
