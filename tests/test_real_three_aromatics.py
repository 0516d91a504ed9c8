"""Real UV-Vis data: three aromatic compounds in ethanol (shared/datasets, MIT licence).

Source: Jia, Frydrych, Sobolev, ... Grzybowski, "Robot-assisted reconstruction of reaction
hyperspaces and complex reaction networks they contain" (data via the authors' public
repository; see shared/datasets/three-aromatics-ethanol/SOURCE.md). Skipped when absent.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from bandsolve.calibration.build import build_cls
from bandsolve.io import read_concentrations, read_spectra

from .conftest import dataset


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
