"""CLS calibration checked against textbook worked examples, numpy and statistical theory."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats

from bandsolve.calibration.build import build_cls
from bandsolve.cls import CLSRegressor
from bandsolve.concentrations import ConcentrationTable
from bandsolve.errors import ModelError
from bandsolve.spectra import SpectralSet

# Harvey, D. "Analytical Chemistry 2.1" (open textbook), chapter 10 problem citing Blanco et al.:
# Ti(IV) and V(V) standards at five wavelengths and a mixture; least squares answer
# Ti ≈ 32.05 ppm, V ≈ 57.30 ppm.
TI = [0.895, 0.884, 0.694, 0.481, 0.173]
V = [0.326, 0.497, 0.528, 0.512, 0.374]
MIX = [0.651, 0.743, 0.665, 0.547, 0.314]


def test_harvey_titanium_vanadium_worked_example():
    model = CLSRegressor().fit(np.array([TI, V]), np.array([[63.1, 0.0], [0.0, 96.4]]))
    ti, v = model.predict(np.array([MIX]))[0]
    assert ti == pytest.approx(32.05, abs=0.01)  # Harvey (Blanco et al.) answer
    assert v == pytest.approx(57.30, abs=0.01)


def test_dichromate_permanganate_two_wavelength_example():
    # Common textbook example of simultaneous determination (e.g. Skoog, Holler & Crouch,
    # "Principles of Instrumental Analysis"): 1.0e-3 M dichromate A440 = 0.374, A545 = 0.009;
    # 2.0e-4 M permanganate A440 = 0.019, A545 = 0.475; mixture 0.405 and 0.712.
    model = CLSRegressor().fit(np.array([[0.374, 0.009], [0.019, 0.475]]),
                               np.array([[1.0e-3, 0.0], [0.0, 2.0e-4]]))
    detail = model.predict_detail(np.array([[0.405, 0.712]]))
    cr, mn = detail.concentrations[0]
    assert cr == pytest.approx(1.008e-3, rel=2e-3)
    assert mn == pytest.approx(2.96e-4, rel=2e-3)
    # Two wavelengths for two unknowns: no residual degrees of freedom, so no SE (never made up).
    assert np.all(np.isnan(detail.standard_errors)) and "degrees of freedom" in detail.note


@settings(max_examples=40, deadline=None)
@given(st.integers(2, 4), st.integers(0, 2**31 - 1), st.booleans())
def test_cls_equals_numpy_lstsq(m, rs, intercept):
    # Reference: numpy.linalg.lstsq solves the same two least-squares problems (K, then c).
    rng = np.random.default_rng(rs)
    p, n = 30, 12
    C = rng.uniform(0, 1, (n, m))
    A = C @ rng.uniform(0, 1, (m, p)) + rng.normal(0, 0.01, (n, p))
    model = CLSRegressor(fit_intercept=intercept).fit(A, C)
    design = np.column_stack([C, np.ones(n)]) if intercept else C
    K_ref = np.linalg.lstsq(design, A, rcond=None)[0]
    np.testing.assert_allclose(model.pure_spectra_, K_ref[:m], rtol=1e-8, atol=1e-10)
    a = rng.uniform(0, 1, (3, p))
    background = K_ref[m] if intercept else 0.0
    c_ref = np.linalg.lstsq(K_ref[:m].T, (a - background).T, rcond=None)[0].T
    np.testing.assert_allclose(model.predict(a), c_ref, rtol=1e-8, atol=1e-10)


def test_baseline_terms_remove_offset_and_slope(three_bands):
    axis, K = three_bands
    c_true = np.array([0.3, 0.5, 0.2])
    a = c_true @ K + 0.05 + 1e-4 * (axis - 550)  # sloping baseline (theory: exactly modelled)
    model = CLSRegressor.from_pure_spectra(K, baseline="linear", wavelengths=axis)
    np.testing.assert_allclose(model.predict(a[None, :])[0], c_true, atol=1e-10)
    plain = CLSRegressor.from_pure_spectra(K)
    assert np.max(np.abs(plain.predict(a[None, :])[0] - c_true)) > 0.01


def test_spread_matches_noise_limited_covariance(three_bands):
    # With true pure spectra and white noise σ, Cov(ĉ) = σ²(KKᵀ)⁻¹ (Gauss–Markov theorem).
    axis, K = three_bands
    rng = np.random.default_rng(7)
    sigma, reps = 0.003, 4000
    c_true = np.array([0.4, 0.3, 0.6])
    A = c_true @ K + rng.normal(0, sigma, (reps, axis.size))
    est = CLSRegressor.from_pure_spectra(K).predict(A)
    theory = sigma**2 * np.linalg.inv(K @ K.T)
    emp = np.cov(est, rowvar=False)
    # Sampling SD of a variance estimate from 4000 draws is ~2.2 %; allow 8 %.
    np.testing.assert_allclose(np.diag(emp), np.diag(theory), rtol=0.08)
    np.testing.assert_allclose(est.mean(axis=0), c_true, atol=4 * np.sqrt(np.diag(theory)).max()
                               / np.sqrt(reps) * 10)


@pytest.mark.slow
def test_prediction_intervals_cover_truth(three_bands):
    # 95 % intervals from the reported SE (METHODS §1: s²(KKᵀ)⁻¹ with a t quantile) must
    # cover the truth 95 % ± 2 % of the time on simulated data (coverage definition).
    axis, K = three_bands
    rng = np.random.default_rng(11)
    sigma, hits, total = 0.004, 0, 0
    labels = ["a [mg/L]", "b [mg/L]", "c [mg/L]"]
    for _ in range(120):
        C = rng.uniform(0, 1, (15, 3))
        A = C @ K + rng.normal(0, sigma, (15, axis.size))
        ids = [f"s{i}" for i in range(15)]
        cal = build_cls(SpectralSet(axis, A, ids), ConcentrationTable(ids, labels, C))
        Ct = rng.uniform(0, 1, (10, 3))
        At = Ct @ K + rng.normal(0, sigma, (10, axis.size))
        res = cal.predict(SpectralSet(axis, At, [f"t{i}" for i in range(10)]))
        for k, lab in enumerate(labels):
            inside = (res[f"{lab} low95"] <= Ct[:, k]) & (Ct[:, k] <= res[f"{lab} high95"])
            hits += int(inside.sum())
            total += len(inside)
    assert abs(hits / total - 0.95) <= 0.02


def test_unmodelled_absorber_is_flagged(three_bands):
    axis, K = three_bands
    rng = np.random.default_rng(3)
    C = rng.uniform(0, 1, (20, 3))
    ids = [f"s{i}" for i in range(20)]
    labels = ["a", "b", "c"]
    cal = build_cls(SpectralSet(axis, C @ K + rng.normal(0, 0.002, (20, axis.size)), ids),
                    ConcentrationTable(ids, labels, C))
    Ct = rng.uniform(0.2, 0.8, (40, 3))
    clean = Ct @ K + rng.normal(0, 0.002, (40, axis.size))
    foreign = clean + 0.1 * np.exp(-0.5 * ((axis - 660) / 15) ** 2)
    ok = cal.predict(SpectralSet(axis, clean, [f"u{i}" for i in range(40)]))
    bad = cal.predict(SpectralSet(axis, foreign, [f"u{i}" for i in range(40)]))
    assert (ok["flag_codes"].str.contains("residual")).mean() <= 0.1  # α = 0.01 limit
    assert (bad["flag_codes"].str.contains("residual")).all()


def test_collinear_design_refused():
    C = np.array([[1.0, 2.0], [2.0, 4.0], [3.0, 6.0]])
    with pytest.raises(ModelError, match="collinear"):
        CLSRegressor().fit(np.random.default_rng(0).uniform(size=(3, 10)), C)


def test_t_quantile_used_for_intervals(three_bands):
    axis, K = three_bands
    rng = np.random.default_rng(5)
    C = rng.uniform(0, 1, (12, 3))
    ids = [f"s{i}" for i in range(12)]
    cal = build_cls(SpectralSet(axis, C @ K + rng.normal(0, 0.002, (12, axis.size)), ids),
                    ConcentrationTable(ids, ["a", "b", "c"], C))
    res = cal.predict(SpectralSet(axis, C[:2] @ K, ["x", "y"]))
    half = (res["a high95"] - res["a low95"]) / 2
    # Student t with p − m residual degrees of freedom, or with the n calibration samples
    # behind the error scale where that scale widened the SE.
    lim = cal.limits.models[0]
    dof = axis.size - 3 if lim.error_scale[0] == 1 else lim.error_scale_dof
    t = stats.t.ppf(0.975, dof)
    np.testing.assert_allclose(half, t * res["a SE"], rtol=1e-12)
