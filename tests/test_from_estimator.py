"""A fitted scikit-learn estimator (alone or in a Pipeline) becomes a bandsolve model file
with limits and figures of merit, predicting exactly what the estimator predicts."""

from __future__ import annotations

import numpy as np
import pytest
from sklearn.cross_decomposition import PLSRegression
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler

from bandsolve.calibration.from_estimator import calibration_from_estimator
from bandsolve.calibration.modelfile import load_model, save_model
from bandsolve.cls import CLSRegressor
from bandsolve.concentrations import ConcentrationTable
from bandsolve.errors import ModelError
from bandsolve.pls import PLSRegressor
from bandsolve.preprocess import SpectralPreprocessor
from bandsolve.spectra import SpectralSet

from .conftest import gaussian_bands

AXIS = np.linspace(400.0, 700.0, 121)
K = gaussian_bands(AXIS, (480, 530, 590), (40, 45, 40))
LABELS = ("a [mg/L]", "b [mg/L]", "c [mg/L]")


def _data(n=30, random_state=12345):
    rng = np.random.default_rng(random_state)
    C = rng.uniform(0.1, 1.0, (n, 3))
    X = C @ K + rng.normal(0, 2e-3, (n, AXIS.size))
    ids = [f"s{i:02d}" for i in range(n)]
    return X, C, SpectralSet(AXIS, X, ids), ConcentrationTable(ids, LABELS, C)


def _check(cal, estimator, X, tmp_path):
    # Reference: the user's own fitted estimator (scikit-learn predict).
    np.testing.assert_allclose(cal.detail(X).concentrations,
                               np.asarray(estimator.predict(X)).reshape(len(X), -1),
                               rtol=1e-8, atol=1e-10)
    assert cal.merit is not None and np.isfinite(cal.limits.models[0].residual)
    path = tmp_path / "m.bsm"
    save_model(cal, path)
    back = load_model(path)
    np.testing.assert_allclose(back.detail(X).concentrations, cal.detail(X).concentrations)


def test_pls_inside_a_pipeline_with_bandsolve_preprocessing(tmp_path):
    X, C, spectra, table = _data()
    pipe = make_pipeline(SpectralPreprocessor(axis=AXIS, window=[(420.0, 680.0)]),
                         PLSRegressor(n_components=3)).fit(X, C)
    cal = calibration_from_estimator(pipe, spectra, table)
    _check(cal, pipe, X, tmp_path)
    assert np.isfinite(cal.limits.models[0].t2)  # Hotelling T² limit set from the data
    assert "Pipeline" in cal.provenance["from_estimator"]


def test_cls_estimator(tmp_path):
    X, C, spectra, table = _data()
    est = CLSRegressor(fit_intercept=True).fit(X, C)
    cal = calibration_from_estimator(est, spectra, table)
    _check(cal, est, X, tmp_path)


def test_scikit_learn_pls_for_one_analyte(tmp_path):
    X, C, spectra, _ = _data()
    ids = list(spectra.sample_ids)
    one = ConcentrationTable(ids, LABELS[:1], C[:, :1])
    est = PLSRegression(n_components=3, scale=False).fit(X, C[:, 0])
    cal = calibration_from_estimator(est, spectra, one)
    _check(cal, est, X, tmp_path)


def test_steps_that_cannot_be_recorded_are_refused():
    X, C, spectra, table = _data()
    pipe = make_pipeline(StandardScaler(), PLSRegressor(n_components=2)).fit(X, C)
    with pytest.raises(ModelError, match="StandardScaler"):
        calibration_from_estimator(pipe, spectra, table)


def test_an_estimator_fitted_on_other_data_is_refused():
    _, _, spectra, table = _data()
    other, C2, _, _ = _data(random_state=7)
    est = PLSRegressor(n_components=3).fit(other, C2)
    with pytest.raises(ModelError, match="predicts up to"):
        calibration_from_estimator(est, spectra, table)
