"""Spectral-noise floor of PLS standard errors (second-difference noise estimate)."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays

from bandsolve.calibration.build_pls import build_pls
from bandsolve.concentrations import ConcentrationTable
from bandsolve.merit.statistics import noise_by_differences
from bandsolve.spectra import SpectralSet

from .conftest import gaussian_bands

finite = st.floats(-1e3, 1e3, allow_nan=False, allow_infinity=False)


@settings(max_examples=60, deadline=None)
@given(arrays(np.float64, st.tuples(st.integers(1, 6), st.integers(3, 40)), elements=finite),
       arrays(np.float64, 6, elements=finite), arrays(np.float64, 6, elements=finite))
def test_differences_ignore_straight_baselines(E, offset, slope):
    # A second difference annihilates a + b·j exactly (finite-difference identity), so a
    # straight baseline added to each residual spectrum leaves the estimate unchanged.
    n, p = E.shape
    j = np.arange(p, dtype=float)
    shifted = E + offset[:n, None] + slope[:n, None] * j
    scale = 1.0 + np.max(np.abs(shifted)) ** 2
    np.testing.assert_allclose(noise_by_differences(shifted), noise_by_differences(E),
                               atol=1e-9 * scale)


def test_differences_recover_known_heteroscedastic_noise():
    # Independent noise whose SD grows along the axis: E[(Δ²e)²] = σ²_{j−1} + 4σ²_j + σ²_{j+1}
    # (variance of a sum of independent terms); with a slowly varying σ the estimate is σ²_j.
    rng = np.random.default_rng(3)
    sd = np.linspace(0.002, 0.006, 200)
    band = np.exp(-0.5 * ((np.arange(200) - 90) / 30.0) ** 2)
    E = rng.normal(0, 1, (4000, 200)) * sd + rng.normal(0, 0.01, (4000, 1)) * band
    est = noise_by_differences(E)
    # The smooth band (SD 0.01, 2-5× the noise) barely leaks through. Each column's value
    # comes from 4000 squares (relative SD ≈ 0.03), so 12 % per column (4 SD) and 2 % on
    # the average ratio.
    ratio = est[5:-5] / sd[5:-5] ** 2
    assert np.all(np.abs(ratio - 1) < 0.12), ratio
    assert abs(ratio.mean() - 1) < 0.02, ratio.mean()
    # A residual-norm estimate (np.var per column) would count the band as noise.
    assert np.var(E, axis=0)[90] > 5 * sd[90] ** 2


@pytest.mark.parametrize("mode", ["pls1", "pls2"])
def test_noise_floor_matches_monte_carlo_propagation(mode):
    # The floor Σ_j b_j² σ²_j is the variance of bᵀx from white noise of SD σ (variance of a
    # linear combination; Faber & Kowalski 1997, J. Chemom. 11, 181, the ‖b‖²σ²_Δx term).
    # Checked against the empirical variance of predictions of one mixture measured 4000 times.
    axis = np.linspace(400.0, 700.0, 121)
    K = gaussian_bands(axis, (480, 530, 590), (40, 45, 40))
    rng = np.random.default_rng(8)
    C = rng.uniform(0, 1, (40, 3))
    ids = [f"c{i}" for i in range(40)]
    cal = build_pls(SpectralSet(axis, C @ K + rng.normal(0, 0.003, (40, 121)), ids),
                    ConcentrationTable(ids, ["a", "b", "c"], C), cv="interleaved:5",
                    components=3, mode=mode)
    floor = np.concatenate([lim.noise_floor for lim in cal.limits.models])
    b = np.vstack([est.regression_vectors() for est in cal.estimators])
    repeats = np.full(3, 0.5) @ K + rng.normal(0, 0.003, (4000, 121))
    empirical = np.var(repeats @ b.T, axis=0, ddof=1)
    np.testing.assert_allclose(floor, empirical, rtol=0.15)
    # The SE of a prediction is never below √((1 + h)·floor).
    res = cal.predict(SpectralSet(axis, repeats[:50], [f"r{i}" for i in range(50)]))
    se = res[[f"{a} SE" for a in "abc"]].to_numpy()
    assert np.all(se >= np.sqrt(floor) * (1 - 1e-12))


@pytest.mark.slow
def test_few_calibrations_cover_far_below_nominal():
    # With σ_e from RMSECV alone, a calibration whose 25 samples happen to give a low RMSECV
    # has intervals that cover well under 95 % (χ² spread of a variance from 25 values:
    # P(s²/σ² < 0.62) ≈ 0.1 for 20 df, scipy.stats.chi2). The floor removes that tail:
    # over 30 calibrations at most 2 have any analyte covering under 0.85 of 200 new samples.
    axis = np.linspace(400.0, 700.0, 121)
    K = gaussian_bands(axis, (480, 530, 590), (40, 45, 40))
    rng = np.random.default_rng(19)
    low = 0
    for _ in range(30):
        C = rng.uniform(0.1, 1.0, (25, 3))
        ids = [f"c{i}" for i in range(25)]
        cal = build_pls(SpectralSet(axis, C @ K + rng.normal(0, 0.003, (25, 121)), ids),
                        ConcentrationTable(ids, ["a", "b", "c"], C), cv="interleaved:5")
        Ct = rng.uniform(0.1, 1.0, (200, 3))
        res = cal.predict(SpectralSet(axis, Ct @ K + rng.normal(0, 0.003, (200, 121)),
                                      [f"t{i}" for i in range(200)]))
        lo = res[[f"{a} low95" for a in "abc"]].to_numpy()
        hi = res[[f"{a} high95" for a in "abc"]].to_numpy()
        low += int((((lo <= Ct) & (Ct <= hi)).mean(axis=0) < 0.85).any())
    assert low <= 2, low
