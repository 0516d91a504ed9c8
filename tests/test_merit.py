"""Tests of bandsolve.merit against theory, reference libraries and real blank/standard spectra."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays
from scipy import stats
from sklearn.metrics import mean_squared_error, r2_score

from bandsolve import merit
from bandsolve.errors import DataError, ModelFileError

from .conftest import dataset

WL = np.linspace(220.0, 400.0, 61)


def _band(centre: float, width: float) -> np.ndarray:
    return np.exp(-0.5 * ((WL - centre) / width) ** 2)


PURE = np.stack([_band(260, 15), _band(290, 20), _band(330, 18)])  # AU per unit conc.


#: Absorptivity-like values: zero, or between 1e-6 and 5 in magnitude. Values like 1e-172 are
#: no spectrum, and their squares underflow, which tests float limits, not the identity.
SPECTRUM_VALUES = st.one_of(st.just(0.0), st.floats(1e-6, 5), st.floats(-5, -1e-6))


@settings(max_examples=60, deadline=None)
@given(arrays(np.float64, (12, 4), elements=SPECTRUM_VALUES), st.integers(0, 3))
def test_sensitivity_is_norm_of_net_analyte_signal(s, k):
    # Both sides lose about cond(S)·eps of accuracy; past 1e4 the comparison would test the
    # rounding of an ill-conditioned system, not the identity (common practice).
    if np.linalg.cond(s) > 1e4:
        return
    # s*_k = (I - S_-k S_-k⁺) s_k (Lorber 1986) written with numpy's pinv; its norm equals
    # SEN_k = 1/sqrt([(SᵀS)⁻¹]_kk) (Lorber, Faber & Kowalski 1997).
    others = np.delete(s, k, axis=1)
    expected = s[:, k] - others @ np.linalg.pinv(others) @ s[:, k]
    np.testing.assert_allclose(merit.cls_net_analyte_signal(s, k), expected, atol=1e-8)
    sen = merit.cls_figures(s.T, 4, sigma_x=1.0).sensitivity[k]
    assert sen == pytest.approx(np.linalg.norm(expected), rel=1e-8)
    assert sen == pytest.approx(1 / np.sqrt(np.linalg.inv(s.T @ s)[k, k]), rel=1e-8)


def test_selectivity_orthogonal_and_collinear_spectra():
    # Orthogonal pure spectra: NAS = whole spectrum, SEL = 1 (Lorber 1986).
    orth = np.zeros((2, 10))
    orth[0, :5], orth[1, 5:] = 1.0, 2.0
    np.testing.assert_allclose(merit.cls_figures(orth, 2, 0.01).selectivity, [1.0, 1.0])
    # Two spectra with cosine ρ: SEL = sqrt(1 - ρ²) (geometry of the NAS, Lorber 1986),
    # falling toward 0 as the second band moves onto the first.
    sels = []
    for centre in (340.0, 300.0, 270.0, 262.0):
        pair = np.stack([_band(260, 15), _band(centre, 15)])
        rho = pair[0] @ pair[1] / np.linalg.norm(pair[0]) / np.linalg.norm(pair[1])
        sel = merit.cls_figures(pair, 2, 0.01).selectivity
        np.testing.assert_allclose(sel, np.sqrt(1 - rho**2), rtol=1e-6)
        sels.append(sel[0])
    assert np.all(np.diff(sels) < 0) and sels[-1] < 0.15


def test_lod_detection_rates_with_known_spectra():
    # CLS prediction ĉ = (KKᵀ)⁻¹Ka written here. At the reported LOD (h0 = 0) a sample is
    # above the decision limit 1.645 σ_ĉ in 95 % of replicates and blanks in 5 %
    # (α = β = 0.05, IUPAC: Olivieri et al. 2006). 20000 replicates: binomial SD ≤ 0.16 %.
    rng = np.random.default_rng(99)
    sigma = 0.002
    fig = merit.cls_figures(PURE, 3, sigma)
    sd_c = sigma * np.sqrt(np.diag(np.linalg.inv(PURE @ PURE.T)))  # Cov = σ²(KKᵀ)⁻¹
    decision = 1.645 * sd_c
    for truth, target in ((fig.lod, 0.95), (np.zeros(3), 0.05)):
        a = truth @ PURE + sigma * rng.normal(size=(20000, WL.size))
        c_hat = np.linalg.solve(PURE @ PURE.T, PURE @ a.T).T
        rates = np.mean(c_hat > decision, axis=0)
        np.testing.assert_allclose(rates, target, atol=0.03)
    np.testing.assert_allclose(fig.loq / fig.lod, 10 / 3.3)


def test_lod_with_estimated_spectra_includes_blank_leverage():
    # K̂ from 4 noisy standards per analyte with an intercept row (h0 = 0.5);
    # Cov(ĉ) ≈ σ²(1+h0)(KKᵀ)⁻¹ at the blank (METHODS §1, Monte Carlo-confirmed there; IUPAC
    # form of Olivieri et al. 2006). Rates must be 95 % and 5 % ± 3 %; leaving h0 out would
    # give about 91 % and 9 % (normal theory), so the test can tell.
    rng = np.random.default_rng(5)
    sigma, reps = 0.002, 3000
    levels = np.array([0.25, 0.5, 0.75, 1.0])
    design = np.zeros((12, 4))
    for j in range(3):
        design[4 * j : 4 * j + 4, j] = levels
    design[:, 3] = 1.0  # intercept (background row)
    h0 = merit.blank_leverage(design, [0, 0, 0, 1])
    assert h0 == pytest.approx(np.linalg.inv(design.T @ design)[3, 3])  # definition
    lod = merit.cls_figures(PURE, 3, sigma, h0=h0).lod
    decision = 1.645 * sigma * np.sqrt((1 + h0) * np.diag(np.linalg.inv(PURE @ PURE.T)))
    background = 0.05 * np.ones(WL.size)
    hits_lod, hits_blank = np.zeros(3), np.zeros(3)
    for _ in range(reps):
        a_cal = design[:, :3] @ PURE + background + sigma * rng.normal(size=(12, WL.size))
        k_hat = np.linalg.lstsq(design, a_cal, rcond=None)[0]
        k, k0 = k_hat[:3], k_hat[3]
        for truth, hits in ((lod, hits_lod), (np.zeros(3), hits_blank)):
            a = truth @ PURE + background + sigma * rng.normal(size=WL.size)
            hits += np.linalg.solve(k @ k.T, k @ (a - k0)) > decision
    np.testing.assert_allclose(hits_lod / reps, 0.95, atol=0.03)
    np.testing.assert_allclose(hits_blank / reps, 0.05, atol=0.03)


def test_inverse_figures_match_cls_for_pseudo_inverse():
    # For b_k = rows of K⁺ᵀ (the CLS estimator written as an inverse model), 1/‖b_k‖ equals
    # the CLS SEN_k (Lorber 1986; Faber 1998). LOD = 3.3 sqrt(σx²‖b‖²(1+h0) + h0σy²)
    # (Olivieri et al. 2006).
    b = np.linalg.pinv(PURE)  # (p, m)
    cls_fig = merit.cls_figures(PURE, 3, 0.002)
    inv_fig = merit.inverse_figures(b, 0.002, pure_spectra=PURE)
    np.testing.assert_allclose(inv_fig.sensitivity, cls_fig.sensitivity, rtol=1e-10)
    np.testing.assert_allclose(inv_fig.selectivity, cls_fig.selectivity, rtol=1e-10)
    np.testing.assert_allclose(inv_fig.lod, cls_fig.lod, rtol=1e-10)
    fig = merit.inverse_figures(b[:, 0], 0.002, h0=0.1, sigma_y=0.01)
    norm_b = np.linalg.norm(b[:, 0])
    assert fig.lod[0] == pytest.approx(3.3 * np.sqrt(0.002**2 * norm_b**2 * 1.1 + 0.1 * 1e-4))
    assert np.isnan(fig.selectivity[0])
    # Without pure spectra, s_k ≈ X_cᵀy_c/(y_cᵀy_c) recovers a pure band from single-analyte data.
    y = np.linspace(0.1, 1.0, 8)
    fig_xy = merit.inverse_figures(b[:, 0], 0.002, X_calibration=np.outer(y, PURE[0]),
                                   y_calibration=y)
    assert fig_xy.selectivity[0] == pytest.approx(cls_fig.selectivity[0], rel=1e-10)


def test_noise_estimates():
    # Pooled per-channel SD (ddof=1) combined as RMS; compare with numpy directly and with the
    # true σ of simulated white noise (chi-square precision, common practice).
    blanks = 0.003 * np.random.default_rng(4).normal(size=(54, 200))
    noise = merit.noise_from_blanks(blanks)
    assert noise.sigma == pytest.approx(np.sqrt(np.mean(np.std(blanks, axis=0, ddof=1) ** 2)))
    assert noise.sigma == pytest.approx(0.003, rel=0.02)
    assert noise.origin == "blank replicates" and float(noise) == noise.sigma
    res = merit.noise_from_residuals(blanks, dof=54 * 200)
    assert res.sigma == pytest.approx(np.sqrt(np.mean(blanks**2))) and res.origin == "residuals"
    with pytest.raises(DataError, match="at least 2"):
        merit.noise_from_blanks(blanks[:1])


def test_regression_statistics_against_reference_libraries():
    rng = np.random.default_rng(8)
    y = rng.uniform(1, 10, 25)
    y_pred = 0.2 + 0.97 * y + rng.normal(0, 0.3, 25)
    r = merit.regression_statistics(y, y_pred)
    e = y_pred - y
    # scikit-learn metrics (mean_squared_error, r2_score).
    assert r.rmse == pytest.approx(np.sqrt(mean_squared_error(y, y_pred)))
    assert r.r2 == pytest.approx(r2_score(y, y_pred))
    assert r.bias == pytest.approx(e.mean())
    # Bias t-test equals the one-sample t-test of the errors (scipy.stats.ttest_1samp).
    ref = stats.ttest_1samp(e, 0.0)
    assert r.bias_t == pytest.approx(abs(ref.statistic)) and r.bias_p == pytest.approx(ref.pvalue)
    # RMSEP² = bias² + SEP²(n-1)/n (METHODS §5); RPD = SD(y)/SEP (Williams 1987, from memory).
    assert r.rmse**2 == pytest.approx(r.bias**2 + r.sep**2 * 24 / 25)
    assert r.rpd == pytest.approx(np.std(y, ddof=1) / r.sep)
    # Slope/intercept CIs from scipy.stats.linregress standard errors, t on n-2 df.
    lr = stats.linregress(y, y_pred)
    t = stats.t.ppf(0.975, 23)
    np.testing.assert_allclose(r.slope_ci, [lr.slope - t * lr.stderr, lr.slope + t * lr.stderr])
    half = t * lr.intercept_stderr
    np.testing.assert_allclose(r.intercept_ci, [lr.intercept - half, lr.intercept + half])
    # Joint test of slope 1, intercept 0 as a general linear hypothesis
    # F = (β̂-β₀)ᵀXᵀX(β̂-β₀)/(2 s²) (common practice), written independently here.
    x = np.column_stack([np.ones(25), y])
    beta = np.linalg.lstsq(x, y_pred, rcond=None)[0]
    s2 = np.sum((y_pred - x @ beta) ** 2) / 23
    d = beta - np.array([0.0, 1.0])
    f = d @ x.T @ x @ d / (2 * s2)
    assert r.line_f == pytest.approx(f) and r.line_p == pytest.approx(stats.f.sf(f, 2, 23))
    # RMSEC uses n - n_parameters degrees of freedom (a stated convention).
    rc = merit.regression_statistics(y, y_pred, n_parameters=3)
    assert rc.rmse_kind == "RMSEC" and rc.rmse == pytest.approx(np.sqrt(np.sum(e**2) / 22))
    assert json.loads(json.dumps(rc.to_dict()))["slope_ci"] == list(rc.slope_ci)


@settings(max_examples=40, deadline=None)
@given(arrays(np.float64, 10, elements=st.floats(-1e3, 1e3)),
       arrays(np.float64, 10, elements=st.floats(-10, 10)))
def test_rmsep_decomposition_identity(y, e):
    if np.ptp(y) < 1e-3:
        return
    r = merit.regression_statistics(y, y + e)
    # RMSEP² = bias² + SEP²(n-1)/n for any data (METHODS §5, algebraic identity).
    assert r.rmse**2 == pytest.approx(r.bias**2 + r.sep**2 * 9 / 10, rel=1e-9, abs=1e-9)


def test_univariate_calibration_on_simulated_bands():
    # Analyte 0 alone absorbs near 240 nm; the chosen line there has slope = its absorptivity
    # (Beer's law) and LOD = 3.3 s_blank/slope (IUPAC, common practice).
    rng = np.random.default_rng(12)
    pure = np.stack([_band(240, 10), _band(300, 25)])
    c = rng.uniform(0.1, 1.0, size=(20, 2))
    a = c @ pure + 0.001 * rng.normal(size=(20, WL.size))
    uni = merit.univariate_calibration(WL, a, c, sigma_x=0.001, pure_spectra=pure)
    assert 225 <= uni[0].wavelength <= 250
    j = int(np.argmin(np.abs(WL - uni[0].wavelength)))
    assert uni[0].slope == pytest.approx(pure[0, j], abs=0.01)
    assert uni[0].lod == pytest.approx(3.3 * 0.001 / uni[0].slope)
    assert uni[0].lod_origin == "blank SD"
    free = merit.univariate_calibration(WL, a, c)
    assert free[0].lod_origin == "residual SD" and 225 <= free[0].wavelength <= 250


def _example_figures() -> merit.FiguresOfMerit:
    fig = merit.cls_figures(np.vstack([PURE, np.ones(WL.size)]), 3, merit.NoiseEstimate(
        0.002, "blank replicates", 100), h0=0.2)
    y = np.linspace(0, 1, 10)
    stat = merit.regression_statistics(y, y + 0.01 * np.sin(np.arange(10)), n_parameters=4)
    return merit.figures_of_merit(fig, ["dye A", "dye B", "dye C"], "mg/L",
                                  calibration=[stat] * 3, cross_validation=[stat] * 3)


def test_figures_of_merit_table_round_trip_and_summary():
    fom = _example_figures()
    assert fom == merit.FiguresOfMerit.from_dict(json.loads(json.dumps(fom.to_dict())))
    text = fom.summary()
    assert "LOD [mg/L]" in text and "SEN [AU per mg/L]" in text and "dye B" in text
    frame = fom.to_frame()
    assert list(frame.index) == ["dye A", "dye B", "dye C"]
    np.testing.assert_allclose(frame["gamma"] * frame["gamma_inv"], 1.0)
    assert frame["univariate_lod"].isna().all()
    with pytest.raises(ModelFileError, match="damaged"):
        merit.FiguresOfMerit.from_dict({"method": "CLS"})
    with pytest.raises(DataError, match="analytes"):
        merit.figures_of_merit(merit.cls_figures(PURE, 3, 0.002), ["a", "b"], "mg/L")


def test_real_blanks_and_standards_give_sensible_lods():
    DATA = dataset("three-aromatics-ethanol")
    spectra = pd.read_csv(DATA / "standards_spectra.csv", index_col=0)
    conc = pd.read_csv(DATA / "standards_concentrations.csv", index_col=0).loc[spectra.index]
    blanks = pd.read_csv(DATA / "blank_replicates_spectra.csv", index_col=0)
    design = np.column_stack([conc.to_numpy(), np.ones(len(conc))])
    k_aug = np.linalg.lstsq(design, spectra.to_numpy(), rcond=None)[0]  # K = (CᵀC)⁻¹CᵀA
    noise = merit.noise_from_blanks(blanks.to_numpy())
    assert blanks.shape[0] == 54 and 0 < noise.sigma < 0.05
    h0 = merit.blank_leverage(design, [0, 0, 0, 1])
    fig = merit.cls_figures(k_aug[:3], 3, noise, h0=h0)
    lowest = conc.to_numpy()[conc.to_numpy() > 0].min()  # 50 µmol/L
    # Detection limits must be positive, finite and below the lowest standard (the standards
    # were all visible, SOURCE.md); LOD < LOQ by construction (IUPAC, Olivieri et al. 2006).
    assert np.all(np.isfinite(fig.lod)) and np.all(fig.lod > 0) and np.all(fig.lod < lowest)
    assert np.all(fig.lod < fig.loq) and np.all((fig.selectivity > 0) & (fig.selectivity <= 1))
