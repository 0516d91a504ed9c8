"""Coverage and flag rates of bandsolve's 95 % intervals, simulated and on the real datasets.

Run on demand (not collected by pytest)::

    python tests/benchmarks/coverage_study.py                 # 200 calibrations per kind
    python tests/benchmarks/coverage_study.py --calibrations 40 --only cls-mixtures pls2
    python tests/benchmarks/coverage_study.py --real          # the shared real datasets only

For each model kind it builds many independent calibrations on simulated overlapping Gaussian
bands (151 points, 400–700 nm, white noise σ = 0.003 AU) and measures, on 200 new in-range
mixtures per calibration (``cls-standards-M``: M analytes, 5 pure standards each;
``cls-standards-Mx2``: each of those standards prepared and measured twice; ``-5days``: the
calibration measured over 5 days, CLS built with ``runs``, PLS with leave-one-day-out
cross-validation):

* coverage of the 95 % intervals, pooled and by third of each analyte's range (low, middle,
  top), and the share of calibrations in which some analyte covers less than 0.90;
* the share of clean in-range samples carrying any flag (in range: inside every analyte's
  calibrated range and, as a lab would dilute otherwise, below the 2 AU photometric
  ceiling; the share above it is printed too);
* the share of samples carrying an unmodelled absorber that get any flag; the absorber is a
  band at 630 nm scaled so that its part outside the span of the pure spectra (the only part
  any residual test can see) has an RMS over the axis equal to the noise RMS.

Then the same under day-to-day effects calibration cannot see — each day has its own gain
(SD 2 %), wavelength shift (SD 0.2 nm), baseline offset (SD 0.002 AU) and slope; calibration is
measured on one day, 30 validation mixtures on 5 other days, the new samples on 10 further days
— before and after ``assess --out-model`` on the 30 validation mixtures.

The real section uses ``../shared/datasets``: intervals on the 54 real blank replicates (truth
0; before, and after validation on one half, scored on the other half), leave-one-standard-out
coverage on the real standards, flag rates on the real replicate and reaction mixtures, and
the replicate spread against the reported SE.
"""

from __future__ import annotations

import argparse
import sys
import time
import warnings
import zlib
from pathlib import Path

import numpy as np

from bandsolve.calibration.build import build_cls, build_cls_from_absorptivities
from bandsolve.calibration.build_pls import build_pls
from bandsolve.concentrations import ConcentrationTable
from bandsolve.evaluate.assess import assess, validated_model
from bandsolve.spectra import DEFAULT_CEILING_AU, SpectralSet

AXIS = np.linspace(400.0, 700.0, 151)
SIGMA = 0.003
N_NEW = 200
FINE = np.linspace(380.0, 720.0, 3401)
Z = (AXIS - AXIS.mean()) / ((AXIS.max() - AXIS.min()) / 2)
BAND = np.exp(-0.5 * ((AXIS - 630.0) / 18.0) ** 2)


def pure(m: int, shift: float = 0.0) -> np.ndarray:
    """m overlapping bands (AU per unit), as seen by an axis shifted by ``shift`` nm."""
    centres = np.linspace(450.0, 640.0, m) if m > 1 else np.array([520.0])
    return np.vstack([np.exp(-0.5 * ((AXIS + shift - c) / 38.0) ** 2) for c in centres])


def new_day(rng, effects: bool) -> dict[str, float]:
    if not effects:
        return {"gain": 0.0, "shift": 0.0, "offset": 0.0, "slope": 0.0}
    return {"gain": rng.normal(0, 0.02), "shift": rng.normal(0, 0.2),
            "offset": rng.normal(0, 0.002), "slope": rng.normal(0, 0.002)}


def interferent(m: int) -> np.ndarray:
    """An unmodelled band scaled so that the part no combination of the m pure spectra can
    absorb has an RMS over the axis equal to the noise RMS (the part a residual test sees)."""
    K = pure(m)
    unexplained = BAND - K.T @ np.linalg.lstsq(K.T, BAND, rcond=None)[0]
    return BAND * SIGMA / np.sqrt(np.mean(unexplained**2))


def measure(rng, C: np.ndarray, day: dict[str, float], extra: bool = False) -> np.ndarray:
    """Spectra of compositions C measured on ``day`` (white noise σ, optional absorber)."""
    n, m = C.shape
    A = (1 + day["gain"]) * C @ pure(m, day["shift"]) + day["offset"] + day["slope"] * Z
    A = A + rng.normal(0, SIGMA, (n, AXIS.size))
    return A + interferent(m) if extra else A


def spectra(A: np.ndarray, prefix: str) -> SpectralSet:
    return SpectralSet(AXIS, A, [f"{prefix}{i}" for i in range(len(A))])


def table(C: np.ndarray, prefix: str) -> ConcentrationTable:
    return ConcentrationTable([f"{prefix}{i}" for i in range(len(C))],
                              [f"a{k}" for k in range(C.shape[1])], C)


def design(kind: str, rng, m: int) -> np.ndarray:
    if kind.startswith("cls-standards"):
        copies = 2 if kind.endswith("x2") else 1  # each standard prepared twice
        return np.vstack([np.eye(m)[k] * v for k in range(m) for v in (0.2, 0.4, 0.6, 0.8, 1.0)
                          for _ in range(copies)])
    return rng.uniform(0.1, 1.0, (25, m))


def build(kind: str, rng, m: int, effects: bool):
    """One calibration of ``kind``, measured on one day (``-5days``: over 5 days, the day of
    each sample given to the build as its run)."""
    day = new_day(rng, effects)
    if kind.endswith("-5days"):
        C = design(kind, rng, m)
        run_of = np.arange(len(C)) % 5
        days = [day] + [new_day(rng, effects) for _ in range(4)]
        A = np.vstack([measure(rng, C[run_of == r], days[r]) for r in range(5)])
        C = np.vstack([C[run_of == r] for r in range(5)])
        S, T = spectra(A, "c"), table(C, "c")
        runs = dict(zip(S.sample_ids, np.sort(run_of).astype(str), strict=True))
        if kind.startswith("pls"):  # leave-one-day-out cross-validation
            return build_pls(S, T, mode="pls2", cv="groups", groups=runs)
        return build_cls(S, T, runs=runs)
    if kind == "cls-absorptivities":
        eps = SpectralSet(AXIS, (1 + day["gain"]) * pure(m, day["shift"]),
                          [f"a{k}" for k in range(m)], quantity="absorptivity")
        blanks = spectra(measure(rng, np.zeros((20, m)), day), "b")
        return build_cls_from_absorptivities(
            eps, 1.0, blanks=blanks, validated_range=dict.fromkeys(eps.sample_ids, (0.1, 1.0)))
    C = design(kind, rng, m)
    S, T = spectra(measure(rng, C, day), "c"), table(C, "c")
    if kind.startswith("cls"):
        return build_cls(S, T)
    mode = "pls1" if kind.startswith("pls1") else "pls2"
    cal = build_pls(S, T, mode=mode, cv="interleaved:5")
    if kind.endswith("+1"):
        counts = [ev.n_components for ev in cal.selection.models]
        comps = max(counts) + 1
        cal = build_pls(S, T, mode=mode, cv="interleaved:5", components=comps)
    return cal


def covered(res, C: np.ndarray) -> np.ndarray:
    """Boolean (n, m): truth inside the 95 % interval."""
    cols = [f"a{k}" for k in range(C.shape[1])]
    low = res[[f"{c} low95" for c in cols]].to_numpy(float)
    high = res[[f"{c} high95" for c in cols]].to_numpy(float)
    return (low <= C) & (C <= high)


def by_third(cov: np.ndarray, C: np.ndarray, low: np.ndarray, high: np.ndarray) -> np.ndarray:
    """Covered and counted results (2, 3) by third of each analyte's range (low, middle, top)."""
    third = np.clip(((C - low) / (np.minimum(high, 1.0) - low) * 3).astype(int), 0, 2)
    return np.array([np.bincount(third[cov], minlength=3), np.bincount(third.ravel(), minlength=3)])


def run_kind(kind: str, m: int, n_cal: int, effects: bool, rng,
             runs: bool = True) -> dict[str, float]:
    """Figures of one model kind; ``runs``: tell assess the day of each validation sample."""
    pooled, bad, flags, detect, after, bad_after, over = [], 0, [], [], [], 0, []
    thirds = np.zeros((2, 2, 3))  # covered and counted, before and after validation, by third
    for _ in range(n_cal):
        cal = build(kind, rng, m, effects)
        days = [new_day(rng, effects) for _ in range(10)]
        low, high = np.asarray(cal.calibrated_range).T  # in-range: inside every analyte's range
        Ct = rng.uniform(low, np.minimum(high, 1.0), (N_NEW, m))
        At = np.vstack([measure(rng, Ct[i::10], days[i]) for i in range(10)])
        Ct = np.vstack([Ct[i::10] for i in range(10)])
        res = cal.predict(spectra(At, "t"))
        cov = covered(res, Ct)
        thirds[0] += by_third(cov, Ct, low, high)
        pooled.append(cov.mean())
        bad += int((cov.mean(axis=0) < 0.90).any())
        # Clean means in range and inside the photometric range: a lab dilutes a sample
        # above the ceiling (those get the ``ceiling`` flag, as they should).
        photometric = (Ct @ pure(m)).max(axis=1) <= DEFAULT_CEILING_AU
        flags.append((res["flag_codes"][photometric] != "").mean())
        over.append(1.0 - photometric.mean())
        if not effects:
            Ab = measure(rng, Ct, days[0], extra=True)
            detect.append((cal.predict(spectra(Ab, "x"))["flag_codes"] != "").mean())
            continue
        Cv = rng.uniform(low, np.minimum(high, 1.0), (30, m))
        vdays = [new_day(rng, effects) for _ in range(5)]
        Av = np.vstack([measure(rng, Cv[i::5], vdays[i]) for i in range(5)])
        Cv = np.vstack([Cv[i::5] for i in range(5)])
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            day_of = {f"v{i}": str(i // 6) for i in range(30)}  # the 5 validation days
            val = validated_model(cal, assess(cal, spectra(Av, "v"), table(Cv, "v")), [],
                                  day_of if runs else None)
        cov2 = covered(val.predict(spectra(At, "t")), Ct)
        thirds[1] += by_third(cov2, Ct, low, high)
        after.append(cov2.mean())
        bad_after += int((cov2.mean(axis=0) < 0.90).any())
    out = {"coverage": float(np.mean(pooled)), "any_below_090": bad / n_cal,
           "thirds": thirds[0, 0] / thirds[0, 1],
           "any_flag_clean": float(np.mean(flags)), "over_ceiling": float(np.mean(over))}
    if detect:
        out["absorber_flagged"] = float(np.mean(detect))
    if after:
        out["coverage_after"] = float(np.mean(after))
        out["any_below_090_after"] = bad_after / n_cal
        out["thirds_after"] = thirds[1, 0] / thirds[1, 1]
    return out


KINDS = {
    "cls-mixtures": 3, "cls-standards-2": 2, "cls-standards-3": 3, "cls-standards-4": 4,
    "cls-standards-6": 6, "cls-standards-3x2": 3, "cls-standards-6x2": 6,
    "cls-mixtures-5days": 3, "cls-standards-3-5days": 3, "pls2-5days": 3,
    "cls-absorptivities": 3, "pls1": 3, "pls2": 3,
    "pls1+1": 3, "pls2+1": 3,
}


def simulated(n_cal: int, only: list[str] | None, runs: bool = True) -> None:
    print(f"Simulated: {n_cal} calibrations per kind, {N_NEW} new samples each")
    print(f"{'kind':<20}{'effects':<9}{'coverage':>9}{'<0.90':>7}{'flag':>7}{'absorber':>9}"
          f"{'by third':>20}{'cov after':>10}{'<0.90 after':>12}{'by third after':>20}"
          f"{'>2 AU':>7}{'s':>6}")
    for kind, m in KINDS.items():
        if only and kind not in only:
            continue
        for effects in (False, True):
            t0 = time.perf_counter()
            # str hashes change from process to process; crc32 gives the same stream each run
            rng = np.random.default_rng(zlib.crc32(f"{kind}:{effects}".encode()))
            r = run_kind(kind, m, n_cal, effects, rng, runs)
            print(f"{kind:<20}{'day' if effects else 'clean':<9}{r['coverage']:>9.3f}"
                  f"{r['any_below_090']:>7.2f}{r['any_flag_clean']:>7.3f}"
                  f"{r.get('absorber_flagged', float('nan')):>9.3f}"
                  f"{' '.join(f'{v:.3f}' for v in r['thirds']):>20}"
                  f"{r.get('coverage_after', float('nan')):>10.3f}"
                  f"{r.get('any_below_090_after', float('nan')):>12.2f}"
                  f"{' '.join(f'{v:.3f}' for v in r.get('thirds_after', [])):>20}"
                  f"{r['over_ceiling']:>7.3f}"
                  f"{time.perf_counter() - t0:>6.0f}", flush=True)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--calibrations", type=int, default=200)
    parser.add_argument("--only", nargs="*", help=f"kinds among {', '.join(KINDS)}")
    parser.add_argument("--real", action="store_true", help="real datasets only")
    parser.add_argument("--no-runs", action="store_true",
                        help="validate without telling assess the days (each sample its own run)")
    args = parser.parse_args(argv)
    if not args.real:
        simulated(args.calibrations, args.only, runs=not args.no_runs)
    folder = next((p / "shared" / "datasets" for p in Path(__file__).resolve().parents
                   if (p / "shared" / "datasets").is_dir()), None)
    if folder is not None:
        sys.path.insert(0, str(Path(__file__).resolve().parent))
        from coverage_real import real_study

        real_study(folder)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
