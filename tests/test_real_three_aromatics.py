"""Real UV-Vis data: three aromatic compounds in ethanol (shared/datasets, MIT licence).

Source: Jia, Frydrych, Sobolev, ... Grzybowski, "Robot-assisted reconstruction of reaction
hyperspaces and complex reaction networks they contain" (data via the authors' public
repository; see shared/datasets/three-aromatics-ethanol/SOURCE.md). Skipped when absent.
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from scipy import stats

from bandsolve.calibration.build import build_cls
from bandsolve.io import read_concentrations, read_spectra

from .conftest import dataset, left_out_standards_covered


@pytest.fixture(scope="module")
def data():
    folder = dataset("three-aromatics-ethanol")
    return (read_spectra(folder / "standards_spectra.csv"),
            read_concentrations(folder / "standards_concentrations.csv"),
            read_spectra(folder / "mixture_replicates_spectra.csv"),
            read_spectra(folder / "blank_replicates_spectra.csv"))


def test_standards_follow_beers_law_at_band_maximum(data):
    spectra, table, _, _ = data
    for k, label in enumerate(table.analytes):
        rows = [i for i, s in enumerate(table.sample_ids)
                if table.values[i, k] > 0 or not table.values[i].any()]
        conc = table.values[rows, k]
        top = rows[int(np.argmax(conc))]
        j = int(np.argmax(spectra.values[top]))  # band maximum of the strongest standard
        fit = stats.linregress(conc, spectra.values[rows, j])
        # Beer's law (A = εbc) is linear in c; R² ≥ 0.99 is the usual acceptance (common
        # practice for calibration linearity).
        assert fit.rvalue**2 >= 0.99, (label, spectra.axis[j], fit.rvalue**2)


@pytest.mark.slow
def test_replicate_mixtures_agree_and_residuals_near_blank_noise(data):
    spectra, table, mixtures, blanks = data
    cal = build_cls(spectra, table, intercept=True)
    res = cal.predict(mixtures)
    conc = res[list(table.analytes)].to_numpy()
    assert np.all(conc > 0)
    # Five replicate spectra of one mixture: estimates agree within a few percent (RSD ≤ 5 %).
    rsd = conc.std(axis=0, ddof=1) / conc.mean(axis=0)
    assert np.all(rsd <= 0.05), rsd
    # Spectral residual RMS compared with the noise of 54 repeated blanks (same instrument).
    est = cal.estimators[0]
    detail = est.predict_detail(cal.preprocessor.transform(mixtures.values))
    rms = np.sqrt(detail.residual_ss / detail.dof)
    blank_sd = blanks.values.std(axis=0, ddof=1).mean()
    assert np.all(rms <= 3 * blank_sd), (rms, blank_sd)



def test_left_out_standards_are_covered_as_a_95_percent_interval_promises(data):
    # Each of the 15 real standards is left out, the model rebuilt from the other 14 and the
    # left-out one predicted: 45 results with a stated truth. The count inside the 95 %
    # intervals must not be below the 1 % point of Binomial(45, 0.95) (scipy.stats.binom):
    # an honest interval fails this in under 1 % of datasets.
    spectra, table, _, _ = data
    inside = left_out_standards_covered(spectra, table)
    assert inside.sum() >= stats.binom.ppf(0.01, inside.size, 0.95), inside.mean()


def test_real_blanks_intervals_cover_zero_and_few_are_flagged(data):
    # 54 real ethanol blank replicates, truth 0 for every analyte. Coverage of zero at least
    # the 1 % point of Binomial(162, 0.95) (scipy.stats.binom); flagged blanks below the
    # 99.9 % point of Binomial(54, 0.05): the two residual tests at α/2 each plus the
    # one-sided concentration tests at α = 0.01 per analyte allow about 4 % (Bonferroni),
    # so more would mean the limits do not hold on real spectra.
    spectra, table, _, blanks = data
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        cal = build_cls(spectra, table)
    res = cal.predict(blanks)
    lows = res[[f"{a} low95" for a in table.analytes]].to_numpy(float)
    highs = res[[f"{a} high95" for a in table.analytes]].to_numpy(float)
    covered = (lows <= 0) & (highs >= 0)
    assert covered.sum() >= stats.binom.ppf(0.01, covered.size, 0.95), covered.mean()
    flagged = int((res["flag_codes"] != "").sum())
    assert flagged <= stats.binom.ppf(0.999, len(res), 0.05), flagged
