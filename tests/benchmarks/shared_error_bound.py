"""How well any interval can do for one calibration when K̂'s error is shared by its results.

Run on demand (not collected by pytest)::

    python tests/benchmarks/shared_error_bound.py [--calibrations 400]

CLS from pure standards (5 levels per analyte, 0.2–1.0, each prepared once or twice) on the
coverage study's invented overlapping bands (151 points, white noise σ = 0.003 AU). Every
calibration predicts 200 new mixtures inside every calibrated range (0–1.0: each analyte's
other standards are its blanks) with an *oracle* interval: the true
σ, the true pure spectra and the exact error variance ``σ²·g_aa·(1 + h)`` (Haaland & Thomas
1988), so nothing is estimated. Its pooled coverage is 95 % (or 97 % with a wider
multiplier), yet because the error of K̂ is common to every result of one calibration, many
calibrations still have an analyte covered below 90 %. Printed per design: the share of a
mid-range result's variance that is shared, ``h/(1 + h)`` at the centre of the ranges
(what ``bandsolve`` reports for a CLS model from standards), and the share of calibrations
with an analyte below 0.90 for the oracle at 95 % and at 97 %. No interval of the form
``ĉ ± k·SE`` does better; only a design with less K̂ error (replicates, more levels) does.
"""

from __future__ import annotations

import argparse

import numpy as np
from scipy import stats

AXIS = np.linspace(400.0, 700.0, 151)
SIGMA = 0.003
LEVELS = (0.2, 0.4, 0.6, 0.8, 1.0)


def pure(m: int) -> np.ndarray:
    centres = np.linspace(450.0, 640.0, m)
    return np.vstack([np.exp(-0.5 * ((AXIS - c) / 38.0) ** 2) for c in centres])


def study(m: int, copies: int, n_cal: int, rng) -> tuple[float, dict[float, tuple[float, float]]]:
    K = pure(m)
    g = np.diag(np.linalg.inv(K @ K.T))
    C = np.vstack([np.eye(m)[k] * v for k in range(m) for v in LEVELS for _ in range(copies)])
    gram_inv = np.linalg.inv(C.T @ C)
    mid = np.full(m, LEVELS[-1] / 2)  # centre of the calibrated range 0..1
    h_mid = mid @ gram_inv @ mid
    results = {}
    for level in (0.95, 0.97):
        z = stats.norm.ppf(0.5 + level / 2)
        pooled, bad = [], 0
        for _ in range(n_cal):
            A = C @ K + rng.normal(0, SIGMA, (len(C), AXIS.size))
            K_hat = gram_inv @ C.T @ A
            Ct = rng.uniform(0.0, LEVELS[-1], (200, m))
            X = Ct @ K + rng.normal(0, SIGMA, (200, AXIS.size))
            c_hat = np.linalg.solve(K_hat @ K_hat.T, K_hat @ X.T).T
            h = np.einsum("ij,jk,ik->i", Ct, gram_inv, Ct)
            se = SIGMA * np.sqrt(np.outer(1.0 + h, g))
            cov = np.abs(c_hat - Ct) <= z * se
            pooled.append(cov.mean())
            bad += int((cov.mean(axis=0) < 0.90).any())
        results[level] = (float(np.mean(pooled)), bad / n_cal)
    return float(h_mid / (1.0 + h_mid)), results


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--calibrations", type=int, default=400)
    args = parser.parse_args()
    rng = np.random.default_rng(20261202)
    print(f"oracle intervals, {args.calibrations} calibrations per design, 200 mixtures each")
    print(f"{'design':<22}{'shared':>8}{'pooled':>9}{'<0.90':>7}{'pooled':>9}{'<0.90':>7}")
    print(f"{'':<22}{'h/(1+h)':>8}{'(95 %)':>16}{'(97 %)':>16}")
    for m in (2, 3, 4, 6):
        for copies in (1, 2):
            share, res = study(m, copies, args.calibrations, rng)
            name = f"{m} analytes, {'duplicate' if copies == 2 else 'single'}"
            print(f"{name:<22}{share:>8.2f}" + "".join(
                f"{res[lv][0]:>9.3f}{res[lv][1]:>7.2f}" for lv in (0.95, 0.97)))


if __name__ == "__main__":
    main()
