"""Non-negative CLS: concentrations constrained to be ≥ 0 at prediction."""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy.optimize import lsq_linear, nnls

from bandsolve.cli import main
from bandsolve.cls import CLSRegressor

from .conftest import gaussian_bands

AXIS = np.linspace(400.0, 700.0, 61)
K = gaussian_bands(AXIS, (470, 540, 610), (40, 45, 40))


def _fitted(rng, **params) -> CLSRegressor:
    C = rng.uniform(0.1, 1.0, (30, 3))
    return CLSRegressor(wavelengths=AXIS, **params).fit(C @ K + 0.002 * rng.normal(size=(30, 61)),
                                                        C)


def test_equals_scipy_nnls_on_the_fitted_spectra():
    rng = np.random.default_rng(30)
    model = _fitted(rng, non_negative=True)
    # Two analytes absent: noise alone pushes their unconstrained estimates below zero half
    # the time.
    C = np.column_stack([rng.uniform(0.2, 1.0, 400), np.zeros(400), np.zeros(400)])
    X = C @ K + 0.002 * rng.normal(size=(400, 61))
    d = model.predict_detail(X)
    # Reference library: scipy.optimize.nnls on the fitted pure spectra, spectrum by spectrum.
    ref = np.array([nnls(model.pure_spectra_.T, x)[0] for x in X])
    np.testing.assert_allclose(d.concentrations, ref, rtol=0, atol=1e-10)
    at_zero = d.concentrations == 0.0
    assert 0.2 < at_zero[:, 1:].mean() < 0.8
    # A bound estimate has no symmetric interval: its SE is missing, the others' are not.
    assert np.isnan(d.standard_errors[at_zero]).all()
    assert np.isfinite(d.standard_errors[~at_zero]).all()
    assert "held at the zero bound" in d.note
    # Theory: the residual sum of squares is that of the constrained fit.
    resid = X - d.concentrations @ model.pure_spectra_
    np.testing.assert_allclose(d.residual_ss, (resid**2).sum(axis=1), rtol=1e-8)


def test_baseline_terms_stay_free():
    rng = np.random.default_rng(31)
    model = _fitted(rng, non_negative=True, baseline="offset")
    C = np.column_stack([rng.uniform(0.2, 1.0, 100), np.zeros((100, 2))])
    offsets = rng.normal(0.0, 0.05, 100)  # negative and positive baseline shifts
    X = C @ K + offsets[:, None] + 0.002 * rng.normal(size=(100, 61))
    d = model.predict_detail(X)
    # Reference library: scipy.optimize.lsq_linear, analytes ≥ 0 and the offset free.
    A = model.augmented_spectra_.T
    ref = np.array([lsq_linear(A, x, bounds=([0, 0, 0, -np.inf], np.inf), method="bvls",
                               tol=1e-14).x for x in X])
    np.testing.assert_allclose(d.concentrations, ref[:, :3], rtol=0, atol=1e-9)
    np.testing.assert_allclose(d.baseline[:, 0], ref[:, 3], rtol=0, atol=1e-9)
    assert (d.baseline[:, 0] < 0).any()


def test_positive_samples_equal_the_unconstrained_model():
    rng = np.random.default_rng(32)
    C = rng.uniform(0.1, 1.0, (30, 3))
    A = C @ K + 0.002 * rng.normal(size=(30, 61))
    a = CLSRegressor(wavelengths=AXIS).fit(A, C)
    b = CLSRegressor(wavelengths=AXIS, non_negative=True).fit(A, C)
    X = rng.uniform(0.3, 1.0, (50, 3)) @ K
    # Theory: when no bound is active the constrained minimizer is the unconstrained one.
    np.testing.assert_allclose(b.predict(X), a.predict(X), rtol=0, atol=1e-12)
    assert b.predict_detail(X).note == a.predict_detail(X).note


def test_build_and_predict_from_the_command_line(tmp_path):
    rng = np.random.default_rng(33)
    C = rng.uniform(0.1, 1.0, (20, 3))
    X = C @ K + 0.002 * rng.normal(size=(20, 61))
    header = "sample," + ",".join(f"{a:g}" for a in AXIS)
    ids = [f"s{i}" for i in range(20)]
    (tmp_path / "cal.csv").write_text(header + "\n" + "\n".join(
        f"{i}," + ",".join(f"{v:.6f}" for v in row) for i, row in zip(ids, X, strict=True)))
    (tmp_path / "conc.csv").write_text("sample,a [mg/L],b [mg/L],c [mg/L]\n" + "\n".join(
        f"{i}," + ",".join(f"{v:.6f}" for v in row) for i, row in zip(ids, C, strict=True)))
    absent = np.column_stack([np.full(30, 0.5), np.zeros((30, 2))]) @ K
    absent += 0.002 * rng.normal(size=absent.shape)
    (tmp_path / "new.csv").write_text(header + "\n" + "\n".join(
        f"u{i}," + ",".join(f"{v:.6f}" for v in row) for i, row in enumerate(absent)))
    model = str(tmp_path / "nn.bsm")
    assert main(["build", "--method", "cls", "--non-negative", "--spectra",
                 str(tmp_path / "cal.csv"), "--concentrations", str(tmp_path / "conc.csv"),
                 "--out", model, "--quiet"]) == 0
    out = str(tmp_path / "res.csv")
    assert main(["predict", model, str(tmp_path / "new.csv"), "--out", out]) in (0, 4)
    res = pd.read_csv(out)
    assert (res["b [mg/L]"] >= 0).all() and (res["b [mg/L]"] == 0).any()
    zero = res["b [mg/L]"] == 0
    assert res.loc[zero, "b [mg/L] SE"].isna().all()
    assert res.loc[zero, "flag_codes"].str.contains("no_se").all()


def test_non_negative_is_a_cls_option_only(tmp_path, capsys):
    code = main(["build", "--method", "pls", "--non-negative", "--spectra", "x.csv",
                 "--concentrations", "c.csv", "--out", str(tmp_path / "m.bsm")])
    assert code == 2
    assert "--non-negative applies only to --method cls" in capsys.readouterr().err
