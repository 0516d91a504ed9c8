"""Benchmark: one-pass PLS cross-validation against refitting scikit-learn.

Run on demand (not collected by pytest)::

    /work/venv/bin/python tests/benchmarks/bench_pls_cv.py [--threads N]

For each (n, p, m) it times 10-fold CV of 1..20 components with
(fast) ``bandsolve.crossval.cross_validate_pls``,
(a)    scikit-learn ``PLSRegression`` refitted for every component count (``cross_val_predict``),
(b)    scikit-learn fitted once per fold with 20 components, smaller counts by truncation,
and prints times, speed-ups and the largest prediction difference from (a) and (b).
The fast method and (b) are run alternately and timed as the best of ``--repeat`` runs each
(the machine may be shared);
(a) takes seconds to minutes and is run once.
"""

from __future__ import annotations

import argparse
import time

import numpy as np
from sklearn.cross_decomposition import PLSRegression
from sklearn.model_selection import KFold, cross_val_predict
from threadpoolctl import threadpool_limits

from bandsolve.crossval import cross_validate_pls

SIZES = [(500, 600, 3), (2000, 300, 3), (100, 1000, 1)]
A_MAX = 20
CV = KFold(10)


def simulate(n: int, p: int, m: int, rng: np.random.Generator):
    """Mixtures of m + 3 overlapping Gaussian bands on a 0.3 AU offset, white noise 0.002 AU."""
    grid = np.linspace(0.0, 1.0, p)
    centres = np.linspace(0.15, 0.85, m + 3)
    bands = np.exp(-0.5 * ((grid[None, :] - centres[:, None]) / 0.1) ** 2)
    conc = rng.uniform(0.0, 1.0, size=(n, m + 3))
    X = 0.3 + conc @ bands + 0.002 * rng.standard_normal((n, p))
    return X, conc[:, :m]


def timed(func, repeat: int = 1):
    """Result of ``func()`` and its best wall time over ``repeat`` runs."""
    best = np.inf
    for _ in range(repeat):
        start = time.perf_counter()
        out = func()
        best = min(best, time.perf_counter() - start)
    return out, best


def timed_pair(first, second, repeat: int):
    """Results and best wall times of two functions run alternately ``repeat`` times each.

    Alternating puts both under the same load when the machine is shared, so their ratio is
    steadier than that of two separate series.
    """
    runs = [timed(first), timed(second)]
    for _ in range(repeat - 1):
        runs = [(out, min(best, timed(func)[1]))
                for (out, best), func in zip(runs, (first, second), strict=True)]
    return runs


def sklearn_refit(X, Y):
    return np.stack([cross_val_predict(PLSRegression(a, scale=False), X, Y, cv=CV).reshape(Y.shape)
                     for a in range(1, A_MAX + 1)])


def sklearn_truncated(X, Y):
    pred = np.empty((A_MAX, *Y.shape))
    for train, test in CV.split(X):
        model = PLSRegression(A_MAX, scale=False).fit(X[train], Y[train])
        scores = (X[test] - X[train].mean(axis=0)) @ model.x_rotations_
        terms = scores.T[:, :, None] * model.y_loadings_.T[:, None, :]
        pred[:, test] = Y[train].mean(axis=0) + np.cumsum(terms, axis=0)
    return pred


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--threads", type=int, default=None,
                        help="limit BLAS threads (threadpoolctl); default: library default")
    parser.add_argument("--repeat", type=int, default=10,
                        help="alternate runs of the fast method and of (b); the best time "
                        "of each is kept")
    args = parser.parse_args()
    rng = np.random.default_rng(0)
    print(f"10-fold CV, components 1..{A_MAX}, BLAS threads: {args.threads or 'default'}, "
          f"best of {args.repeat}")
    print(f"{'n':>5} {'p':>5} {'m':>2} {'fast s':>8} {'(a) s':>8} {'(b) s':>8} "
          f"{'x(a)':>6} {'x(b)':>6} {'max|d| a':>9} {'max|d| b':>9}")
    with threadpool_limits(limits=args.threads):
        for n, p, m in SIZES:
            X, Y = simulate(n, p, m, rng)
            (res, t_fast), (ref_b, t_b) = timed_pair(
                lambda X=X, Y=Y: cross_validate_pls(X, Y, A_MAX, cv=CV),
                lambda X=X, Y=Y: sklearn_truncated(X, Y), args.repeat)
            ref_a, t_a = timed(lambda X=X, Y=Y: sklearn_refit(X, Y))
            d_a = np.abs(res.predictions - ref_a).max()
            d_b = np.abs(res.predictions - ref_b).max()
            print(f"{n:>5} {p:>5} {m:>2} {t_fast:>8.4f} {t_a:>8.2f} {t_b:>8.2f} "
                  f"{t_a / t_fast:>6.0f} {t_b / t_fast:>6.1f} {d_a:>9.1e} {d_b:>9.1e}")


if __name__ == "__main__":
    main()
