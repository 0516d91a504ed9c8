"""Real-data part of the coverage study (see coverage_study.py): the shared UV-Vis datasets.

three-aromatics-ethanol: 15 standards (with one blank), 54 blank replicates whose true
concentration is 0, 5 replicate spectra of one mixture without reference values.
styrene-oxidation: 16 standards (with one blank), 756 reaction mixtures whose only reference is
another method's published fit (not truth: agreement is reported, not coverage).
"""

from __future__ import annotations

import warnings
from pathlib import Path

import numpy as np
import pandas as pd

from bandsolve.calibration.build import build_cls
from bandsolve.calibration.build_pls import build_pls
from bandsolve.evaluate.validated import validated_calibration
from bandsolve.io import read_concentrations, read_spectra

VARIANTS = {"plain": {}, "intercept": {"intercept": True}, "offset": {"baseline": "offset"}}


def _inside(res: pd.DataFrame, analytes, truth: np.ndarray) -> np.ndarray:
    low = res[[f"{a} low95" for a in analytes]].to_numpy(float)
    high = res[[f"{a} high95" for a in analytes]].to_numpy(float)
    return (low <= truth) & (truth <= high)


def _flag_rate(res: pd.DataFrame) -> float:
    return float((res["flag_codes"] != "").mean())


def _codes(res: pd.DataFrame) -> str:
    counts: dict[str, int] = {}
    for text in res["flag_codes"]:
        for code in filter(None, text.split(";")):
            key = code.split(":")[0]
            counts[key] = counts.get(key, 0) + 1
    return ", ".join(f"{k} {v}" for k, v in sorted(counts.items())) or "none"


def loso_errors(spectra, table, build=build_cls, **kw):
    """Coverage and flag rate of the left-out standards, and their errors, SEs and references
    (each an (n, m) array)."""
    hits, flags, errors, ses = [], [], [], []
    analytes = list(table.analytes)
    for sid in table.sample_ids:
        keep = [s for s in table.sample_ids if s != sid]
        cal = build(spectra.subset(keep), table.subset(keep), **kw)
        res = cal.predict(spectra.subset([sid]))
        truth = np.asarray(table.subset([sid]).values)
        hits.append(_inside(res, analytes, truth).mean())
        flags.append(_flag_rate(res))
        errors.append(res[analytes].to_numpy(float)[0] - truth[0])
        ses.append(res[[f"{a} SE" for a in analytes]].to_numpy(float)[0])
    return (float(np.mean(hits)), float(np.mean(flags)),
            (np.array(errors), np.array(ses), np.asarray(table.values, dtype=float)))


def model_error_line(cal, loso, mixtures=None) -> str:
    """The two-component model error the left-out standards show, fed to the estimator as if
    they were a validation (they are not independent: indicative only), and the replicate
    spread against the SE with it."""
    errors, ses, levels = loso
    new = validated_calibration(cal, errors, ses, [], None, levels)
    parts = ", ".join(f"{t:.2g} + {100 * k:.1f} %" for t, k in zip(
        new.interval.model_error_sd, new.interval.kappa, strict=True))
    text = f"    model error shown by the left-out standards (τ + κ): {parts}"
    if mixtures is not None:
        res = new.predict(mixtures)
        conc = res[list(cal.analytes)].to_numpy(float)
        se = res[[f"{a} SE" for a in cal.analytes]].median().to_numpy(float)
        text += f"; replicate SD / median SE with it {np.round(conc.std(axis=0, ddof=1) / se, 2)}"
    return text


def blanks_before_after(cal, blanks, analytes, rng, splits: int = 200):
    """Coverage of 0 on real blanks; and after validating on one half, on the other half."""
    before = _inside(cal.predict(blanks), analytes, 0.0).mean(axis=0)
    ids = list(blanks.sample_ids)
    after = []
    for _ in range(splits):
        order = rng.permutation(len(ids))
        val, test = [ids[i] for i in order[:27]], [ids[i] for i in order[27:]]
        # assess needs differing reference values for its regression statistics; blanks all
        # share 0, so their errors and calibration SEs go to the same estimator directly.
        res = cal.predict(blanks.subset(val))
        new = validated_calibration(cal, res[list(analytes)].to_numpy(float),
                                    res[[f"{a} SE" for a in analytes]].to_numpy(float), [])
        after.append(_inside(new.predict(blanks.subset(test)), analytes, 0.0).mean(axis=0))
    return before, np.mean(after, axis=0), new


def aromatics(folder: Path) -> None:
    d = folder / "three-aromatics-ethanol"
    spectra = read_spectra(d / "standards_spectra.csv")
    table = read_concentrations(d / "standards_concentrations.csv")
    mixtures = read_spectra(d / "mixture_replicates_spectra.csv")
    blanks = read_spectra(d / "blank_replicates_spectra.csv")
    analytes = table.analytes
    print("\nthree-aromatics-ethanol (15 standards, 54 real blanks with truth 0, 5 replicates)")
    for name, kw in VARIANTS.items():
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            cal = build_cls(spectra, table, **kw)
            before, after, new = blanks_before_after(cal, blanks, analytes,
                                                     np.random.default_rng(1))
            loo_cov, loo_flag, loso = loso_errors(spectra, table, **kw)
        res_b = cal.predict(blanks)
        res_m = cal.predict(mixtures)
        conc = res_m[list(analytes)].to_numpy(float)
        se = res_m[[f"{a} SE" for a in analytes]].median().to_numpy(float)
        print(f"  CLS {name}: blank coverage before {np.round(before, 2)} after "
              f"{np.round(after, 2)}; blanks flagged before {_flag_rate(res_b):.2f} "
              f"({_codes(res_b)}), after {_flag_rate(new.predict(blanks)):.2f}")
        print(f"    leave-one-standard-out coverage {loo_cov:.2f}, flagged {loo_flag:.2f}; "
              f"replicate mixtures flagged {_flag_rate(res_m):.2f} ({_codes(res_m)}); "
              f"replicate SD / median SE {np.round(conc.std(axis=0, ddof=1) / se, 2)}")
        print(model_error_line(cal, loso, mixtures))


def styrene(folder: Path) -> None:
    d = folder / "styrene-oxidation"
    spectra = read_spectra(d / "standards_spectra.csv")
    table = read_concentrations(d / "standards_concentrations.csv")
    mixtures = read_spectra(d / "reaction_mixtures_spectra.csv")
    published = pd.read_csv(d / "published_unmixing_results.csv").set_index("sample")
    print("\nstyrene-oxidation (16 standards, 756 reaction mixtures; published fits are "
          "another method's answer, not truth)")
    for name, kw in {**VARIANTS, "offset 220-350": {"baseline": "offset",
                                                     "window": [(220.0, 350.0)]}}.items():
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            cal = build_cls(spectra, table, **kw)
            loo_cov, loo_flag, loso = loso_errors(spectra, table, **kw)
        res = cal.predict(mixtures)
        pub = published.loc[list(res["sample"])].to_numpy(float)
        agree = _inside(res, table.analytes, pub).mean(axis=0)
        print(f"  CLS {name}: leave-one-standard-out coverage {loo_cov:.2f}, flagged "
              f"{loo_flag:.2f}; reaction mixtures flagged {_flag_rate(res):.2f} "
              f"({_codes(res)}); published fit inside our interval {np.round(agree, 2)}")
        print(model_error_line(cal, loso))


def pls_real(folder: Path) -> None:
    """PLS2 on the same standards: leave-one-standard-out coverage and flags, and flag rates
    on the real blanks and reaction mixtures (the Q limit is the residual check here)."""
    kw = {"cv": "loo", "mode": "pls2"}
    for name, other in (("three-aromatics-ethanol", "blank_replicates_spectra.csv"),
                        ("styrene-oxidation", "reaction_mixtures_spectra.csv")):
        d = folder / name
        spectra = read_spectra(d / "standards_spectra.csv")
        table = read_concentrations(d / "standards_concentrations.csv")
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            cal = build_pls(spectra, table, **kw)
            loo_cov, loo_flag, _ = loso_errors(spectra, table, build_pls, **kw)
        res = cal.predict(read_spectra(d / other))
        print(f"  PLS2 {name} ({cal.estimators[0].n_components} components): leave-one-"
              f"standard-out coverage {loo_cov:.2f}, flagged {loo_flag:.2f}; "
              f"{other.split('_')[0]} flagged {_flag_rate(res):.2f} ({_codes(res)})")


def real_study(folder: Path) -> None:
    """Print the real-data figures (datasets under ``folder``)."""
    aromatics(folder)
    styrene(folder)
    print("\nPLS2 from the same standards (leave-one-out CV)")
    pls_real(folder)
