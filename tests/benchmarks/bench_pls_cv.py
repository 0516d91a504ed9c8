"""Benchmark: one-pass PLS cross-validation against the fastest open PLS library and scikit-learn.

Run on demand (not collected by pytest), in the benchmark environment described in
``tests/benchmarks/README.md`` (the peer library is installed there only, never as a
dependency)::

    /work/benchvenv/bin/python tests/benchmarks/bench_pls_cv.py [--repeat 5] [--shapes ...]

For each shape (n, p) and for PLS1 (m = 1) and PLS2 (m = 3) it times 10-fold CV (contiguous
blocks, the same partition for every library) of 1..20 components with

* **bandsolve**: ``bandsolve.crossval.cross_validate_pls`` (predictions, RMSECV, Q, T²);
* **peer**: the open improved-kernel PLS with fast partition-based cross-validation
  (Engstrøm & Jensen 2024; ``ikpls.fast_cross_validation.numpy.PLS``, algorithm 1 when
  n < p else 2, centring only, one job), its metric function returning the held-out
  predictions of every component count;

both with one BLAS thread, run alternately, best of ``--repeat`` runs each.  It prints the
CPU times (process time: the steady measure on a shared machine, as both run on one thread)
and wall times, the ratios peer/bandsolve (> 1: bandsolve is faster), the tracemalloc peak
of each call (memory allocated beyond the input data, measured in separate untimed runs) and
the largest
prediction difference of each against scikit-learn ``PLSRegression`` (fitted once per fold
with 20 components and NIPALS run to convergence, ``tol=0``, 500 iterations; smaller counts by
truncation).  scikit-learn is skipped above ``--sklearn-max`` samples for PLS1 and above
``--sklearn-max-pls2`` for PLS2 (it takes minutes there).
"""

from __future__ import annotations

import argparse
import contextlib
import io
import time
import tracemalloc
import warnings

import numpy as np
from sklearn.cross_decomposition import PLSRegression
from sklearn.model_selection import KFold
from threadpoolctl import threadpool_limits

from bandsolve.crossval import cross_validate_pls

SHAPES = [(100, 1000), (500, 600), (2000, 300), (10_000, 300), (50_000, 100),
          (1_000_000, 100)]
A_MAX = 20
N_FOLDS = 10


def simulate(n: int, p: int, m: int, rng: np.random.Generator):
    """Mixtures of m + 3 overlapping Gaussian bands on a 0.3 AU offset, white noise 0.002 AU."""
    grid = np.linspace(0.0, 1.0, p)
    centres = np.linspace(0.15, 0.85, m + 3)
    bands = np.exp(-0.5 * ((grid[None, :] - centres[:, None]) / 0.1) ** 2)
    conc = rng.uniform(0.0, 1.0, size=(n, m + 3))
    X = conc @ bands
    X += 0.3
    X += 0.002 * rng.standard_normal((n, p))
    return X, conc[:, :m].copy()


def folds_of(n: int) -> np.ndarray:
    """Fold label of each sample for KFold(10) without shuffling (contiguous blocks)."""
    labels = np.empty(n, dtype=int)
    for k, (_, test) in enumerate(KFold(N_FOLDS).split(np.empty((n, 1)))):
        labels[test] = k
    return labels


def run_bandsolve(X, Y):
    return cross_validate_pls(X, Y, A_MAX, cv=KFold(N_FOLDS)).predictions


def run_peer(X, Y):
    from ikpls.fast_cross_validation.numpy import PLS as PeerPLS

    n, p = X.shape
    labels = folds_of(n)
    model = PeerPLS(algorithm=1 if n < p else 2, center_X=True, center_Y=True,
                    scale_X=False, scale_Y=False, copy=True)
    with contextlib.redirect_stdout(io.StringIO()):  # it prints a line per call
        per_fold = model.cross_validate(X, Y, A_MAX, labels, lambda y_val, y_pred: y_pred,
                                        n_jobs=1, verbose=0)
    pred = np.empty((A_MAX, *Y.shape))
    for k, fold_pred in per_fold.items():
        pred[:, labels == k] = fold_pred
    return pred


def run_sklearn(X, Y):
    # PLS1 weights are exact after one NIPALS step; for PLS2 the power iteration runs its
    # full max_iter (tol=0): with its usual stopping rule it agrees only to ~1e-7.
    pred = np.empty((A_MAX, *Y.shape))
    for train, test in KFold(N_FOLDS).split(X):
        model = PLSRegression(A_MAX, scale=False, tol=0.0, max_iter=500)
        model.fit(X[train], Y[train])
        scores = (X[test] - X[train].mean(axis=0)) @ model.x_rotations_
        terms = scores.T[:, :, None] * model.y_loadings_.T[:, None, :]
        pred[:, test] = Y[train].mean(axis=0) + np.cumsum(terms, axis=0)
    return pred


def timed(func):
    """Result, wall time and CPU time of one call."""
    wall, cpu = time.perf_counter(), time.process_time()
    out = func()
    return out, np.array([time.perf_counter() - wall, time.process_time() - cpu])


def alternate(funcs, repeat: int):
    """First result and best (wall, CPU) times of each function, run alternately."""
    outs, best = [None] * len(funcs), [np.full(2, np.inf) for _ in funcs]
    for _ in range(repeat):
        for i, func in enumerate(funcs):
            out, t = timed(func)
            outs[i] = out if outs[i] is None else outs[i]
            best[i] = np.minimum(best[i], t)
            del out
    return outs, best


def peak_mb(func) -> float:
    """tracemalloc peak (MB) of one call: everything it allocates, numpy arrays included."""
    tracemalloc.start()
    out = func()
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    del out
    return peak / 2**20


def compare(X: np.ndarray, Y: np.ndarray, args: argparse.Namespace) -> str:
    """One line of the table for data (X, Y)."""
    (n, p), m = X.shape, Y.shape[1]
    repeat = args.repeat if n * p <= 5_000_000 else max(2, args.repeat // 2)
    (ours, peer), (t_ours, t_peer) = alternate(
        [lambda: run_bandsolve(X, Y), lambda: run_peer(X, Y)], repeat)
    mem_ours = mem_peer = float("nan")
    if not args.no_memory:
        mem_ours = peak_mb(lambda: run_bandsolve(X, Y))
        mem_peer = peak_mb(lambda: run_peer(X, Y))
    d_ours = d_peer = float("nan")
    if n <= (args.sklearn_max if m == 1 else args.sklearn_max_pls2):
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # "did not converge" at tol=0
            ref = run_sklearn(X, Y)
        d_ours, d_peer = np.abs(ours - ref).max(), np.abs(peer - ref).max()
    return (f"{n:>8} {p:>5} {m:>2} {t_ours[1]:>8.4f} {t_peer[1]:>8.4f} "
            f"{t_peer[1] / t_ours[1]:>7.2f} {t_ours[0]:>8.4f} {t_peer[0]:>8.4f} "
            f"{t_peer[0] / t_ours[0]:>7.2f} {mem_ours:>7.0f} {mem_peer:>8.0f} "
            f"{d_ours:>8.1e} {d_peer:>8.1e}")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeat", type=int, default=5, help="alternating runs per shape")
    parser.add_argument("--sklearn-max", type=int, default=50_000,
                        help="largest n compared with scikit-learn")
    parser.add_argument("--sklearn-max-pls2", type=int, default=2000,
                        help="largest n compared with scikit-learn for PLS2")
    parser.add_argument("--max-n", type=int, default=None, help="skip shapes with more rows")
    parser.add_argument("--no-memory", action="store_true", help="skip the memory runs")
    args = parser.parse_args()
    rng = np.random.default_rng(12345)
    print(f"{N_FOLDS}-fold CV (blocks), components 1..{A_MAX}, one BLAS thread, "
          f"best of {args.repeat} alternating runs")
    print("times in s: CPU (process time; steady on a shared machine) and wall; ratio "
          "peer/bandsolve > 1 means bandsolve is faster")
    print(f"{'n':>8} {'p':>5} {'m':>2} {'bs cpu':>8} {'peer cpu':>8} {'ratio':>7} "
          f"{'bs wall':>8} {'peer wall':>8} {'ratio':>7} {'bs MB':>7} {'peer MB':>8} "
          f"{'bs-skl':>8} {'peer-skl':>8}")
    with threadpool_limits(limits=1):
        for n, p in SHAPES:
            if args.max_n is None or n <= args.max_n:
                for m in (1, 3):
                    print(compare(*simulate(n, p, m, rng), args), flush=True)


if __name__ == "__main__":
    main()
