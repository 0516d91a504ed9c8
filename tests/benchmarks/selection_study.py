"""Which PLS component-selection rule to use by default: how often each picks the right count.

Run on demand (not collected by pytest)::

    python tests/benchmarks/selection_study.py          # 200 simulated sets per design
    python tests/benchmarks/selection_study.py --sets 50

Simulated mixtures of 3 absorbers (Gaussian bands on 151 points, white noise σ = 0.003 AU), so
the right count is 3. For 25 and 40 calibration mixtures and PLS1/PLS2 it prints, per rule
(``randomization`` at α = 0.05, ``one-se``, ``min``), the share of sets where the rule chose
fewer than 3, exactly 3 and more than 3 components, all rules on the same cross-validation
curves (``interleaved:5``).
"""

from __future__ import annotations

import argparse

import numpy as np

from bandsolve.crossval import cross_validate_pls, select_components

AXIS = np.linspace(400.0, 700.0, 151)
K = np.vstack([np.exp(-0.5 * ((AXIS - c) / 38.0) ** 2) for c in (450.0, 545.0, 640.0)])
RULES = ("randomization", "one-se", "min")


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sets", type=int, default=200)
    args = parser.parse_args(argv)
    print(f"{'n':>4} {'mode':<5} {'rule':<14}{'under':>7}{'right':>7}{'over':>7}")
    for n in (25, 40):
        for mode in ("pls1", "pls2"):
            rng = np.random.default_rng(n * 10 + (mode == "pls2"))
            chosen = {rule: [] for rule in RULES}
            for _ in range(args.sets):
                C = rng.uniform(0.1, 1.0, (n, 3))
                X = C @ K + rng.normal(0, 0.003, (n, AXIS.size))
                targets = [C] if mode == "pls2" else [C[:, [k]] for k in range(3)]
                for Y in targets:
                    cv = cross_validate_pls(X, Y, 8, cv="interleaved:5")
                    for rule in RULES:
                        chosen[rule].append(select_components(cv, rule=rule).n_components)
            for rule in RULES:
                a = np.asarray(chosen[rule])
                print(f"{n:>4} {mode:<5} {rule:<14}{np.mean(a < 3):>7.3f}{np.mean(a == 3):>7.3f}"
                      f"{np.mean(a > 3):>7.3f}", flush=True)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
