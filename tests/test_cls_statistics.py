"""CLS statistics: closed-form leave-one-out, K̂'s error counted once, leverage inside ranges.

Expected values come from refitting with numpy (leave-one-out by definition), from the theory
in METHODS §1 (``E[rᵀr] = σ²(1 + h_c)(p − m)``; Haaland & Thomas 1988), and from scipy's F
distribution.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays
from scipy import stats

from bandsolve.calibration.build import build_cls, build_cls_from_absorptivities
from bandsolve.cls import CLSRegressor
from bandsolve.cls_loo import error_model
from bandsolve.concentrations import ConcentrationTable
from bandsolve.spectra import SpectralSet
from tests.conftest import gaussian_bands

AXIS = np.linspace(400.0, 700.0, 121)


def _bands(m: int) -> np.ndarray:
    return gaussian_bands(AXIS, np.linspace(440, 660, m), [35.0] * m)


@settings(max_examples=25, deadline=None)
@given(st.integers(1, 4), st.integers(0, 2**31 - 1), st.booleans(),
       st.sampled_from(["none", "offset", "linear"]))
def test_closed_form_leave_one_out_equals_refits(m, rs, intercept, baseline):
    # Leave-one-out by definition (Cook & Weisberg 1982): refit K̂ without sample i with
    # numpy.linalg.lstsq and predict sample i with its baseline rows.
    rng = np.random.default_rng(rs)
    n, p = 3 * m + 4, AXIS.size
    C = rng.uniform(0.1, 1, (n, m))
    A = C @ _bands(m) + 0.01 + rng.normal(0, 0.003, (n, p))
    model = CLSRegressor(fit_intercept=intercept, baseline=baseline, wavelengths=AXIS).fit(A, C)
    z = (AXIS - AXIS.mean()) / ((AXIS.max() - AXIS.min()) / 2)
    rows = [z**k for k in range({"none": 0, "offset": 1, "linear": 2}[baseline])]
    dof = p - m - len(rows)
    loo = model.leave_one_out().concentrations
    z = np.empty((n, m))
    for i in range(n):
        keep = np.arange(n) != i
        D = np.column_stack([C, np.ones(n)]) if intercept else C
        coef = np.linalg.lstsq(D[keep], A[keep], rcond=None)[0]
        aug = np.vstack([coef[:m], *rows])
        a = A[i] - (coef[m] if intercept else 0.0)
        sol = np.linalg.lstsq(aug.T, a, rcond=None)[0]
        np.testing.assert_allclose(loo[i], sol[:m], rtol=1e-7, atol=1e-9)
        r = a - aug.T @ sol
        se = np.sqrt(r @ r / dof * np.diag(np.linalg.inv(aug @ aug.T))[:m])
        z[i] = (sol[:m] - C[i]) / se
        ctil = np.r_[sol[:m], 1.0] if intercept else sol[:m]
        h = ctil @ np.linalg.inv(D[keep].T @ D[keep]) @ ctil
        expected = (r @ r / dof) / (model.s2_cal_ * (1 + h))  # METHODS §1 F ratio
        assert model.cv_f_ratios_[i] == pytest.approx(expected, rel=1e-6)
    # Error model: without a concentration term it is the RMS of the studentized
    # leave-one-out errors, at least 1 (Birge 1932).
    scale, relative, dof_scale = model.error_scale()
    birge = np.maximum(1, np.sqrt(np.mean(z**2, axis=0)))
    for k in range(z.shape[1]):
        se_k = np.ones(n)
        assert error_model(z[:, k], se_k, np.zeros(n))[0] == pytest.approx(birge[k], rel=1e-9)
    assert np.all(scale >= 1) and np.all(relative >= 0)
    assert dof_scale == n


@pytest.mark.parametrize(("kappa", "gamma"), [(1.0, 0.0), (1.5, 0.0), (1.0, 0.04),
                                              (1.3, 0.03)])
def test_error_model_recovers_a_known_variance_function(kappa, gamma):
    # Errors drawn from N(0, κ²SE² + γ²c²) (the model's definition); with 20,000 samples the
    # moment estimates must land near the truth (Carroll & Ruppert 1988, ch. 3: consistent).
    rng = np.random.default_rng(11)
    n = 20_000
    se = rng.uniform(0.5, 2.0, n)
    c = rng.uniform(0.0, 100.0, n)
    e = rng.normal(0, 1, n) * np.sqrt(kappa**2 * se**2 + gamma**2 * c**2)
    k_hat, g_hat = error_model(e, se, c)
    assert k_hat == pytest.approx(kappa, abs=0.04)
    assert g_hat == pytest.approx(gamma, abs=0.004)


def test_box_leverage_is_the_largest_inside_the_ranges():
    # The largest c̃ᵀ(CᵀC)⁻¹c̃ over a dense grid of in-range compositions (numpy) must not
    # exceed the stored value, and is reached at a corner (a convex quadratic; theory).
    rng = np.random.default_rng(4)
    C = rng.uniform(0.2, 1.0, (9, 3))
    for intercept in (False, True):
        model = CLSRegressor(fit_intercept=intercept).fit(C @ _bands(3) + rng.normal(
            0, 1e-3, (9, AXIS.size)), C)
        grid = np.stack(np.meshgrid(*[np.linspace(lo, hi, 11) for lo, hi in
                                      zip(C.min(0), C.max(0), strict=True)]), -1).reshape(-1, 3)
        D = np.column_stack([grid, np.ones(len(grid))]) if intercept else grid
        Dc = np.column_stack([C, np.ones(9)]) if intercept else C
        h = np.einsum("ij,jk,ik->i", D, np.linalg.inv(Dc.T @ Dc), D)
        ranges = np.column_stack([C.min(0), C.max(0)])
        assert model.leverage_limit(1.0, ranges) == pytest.approx(h.max(), rel=1e-9)
        assert model.leverage_limit(2.0, ranges) == pytest.approx(2 * h.max(), rel=1e-9)


def test_absorptivity_model_residual_limit_is_the_f_quantile():
    # Residual variance over blank noise from r replicate blanks on p channels is referred to
    # F(p − m, (r − 1)p) (ratio of independent variance estimates; METHODS §10).
    K = _bands(3)
    rng = np.random.default_rng(2)
    r = 12
    blanks = SpectralSet(AXIS, rng.normal(0, 0.002, (r, AXIS.size)),
                         [f"b{i}" for i in range(r)])
    eps = SpectralSet(AXIS, K, ["a [mg/L]", "b [mg/L]", "c [mg/L]"], quantity="absorptivity")
    cal = build_cls_from_absorptivities(eps, 1.0, blanks=blanks)
    p, m = AXIS.size, 3
    assert cal.estimators[0].residual_limit == pytest.approx(
        stats.f.ppf(0.99, p - m, (r - 1) * p), rel=1e-12)


def _standards(m: int, levels=(0.2, 0.4, 0.6, 0.8, 1.0)):
    C = np.vstack([np.eye(m)[k] * v for k in range(m) for v in levels])
    return C, [f"s{i}" for i in range(len(C))]


@pytest.mark.slow
@pytest.mark.parametrize("m", [2, 6])
def test_pure_standards_intervals_and_flags_on_in_range_mixtures(m):
    # CLS from pure standards (5 levels each), white noise. Theory (METHODS §1): the sample's
    # own residual variance estimates σ²(1 + h_c), so 95 % intervals cover 95 % and the
    # α = 0.01 residual test fires on about 1 % of in-range mixtures; no in-range mixture is
    # extrapolation under Beer's-law additivity, so leverage never fires.
    rng = np.random.default_rng(100 + m)
    K, sigma = _bands(m), 0.003
    labels = [f"a{k}" for k in range(m)]
    C, ids = _standards(m)
    hits = total = resid = lev = 0
    for _ in range(60):
        cal = build_cls(SpectralSet(AXIS, C @ K + rng.normal(0, sigma, (len(C), AXIS.size)),
                                    ids), ConcentrationTable(ids, labels, C))
        Ct = rng.uniform(0.2, 1.0, (20, m))
        res = cal.predict(SpectralSet(AXIS, Ct @ K + rng.normal(0, sigma, (20, AXIS.size)),
                                      [f"t{i}" for i in range(20)]))
        for k, lab in enumerate(labels):
            hits += int(((res[f"{lab} low95"] <= Ct[:, k])
                         & (Ct[:, k] <= res[f"{lab} high95"])).sum())
            total += 20
        resid += int(res["flag_codes"].str.contains("residual").sum())
        lev += int(res["flag_codes"].str.contains("leverage").sum())
    assert 0.93 <= hits / total <= 0.97
    assert resid / (60 * 20) <= 0.03
    assert lev == 0


def test_model_with_nothing_to_check_against_flags_every_result():
    # An absorptivity model without replicate blanks has no residual limit: every result
    # says so with its own code (README flag table), and a batch counts them as flagged.
    eps = SpectralSet(AXIS, _bands(3), ["a [mg/L]", "b [mg/L]", "c [mg/L]"],
                      quantity="absorptivity")
    with pytest.warns(UserWarning, match="no residual limit"):
        cal = build_cls_from_absorptivities(eps, 1.0)
    strong = np.exp(-0.5 * ((AXIS - 600) / 20) ** 2)  # an interferent it cannot see
    res = cal.predict(SpectralSet(AXIS, np.array([[0.2, 0.3, 0.4]]) @ _bands(3) + strong,
                                  ["x"]))
    assert res["flag_codes"][0].split(";") == ["unchecked"]


def test_error_model_keeps_no_concentration_term_for_white_noise():
    # Under the white-noise model γ = 0; the likelihood-ratio gate keeps a chance γ > 0 in
    # about RELATIVE_ERROR_ALPHA = 5 % of 15-standard calibrations (Self & Liang 1987
    # boundary reference). 400 draws: at most 10 % (binomial 5 % + 3.4 SD).
    rng = np.random.default_rng(12)
    c = np.tile([0.0, 50.0, 100.0, 200.0, 300.0], 3)
    kept = sum(error_model(rng.normal(0, 1, 15), np.ones(15), c)[1] > 0 for _ in range(400))
    assert kept / 400 <= 0.10, kept


@settings(max_examples=80)
@given(arrays(np.float64, (9, 2), elements=st.floats(-10, 10)),
       arrays(np.float64, 9, elements=st.floats(-10, 10)))
def test_two_column_nnls_matches_scipy(A, b):
    # The error model's two-column non-negative least squares (all four active sets) against
    # scipy.optimize.nnls (Lawson & Hanson 1974): the same minimum of ‖Aθ − b‖.
    from scipy.optimize import nnls

    from bandsolve.variance_function import nnls2

    ours = nnls2(A, b)
    ref = nnls(A, b)[0]
    assert np.all(ours >= 0)
    scale = 1.0 + np.linalg.norm(b) ** 2 + np.linalg.norm(A) ** 2
    assert np.linalg.norm(A @ ours - b) ** 2 <= np.linalg.norm(A @ ref - b) ** 2 + 1e-9 * scale


def _pure_standards_with_gain(rng, m=4, gain=0.01):
    """5 pure standards per analyte, each measurement with its own gain (SD ``gain``)."""
    C = np.vstack([np.eye(m)[k] * v for k in range(m) for v in (0.2, 0.4, 0.6, 0.8, 1.0)])
    A = (1 + rng.normal(0, gain, (len(C), 1))) * (C @ _bands(m)) + rng.normal(
        0, 0.003, (len(C), AXIS.size))
    ids = [f"s{i}" for i in range(len(C))]
    return SpectralSet(AXIS, A, ids), ConcentrationTable(ids, [f"a{k}" for k in range(m)], C)


def test_relative_error_takes_the_degrees_of_freedom_of_the_standards_that_hold_it():
    # γ² is estimated from the standards that contain the analyte (5 of 20 pure standards:
    # the others carry no information about it), so the t quantile takes that count, not 20
    # (a variance from k values has about k degrees of freedom; Student 1908).
    rng = np.random.default_rng(31)
    for _ in range(20):
        cal = build_cls(*_pure_standards_with_gain(rng, gain=0.03))
        lim = cal.limits.models[0]
        if any(g > 0 for g in lim.relative_error):
            assert lim.error_scale_dof == 5
            return
    pytest.fail("a 3 % gain scatter never showed as a relative error")


def test_pure_standards_with_a_gain_scatter_are_covered():
    # Each measurement its own gain (SD 1 %), standards and new mixtures alike: the relative
    # error the standards show, on the degrees of freedom behind it, covers new mixtures
    # (coverage definition, 40 calibrations × 60 mixtures; with 20 degrees of freedom it was
    # 0.915).
    rng = np.random.default_rng(32)
    hit = total = 0
    for _ in range(40):
        cal = build_cls(*_pure_standards_with_gain(rng))
        conc = rng.uniform(0.1, 1.0, (60, 4))
        A = (1 + rng.normal(0, 0.01, (60, 1))) * (conc @ _bands(4)) + rng.normal(
            0, 0.003, (60, AXIS.size))
        res = cal.predict(SpectralSet(AXIS, A, [f"u{i}" for i in range(60)]))
        for k in range(4):
            hit += int(((res[f"a{k} low95"] <= conc[:, k]) & (conc[:, k] <= res[f"a{k} high95"])
                        ).sum())
        total += conc.size
    assert hit / total >= 0.93, hit / total
