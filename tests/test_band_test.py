"""The band-shaped residual test of CLS models (bandsolve.band_test)."""

from __future__ import annotations

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.polynomial import legendre

from bandsolve.band_test import BAND_TERMS, band_basis
from bandsolve.cls import CLSRegressor

from .conftest import gaussian_bands

AXIS = np.linspace(400.0, 700.0, 151)
SIGMA = 0.003
LEVELS = (0.2, 0.4, 0.6, 0.8, 1.0)


def _pure(m: int) -> np.ndarray:
    return gaussian_bands(AXIS, np.linspace(450.0, 640.0, m), [38.0] * m)


@settings(max_examples=30, deadline=None)
@given(st.integers(1, 6), st.integers(0, 10**6))
def test_basis_is_orthonormal_smooth_and_orthogonal_to_the_model_spectra(m, seed):
    # Independent references: numpy.polynomial.legendre for the smooth space (every column is
    # a Legendre polynomial of degree < BAND_TERMS minus its projection on the model spectra,
    # so it lies in the span of both) and numpy's inner products for UᵀU = I and U ⟂ K.
    rng = np.random.default_rng(seed)
    K = _pure(m) + rng.normal(0, SIGMA, (m, AXIS.size))
    U = band_basis(AXIS, K)
    z = (AXIS - AXIS.mean()) / ((AXIS.max() - AXIS.min()) / 2)
    B = legendre.legvander(z, BAND_TERMS - 1)
    assert 3 <= U.shape[1] <= BAND_TERMS
    np.testing.assert_allclose(U.T @ U, np.eye(U.shape[1]), atol=1e-10)
    np.testing.assert_allclose(K @ U, 0.0, atol=1e-10)
    both = np.column_stack([B, K.T])
    inside = both @ np.linalg.lstsq(both, U, rcond=None)[0]
    np.testing.assert_allclose(inside, U, atol=1e-8)


def test_too_short_an_axis_has_no_band_test():
    p = 2 * BAND_TERMS + 1  # fewer than k + 2·terms points with k = 2 spectra
    assert band_basis(AXIS[:p], _pure(2)[:, :p]).shape == (p, 0)
    assert band_basis(AXIS[:p + 1], _pure(2)[:, :p + 1]).shape[1] >= 3


def _fit(m: int, rng) -> tuple[CLSRegressor, np.ndarray]:
    C = np.vstack([np.eye(m)[k] * v for k in range(m) for v in LEVELS])
    A = C @ _pure(m) + rng.normal(0, SIGMA, (len(C), AXIS.size))
    return CLSRegressor(wavelengths=AXIS).fit(A, C), C


def test_band_ratio_equals_the_projection_of_the_residual_computed_by_numpy():
    # Uᵀ(x − bg) is used for Uᵀr; the reference builds r = x − K̂ᵀĉ with numpy's lstsq and
    # forms ‖Uᵀr‖²/d / [s²_cal(1 + h)] / limit; the residual ratio is the larger of that and
    # the F ratio over its limit (module docstring).
    rng = np.random.default_rng(4)
    model, C = _fit(3, rng)
    x = rng.uniform(0.1, 1.0, (50, 3)) @ _pure(3) + rng.normal(0, SIGMA, (50, AXIS.size))
    Kh, U = model.pure_spectra_, model.band_basis_
    c = np.linalg.lstsq(Kh.T, x.T, rcond=None)[0].T
    r = x - c @ Kh
    h = np.einsum("ij,jk,ik->i", c, np.linalg.inv(C.T @ C), c)
    s2 = model.s2_cal_ * (1 + h)
    full = (r**2).sum(1) / (AXIS.size - 3) / s2 / model.residual_limit_
    band = ((r @ U) ** 2).sum(1) / U.shape[1] / s2 / model.band_limit_
    np.testing.assert_allclose(model.predict_detail(x).residual_ratio, np.maximum(full, band),
                               rtol=1e-8)


def _absorber(m: int) -> np.ndarray:
    """A band at 630 nm whose part outside the span of the pure spectra has an RMS equal to
    the noise SD (the only part any residual test can see)."""
    band = gaussian_bands(AXIS, (630.0,), (18.0,))[0]
    K = _pure(m)
    outside = band - K.T @ np.linalg.lstsq(K.T, band, rcond=None)[0]
    return band * SIGMA / np.sqrt(np.mean(outside**2))


def test_absorber_at_the_noise_level_is_caught_with_six_analytes_from_pure_standards():
    # Six analytes from five pure standards each: K̂'s error doubles a mixture's residual
    # variance (h ≈ 1), and the omnibus test alone catches an absorber at the noise level in
    # about 90 % of mixtures (noncentral F power, Scharf & Friedlander 1994). With the band
    # test: ≥ 95 % caught, clean mixtures flagged at most α = 1 % (upper end of the exact
    # binomial 99.9 % range, scipy.stats.binom) pooled over 20 calibrations.
    from scipy import stats

    rng = np.random.default_rng(21)
    caught = omnibus = clean = total = 0
    for _ in range(20):
        model, _ = _fit(6, rng)
        Cn = rng.uniform(0.1, 1.0, (200, 6))
        noise = rng.normal(0, SIGMA, (200, AXIS.size))
        good = model.predict_detail(Cn @ _pure(6) + noise)
        bad = model.predict_detail(Cn @ _pure(6) + noise + _absorber(6))
        clean += int((good.residual_ratio > 1).sum())
        caught += int((bad.residual_ratio > 1).sum())
        model.band_basis_ = None  # the omnibus test alone, at its α/2 limit
        omnibus += int((model.predict_detail(Cn @ _pure(6) + noise + _absorber(6))
                        .residual_ratio > 1).sum())
        total += 200
    assert caught / total >= 0.95, caught / total
    assert omnibus / total < 0.93  # the band test is what lifts it
    assert clean / total <= stats.binom.ppf(0.9995, total, 0.01) / total, clean / total


def test_the_model_record_names_the_band_limit_and_its_directions():
    # What a validation report needs to reproduce a flag: both limits and the band dimension,
    # in the limits record that inspect --json and the model file carry.
    from bandsolve.calibration.build import build_cls
    from bandsolve.concentrations import ConcentrationTable
    from bandsolve.spectra import SpectralSet

    rng = np.random.default_rng(2)
    C = np.vstack([np.eye(3)[k] * v for k in range(3) for v in LEVELS])
    ids = [f"s{i}" for i in range(len(C))]
    A = C @ _pure(3) + rng.normal(0, SIGMA, (len(C), AXIS.size))
    cal = build_cls(SpectralSet(AXIS, A, ids), ConcentrationTable(ids, ["a", "b", "c"], C))
    record = cal.describe()["limits"]["models"][0]
    est = cal.estimators[0]
    assert record["residual_parameters"] == {"band_limit": est.band_limit_,
                                             "band_directions": est.band_basis_.shape[1]}
    assert "band-shaped" in record["residual_method"]


def test_a_model_saved_before_the_band_test_loads_without_it():
    # A CLS state written before schema 7 lacks band_basis and band_limit: it loads with no
    # band test, and its residual ratio is the F ratio over the stored limit alone (the
    # CLSRegressor Notes formula, computed here with numpy).
    rng = np.random.default_rng(9)
    model, C = _fit(3, rng)
    record = model.state_record()
    del record["band_basis"], record["band_limit"]
    old = CLSRegressor.from_state_record(model.get_params(), record)
    assert old.band_basis_ is None and np.isnan(old.band_limit_)
    x = rng.uniform(0.1, 1.0, (20, 3)) @ _pure(3) + rng.normal(0, SIGMA, (20, AXIS.size))
    Kh = old.pure_spectra_
    c = np.linalg.lstsq(Kh.T, x.T, rcond=None)[0].T
    r = x - c @ Kh
    h = np.einsum("ij,jk,ik->i", c, np.linalg.inv(C.T @ C), c)
    expected = (r**2).sum(1) / (AXIS.size - 3) / (old.s2_cal_ * (1 + h)) / old.residual_limit_
    np.testing.assert_allclose(old.predict_detail(x).residual_ratio, expected, rtol=1e-8)


def test_band_ratio_with_an_intercept_and_baseline_terms_matches_numpy():
    # With an intercept (background bg) and a linear baseline, the residual is
    # r = x − bg − [K̂; 1; z]ᵀ·coef with coef from numpy's lstsq; U is orthogonal to all the
    # rows, so ‖Uᵀr‖² = ‖Uᵀ(x − bg)‖² (module docstring).
    rng = np.random.default_rng(12)
    C = rng.uniform(0.1, 1.0, (25, 3))
    A = C @ _pure(3) + 0.01 + rng.normal(0, SIGMA, (25, AXIS.size))
    model = CLSRegressor(fit_intercept=True, baseline="linear", wavelengths=AXIS).fit(A, C)
    x = rng.uniform(0.1, 1.0, (30, 3)) @ _pure(3) + 0.02 + rng.normal(0, SIGMA, (30, AXIS.size))
    aug, bg, U = model.augmented_spectra_, model.background_, model.band_basis_
    coef = np.linalg.lstsq(aug.T, (x - bg).T, rcond=None)[0].T
    r = x - bg - coef @ aug
    np.testing.assert_allclose(((r @ U) ** 2).sum(1), (((x - bg) @ U) ** 2).sum(1),
                               rtol=1e-9)
    band = ((r @ U) ** 2).sum(1) / U.shape[1]
    lev = model.predict_detail(x).leverage
    full = (r**2).sum(1) / (AXIS.size - aug.shape[0]) / (model.s2_cal_ * (1 + lev))
    expected = np.maximum(full / model.residual_limit_,
                          band / (model.s2_cal_ * (1 + lev)) / model.band_limit_)
    np.testing.assert_allclose(model.predict_detail(x).residual_ratio, expected, rtol=1e-7)
