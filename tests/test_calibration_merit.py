"""Figures of merit of built calibrations, checked against numpy/scikit-learn references,
a Monte Carlo detection-rate experiment and real blank replicates."""

from __future__ import annotations

import itertools

import numpy as np
import pytest
from sklearn.cross_decomposition import PLSRegression

from bandsolve.calibration.build import build_cls, build_cls_from_absorptivities
from bandsolve.calibration.build_pls import build_pls
from bandsolve.calibration.merit import attach_merit, calibration_merit
from bandsolve.calibration.modelfile import load_model, save_model
from bandsolve.concentrations import ConcentrationTable
from bandsolve.errors import DataError
from bandsolve.merit import FiguresOfMerit
from bandsolve.spectra import SpectralSet

from .conftest import dataset

AXIS = np.linspace(400.0, 700.0, 151)
K = np.vstack([np.exp(-0.5 * ((AXIS - c) / w) ** 2)  # broad overlapping bands, AU per mg/L
               for c, w in ((480, 40), (530, 45), (590, 40))])
LABELS = ("A [mg/L]", "B [mg/L]", "C [mg/L]")
SIGMA = 0.003
DESIGN = np.array(list(itertools.product([0.1, 0.4, 0.7, 1.0], repeat=3)))  # 4³ mixtures


def _sets(rng, conc=DESIGN, n_blanks=30):
    ids = [f"s{i}" for i in range(len(conc))]
    x = conc @ K + SIGMA * rng.standard_normal((len(conc), AXIS.size))
    blanks = SpectralSet(AXIS, SIGMA * rng.standard_normal((n_blanks, AXIS.size)),
                         [f"b{i}" for i in range(n_blanks)])
    return SpectralSet(AXIS, x, ids), ConcentrationTable(ids, LABELS, conc), blanks


def _blinds(n, k=10):
    return [(np.setdiff1d(np.arange(n), np.arange(j, n, k)), np.arange(j, n, k))
            for j in range(k)]


@pytest.mark.slow
def test_cls_figures_match_numpy_references():
    rng = np.random.default_rng(1)
    spectra, table, blanks = _sets(rng)
    cal = build_cls(spectra, table, intercept=True)
    fom = calibration_merit(cal, spectra, table, blanks=blanks)
    X, C = spectra.values, DESIGN
    n, m = C.shape
    D = np.column_stack([C, np.ones(n)])
    coef = np.linalg.lstsq(D, X, rcond=None)[0]  # K̂ = (DᵀD)⁻¹DᵀA (Haaland & Thomas 1988)
    k_hat, bg = coef[:m], coef[m]
    sen = 1 / np.sqrt(np.diag(np.linalg.inv(k_hat @ k_hat.T)))  # Lorber 1986
    sigma = np.sqrt(np.var(blanks.values, axis=0, ddof=1).mean())  # Olivieri et al. 2006
    h0 = np.linalg.inv(D.T @ D)[m, m]  # c0ᵀ(DᵀD)⁻¹c0 with c0 = (0, 0, 0, 1), Olivieri 2006
    fitted = np.linalg.lstsq(k_hat.T, (X - bg).T, rcond=None)[0].T
    rmsec = np.sqrt(np.sum((fitted - C) ** 2, axis=0) / (n - m - 1))  # n − m′ convention
    cv_pred = np.empty_like(C)
    for i in range(n):  # leave-one-out by refitting (the model uses a closed form)
        train = np.arange(n) != i
        c_tr = np.linalg.lstsq(D[train], X[train], rcond=None)[0]
        cv_pred[i] = np.linalg.lstsq(c_tr[:m].T, X[i] - c_tr[m], rcond=None)[0]
    rmsecv = np.sqrt(np.mean((cv_pred - C) ** 2, axis=0))  # √(PRESS/n), common practice
    frame = fom.to_frame()
    np.testing.assert_allclose(frame["sensitivity"], sen, rtol=1e-9)
    np.testing.assert_allclose(frame["sigma_x"], sigma, rtol=1e-12)
    np.testing.assert_allclose(frame["h0"], h0, rtol=1e-9)
    # IUPAC form for CLS: LOD = 3.3 σx √(1 + h0)/SEN (Olivieri et al. 2006; METHODS §5).
    np.testing.assert_allclose(frame["lod"], 3.3 * sigma * np.sqrt(1 + h0) / sen, rtol=1e-9)
    np.testing.assert_allclose(frame["rmsec"], rmsec, rtol=1e-8)
    np.testing.assert_allclose(frame["rmsecv"], rmsecv, rtol=1e-8)
    assert fom.method == "CLS" and fom.signal_unit == "AU"
    assert set(frame["unit"]) == {"mg/L"} and set(frame["sigma_x_origin"]) == {"blank replicates"}
    assert fom.condition_number == pytest.approx(np.linalg.cond(k_hat), rel=1e-9)
    assert np.all(np.isin(frame["univariate_wavelength"], AXIS))


def test_cls_lod_gives_iupac_detection_rates():
    rng = np.random.default_rng(2)
    spectra, table, blanks = _sets(rng)
    cal = build_cls(spectra, table)
    lod = calibration_merit(cal, spectra, table, blanks=blanks).to_frame()["lod"].to_numpy()
    reps = 3000
    noise = SIGMA * rng.standard_normal((reps, AXIS.size))
    blank_pred = cal.detail(noise).concentrations
    for k in range(3):
        at_lod = cal.detail(lod[k] * K[k] + noise).concentrations[:, k]
        decision = lod[k] / 2  # L_C = 1.645 σ(ĉ0) = LOD/2 for α = β = 0.05 (IUPAC 2006)
        # Olivieri et al. 2006: 5 % false positives at L_C, 95 % detections at the LOD; ±3 %
        # as the issue asks (the Monte Carlo SE is 0.4 %; σx from 30 blanks adds ~2 %).
        assert np.mean(blank_pred[:, k] > decision) == pytest.approx(0.05, abs=0.03)
        assert np.mean(at_lod > decision) == pytest.approx(0.95, abs=0.03)


def test_noise_from_residuals_is_labelled_and_close_to_the_truth():
    rng = np.random.default_rng(3)
    spectra, table, _ = _sets(rng)
    for cal in (build_cls(spectra, table), build_pls(spectra, table)):
        frame = calibration_merit(cal, spectra, table).to_frame()
        assert set(frame["sigma_x_origin"]) == {"residuals"}
        # E‖E‖² = σ² × dof for a least-squares fit (Haaland & Thomas 1988); ~9000 dof make
        # the estimate good to ~1 %, so 5 % is a safe margin.
        assert frame["sigma_x"].iloc[0] == pytest.approx(SIGMA, rel=0.05)


def test_pls_figures_match_scikit_learn():
    rng = np.random.default_rng(4)
    spectra, table, blanks = _sets(rng)
    cal = build_pls(spectra, table, cv="interleaved:10")
    a = cal.selection.models[0].n_components
    assert a == 3  # three independent absorbers (theory)
    X, C = spectra.values, DESIGN
    n = len(C)
    ref = PLSRegression(n_components=a, scale=False).fit(X, C)
    for given, blank in ((None, np.zeros(AXIS.size)), (blanks, blanks.values.mean(axis=0))):
        frame = calibration_merit(cal, spectra, table, blanks=given).to_frame()
        # SEN = 1/‖b‖ (Faber 1998) with b from scikit-learn's PLS as the reference.
        np.testing.assert_allclose(frame["sensitivity"], 1 / np.linalg.norm(ref.coef_, axis=1),
                                   rtol=1e-6)
        # h0 = 1/n + t0ᵀ(TᵀT)⁻¹t0 (Hoaglin & Welsch 1978), invariant to how scores are scaled.
        t, t0 = ref.x_scores_, ref.transform(blank[None, :])[0]
        h0 = 1 / n + t0 @ np.linalg.solve(t.T @ t, t0)
        np.testing.assert_allclose(frame["h0"], h0, rtol=1e-6)
    cv_pred = np.empty_like(C)
    for train, test in _blinds(n):
        cv_pred[test] = PLSRegression(a, scale=False).fit(X[train], C[train]).predict(X[test])
    rmsecv = np.sqrt(np.mean((cv_pred - C) ** 2, axis=0))  # √(PRESS/n), common practice
    np.testing.assert_allclose(frame["rmsecv"], rmsecv, rtol=1e-6)
    fitted = ref.predict(X)
    rmsec = np.sqrt(np.sum((fitted - C) ** 2, axis=0) / (n - a - 1))  # n − A − 1 (METHODS §5)
    np.testing.assert_allclose(frame["rmsec"], rmsec, rtol=1e-6)


def test_merit_round_trips_through_the_model_file(tmp_path):
    rng = np.random.default_rng(5)
    spectra, table, blanks = _sets(rng)
    for cal in (build_cls(spectra, table), build_pls(spectra, table)):
        # Models store merit at build time (σx from residuals); attach_merit returns a copy
        # with σx from the blanks and leaves the input untouched.
        before = cal.merit
        stored = attach_merit(cal, spectra, table, blanks=blanks)
        assert cal.merit == before
        assert FiguresOfMerit.from_dict(before.to_dict()) == before
        assert "σx from: residuals" in before.summary()
        path = tmp_path / f"{cal.method}.bsm"
        save_model(stored, path)
        loaded = load_model(path).merit
        assert loaded == stored.merit
        assert "σx from: blank replicates" in loaded.summary()


def test_absorptivity_model_needs_blank_replicates():
    rng = np.random.default_rng(6)
    eps = SpectralSet(AXIS, K, ["A", "B", "C"], quantity="absorptivity")
    cal = build_cls_from_absorptivities(eps, 1.0)
    with pytest.raises(DataError, match="blank"):
        calibration_merit(cal, None, None)
    blanks = SpectralSet(AXIS, SIGMA * rng.standard_normal((20, AXIS.size)),
                         [f"b{i}" for i in range(20)])
    frame = calibration_merit(cal, None, None, blanks=blanks).to_frame()
    # K known without error: h0 = 0 and SEN = 1/√[(KKᵀ)⁻¹]_kk (Lorber 1986).
    np.testing.assert_allclose(frame["h0"], 0.0)
    np.testing.assert_allclose(frame["sensitivity"], 1 / np.sqrt(np.diag(np.linalg.inv(K @ K.T))),
                               rtol=1e-9)


def test_missing_analyte_column_is_named():
    rng = np.random.default_rng(7)
    spectra, table, _ = _sets(rng)
    cal = build_cls(spectra, table)
    short = ConcentrationTable(table.sample_ids, LABELS[:2], DESIGN[:, :2], source="ref.csv")
    with pytest.raises(DataError, match=r"ref\.csv.*C \[mg/L\]"):
        calibration_merit(cal, spectra, short)


@pytest.mark.slow
def test_real_three_aromatics_with_54_blank_replicates():
    folder = dataset("three-aromatics-ethanol")
    from bandsolve.io import read_concentrations, read_spectra

    spectra = read_spectra(folder / "standards_spectra.csv")
    table = read_concentrations(folder / "standards_concentrations.csv")
    blanks = read_spectra(folder / "blank_replicates_spectra.csv")
    assert blanks.n_samples == 54
    cal = build_cls(spectra, table, intercept=True)
    fom = calibration_merit(cal, spectra, table, blanks=blanks)
    frame = fom.to_frame()
    lowest = np.asarray(table.values)[np.asarray(table.values) > 0].min()  # 50 µmol/L
    # All standards were visibly measured (SOURCE.md), so the LODs must lie below the lowest
    # standard; positive and finite by construction of the IUPAC form (Olivieri et al. 2006).
    assert np.all(np.isfinite(frame["lod"])) and np.all(frame["lod"] > 0)
    assert np.all(frame["lod"] < lowest) and np.all(frame["lod"] < frame["loq"])
    assert set(frame["unit"]) == {"mol/L"} and "LOD [mol/L]" in fom.summary()
    assert set(frame["sigma_x_origin"]) == {"blank replicates"}


def test_pls_selectivity_estimate_follows_the_iupac_definition_on_correlated_designs():
    # IUPAC SEL of an inverse model = SEN/‖s_k‖ with SEN = 1/‖b‖ and s_k the true pure spectrum
    # (Olivieri et al. 2006; Faber 1998), computed here with numpy from the true K. Analytes 1
    # and 2 are strongly correlated in the design; the stored estimate must stay within 5 %.
    rng = np.random.default_rng(30)
    base = rng.uniform(0.1, 1.0, 40)
    conc = np.column_stack([base, 0.8 * base + 0.2 * rng.uniform(0.1, 1.0, 40),
                            rng.uniform(0.1, 1.0, 40)])
    ids = [f"s{i}" for i in range(40)]
    spectra = SpectralSet(AXIS, conc @ K + 1e-4 * rng.standard_normal((40, AXIS.size)), ids)
    cal = build_pls(spectra, ConcentrationTable(ids, LABELS, conc), components=3)
    b = cal.estimators[0].regression_vectors()
    iupac = (1 / np.linalg.norm(b, axis=1)) / np.linalg.norm(K, axis=1)
    stored = cal.merit.to_frame()["selectivity"].to_numpy(float)
    np.testing.assert_allclose(stored, iupac, rtol=0.05)
    assert "estimate" in cal.merit.summary()
