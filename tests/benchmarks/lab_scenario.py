"""Pure standards as a lab makes them: coverage and flags when errors are per measurement.

Run on demand (not collected by pytest)::

    python tests/benchmarks/lab_scenario.py [--calibrations 60]

Invented simulation (the bands and noise of ``coverage_study.py``): 4 analytes, 5 pure
standards each (0.2–1.0), and 60 new mixtures per calibration in which each analyte is absent
with probability 0.3 (else 0.1–1.0). Errors switched on one at a time, then together: each
standard prepared 1.5 % off its stated concentration (SD), a gain per measurement (cuvette
placement, path length; SD 1 %) and a baseline offset per measurement (SD 0.002 AU), the last
two on standards and mixtures alike. Printed: coverage of the 95 % intervals (and for absent
analytes), the share of mixtures flagged ``negative`` and flagged at all.
"""

from __future__ import annotations

import argparse
import warnings

import numpy as np
from coverage_study import SIGMA, covered, pure, spectra, table

from bandsolve.calibration.build import build_cls

M = 4
CASES = {"none": (0.0, 0.0, 0.0), "preparation 1.5 %": (0.015, 0.0, 0.0),
         "gain 1 %": (0.0, 0.01, 0.0), "offset 0.002 AU": (0.0, 0.0, 0.002),
         "all three": (0.015, 0.01, 0.002)}


def measure(rng, C: np.ndarray, gain: float, offset: float) -> np.ndarray:
    n = len(C)
    return ((1 + rng.normal(0, gain, (n, 1))) * (C @ pure(M)) + rng.normal(0, offset, (n, 1))
            + rng.normal(0, SIGMA, (n, pure(M).shape[1])))


def case(rng, n_cal: int, prep: float, gain: float, offset: float) -> dict[str, float]:
    cov, absent, neg, flagged = [], [], [], []
    stated = np.vstack([np.eye(M)[k] * v for k in range(M) for v in (0.2, 0.4, 0.6, 0.8, 1.0)])
    for _ in range(n_cal):
        made = stated * (1 + rng.normal(0, prep, stated.shape))
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            cal = build_cls(spectra(measure(rng, made, gain, offset), "s"), table(stated, "s"))
        C = rng.uniform(0.1, 1.0, (60, M)) * (rng.uniform(size=(60, M)) > 0.3)
        res = cal.predict(spectra(measure(rng, C, gain, offset), "x"))
        inside = covered(res, C)
        cov.append(inside.mean())
        absent.append(inside[C == 0].mean())
        neg.append(np.mean(["negative" in codes for codes in res["flag_codes"]]))
        flagged.append(np.mean(res["flag_codes"] != ""))
    return {"coverage": np.mean(cov), "absent": np.mean(absent), "negative": np.mean(neg),
            "flagged": np.mean(flagged)}


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--calibrations", type=int, default=60)
    n_cal = parser.parse_args().calibrations
    print(f"{'errors':<20}{'coverage':>9}{'absent':>8}{'negative':>9}{'flagged':>8}")
    for name, (prep, gain, offset) in CASES.items():
        r = case(np.random.default_rng(77), n_cal, prep, gain, offset)
        print(f"{name:<20}{r['coverage']:>9.3f}{r['absent']:>8.3f}{r['negative']:>9.3f}"
              f"{r['flagged']:>8.3f}", flush=True)


if __name__ == "__main__":
    main()
