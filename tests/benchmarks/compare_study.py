"""How often ``compare`` recommends CLS or PLS, and whether its verdict follows its own tests.

Run on demand (not collected by pytest)::

    python tests/benchmarks/compare_study.py            # 50 simulated sets per scenario
    python tests/benchmarks/compare_study.py --sets 10

Scenarios (3 analytes, 25 calibration mixtures, Gaussian bands on 151 points, white noise
σ = 0.003 AU): ``clean`` (Beer's law holds, every absorber known), ``absorber`` (a fourth
absorber, not in the concentration table, varies in every mixture at up to 0.3 AU), and
``curved`` (every channel follows ``A = a − 0.05a²`` of its Beer's-law absorbance a). For each
it prints how often the overall verdict is a CLS variant or PLS, how often the absorber and
curvature checks fire, and the number of verdicts that name a CLS variant a significant test
found worse than PLS (must be 0).
"""

from __future__ import annotations

import argparse
import time
import warnings

import numpy as np

from bandsolve.concentrations import ConcentrationTable
from bandsolve.evaluate.compare import compare_methods
from bandsolve.spectra import SpectralSet

AXIS = np.linspace(400.0, 700.0, 151)
SIGMA = 0.003
K = np.vstack([np.exp(-0.5 * ((AXIS - c) / 38.0) ** 2) for c in (450.0, 545.0, 640.0)])
FOREIGN = 0.3 * np.exp(-0.5 * ((AXIS - 600.0) / 25.0) ** 2)


def simulate(scenario: str, rng) -> tuple[SpectralSet, ConcentrationTable]:
    C = rng.uniform(0.1, 1.0, (25, 3))
    A = C @ K
    if scenario == "absorber":
        A = A + np.outer(rng.uniform(0.0, 1.0, 25), FOREIGN)
    if scenario == "curved":
        A = A - 0.05 * A**2
    A = A + rng.normal(0, SIGMA, A.shape)
    ids = [f"s{i}" for i in range(25)]
    return SpectralSet(AXIS, A, ids), ConcentrationTable(ids, ["a", "b", "c"], C)


def contradicts(result) -> bool:
    """True when the overall verdict names a CLS variant that a significant test found worse."""
    chosen = result.overall.method
    return any(t.method == chosen and t.pvalue_holm < result.alpha and t.statistic > 0
               for t in result.tests)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sets", type=int, default=50)
    args = parser.parse_args(argv)
    print(f"{'scenario':<10}{'CLS':>5}{'PLS':>5}{'absorber':>10}{'curvature':>11}"
          f"{'contradictions':>16}{'s':>6}")
    for scenario in ("clean", "absorber", "curved"):
        rng = np.random.default_rng({"clean": 1, "absorber": 2, "curved": 3}[scenario])
        t0 = time.perf_counter()
        cls = pls = absorber = curved = bad = 0
        for _ in range(args.sets):
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                result = compare_methods(*simulate(scenario, rng), cv="interleaved:5",
                                         n_permutations=499)
            pls += result.overall.method == "PLS"
            cls += result.overall.method != "PLS"
            absorber += result.evidence.found
            curved += bool(result.curvature.findings)
            bad += contradicts(result)
        print(f"{scenario:<10}{cls:>5}{pls:>5}{absorber:>10}{curved:>11}{bad:>16}"
              f"{time.perf_counter() - t0:>6.0f}", flush=True)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
