"""PLS calibrations end to end: diagnostics flags, standard errors, the command line."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from bandsolve.calibration.build_pls import build_pls
from bandsolve.calibration.modelfile import load_model, save_model
from bandsolve.cli import main
from bandsolve.concentrations import ConcentrationTable
from bandsolve.spectra import SpectralSet

LABELS = ["a [mg/L]", "b [mg/L]", "c [mg/L]"]


def _simulate(rng, K, n, sigma=0.003, low=0.0, high=1.0):
    C = rng.uniform(low, high, (n, K.shape[0]))
    return C, C @ K + rng.normal(0, sigma, (n, K.shape[1]))


@pytest.fixture(scope="module")
def calibration():
    from .conftest import gaussian_bands

    axis = np.linspace(400.0, 700.0, 121)
    K = gaussian_bands(axis, (480, 530, 590), (40, 45, 40))
    rng = np.random.default_rng(42)
    C, A = _simulate(rng, K, 40)
    ids = [f"cal{i}" for i in range(40)]
    cal = build_pls(SpectralSet(axis, A, ids), ConcentrationTable(ids, LABELS, C),
                    cv="interleaved:8")
    return axis, K, rng, cal


def test_chosen_components_match_the_number_of_absorbers(calibration):
    # Three absorbers and white noise: rank-3 signal, so 3 components (Beer's law mixtures).
    *_, cal = calibration
    assert cal.selection.models[0].n_components == 3


def test_in_model_samples_rarely_flagged_foreign_band_always(calibration):
    axis, K, rng, cal = calibration
    _, A = _simulate(rng, K, 400, low=0.1, high=0.9)
    ids = [f"u{i}" for i in range(400)]
    clean = cal.predict(SpectralSet(axis, A, ids))
    foreign = A + 0.05 * np.exp(-0.5 * ((axis - 650) / 15) ** 2)
    bad = cal.predict(SpectralSet(axis, foreign, ids))
    # Limits at α = 0.01 (Box 1954 / Tracy, Young & Mason 1992): about 1 % false alarms.
    assert clean["flag_codes"].str.contains("residual").mean() <= 0.04
    assert clean["flag_codes"].str.contains("t2").mean() <= 0.04
    assert bad["flag_codes"].str.contains("residual").all()


def test_extrapolation_flagged_by_t2(calibration):
    axis, K, _, cal = calibration
    C = np.array([[3.0, 3.0, 3.0], [2.5, 0.0, 2.5]])  # far outside the 0–1 calibration box
    res = cal.predict(SpectralSet(axis, C @ K, ["far1", "far2"]))
    assert res["flag_codes"].str.contains("t2").all()
    assert res["flag_codes"].str.contains("above_range").all()


def _pooled_coverage(axis, K, rng, reps: int, n: int, **build) -> float:
    """Share of true concentrations inside the 95 % intervals over ``reps`` calibrations."""
    hits = total = 0
    for rep in range(reps):
        C, A = _simulate(rng, K, n)
        ids = [f"cal{i}" for i in range(n)]
        cal = build_pls(SpectralSet(axis, A, ids), ConcentrationTable(ids, LABELS, C),
                        cv="interleaved:5", **build)
        Ct, At = _simulate(rng, K, 100, low=0.1, high=0.9)
        res = cal.predict(SpectralSet(axis, At, [f"u{rep}-{i}" for i in range(100)]))
        for k, lab in enumerate(LABELS):
            inside = (res[f"{lab} low95"] <= Ct[:, k]) & (Ct[:, k] <= res[f"{lab} high95"])
            hits += int(inside.sum())
            total += inside.size
    return hits / total


def test_faber_bro_intervals_cover_truth(calibration):
    # Leverage form of Faber & Bro (2002) with the cross-validated error variance and a t
    # quantile: pooled over 25 independent calibrations, the 95 % intervals should cover the
    # truth 95 % ± 2.5 % of the time (definition of coverage; approximate method, so a wider
    # band).
    axis, K, _, _ = calibration
    coverage = _pooled_coverage(axis, K, np.random.default_rng(2024), 25, 40, components=3)
    assert abs(coverage - 0.95) <= 0.025, coverage


@pytest.mark.slow
@pytest.mark.parametrize("mode", ["pls1", "pls2"])
def test_intervals_hold_with_one_component_too_many(calibration, mode):
    # Over-fitting shrinks MSEC while the true error grows (METHODS §10); the SE from the
    # cross-validated error must still cover about 95 % (coverage definition) with 4
    # components for 3 absorbers, and with a small calibration (n = 20) where it matters.
    axis, K, _, _ = calibration
    coverage = _pooled_coverage(axis, K, np.random.default_rng(77), 30, 20, components=4,
                                mode=mode)
    assert 0.92 <= coverage <= 0.98, coverage


def test_save_load_gives_identical_predictions(calibration, tmp_path):
    axis, K, rng, cal = calibration
    _, A = _simulate(rng, K, 5)
    spectra = SpectralSet(axis, A, [f"u{i}" for i in range(5)])
    save_model(cal, tmp_path / "m.bsm")
    again = load_model(tmp_path / "m.bsm").predict(spectra)
    pd.testing.assert_frame_equal(cal.predict(spectra), again, check_exact=True)


def test_pls_build_and_predict_from_cli(calibration, tmp_path, capsys):
    axis, K, rng, _ = calibration
    C, A = _simulate(rng, K, 30)
    ids = [f"m{i:02d}" for i in range(30)]
    spectra = pd.DataFrame(A, columns=[f"{w:g}" for w in axis])
    spectra.insert(0, "sample", ids)
    spectra.to_csv(tmp_path / "s.csv", index=False)
    conc = pd.DataFrame(C, columns=LABELS)
    conc.insert(0, "sample", ids)
    conc.to_csv(tmp_path / "c.csv", index=False)
    model = str(tmp_path / "pls.bsm")
    assert main(["build", "--method", "pls", "--spectra", str(tmp_path / "s.csv"),
                 "--concentrations", str(tmp_path / "c.csv"), "--cv", "random:5",
                 "--max-components", "6", "--out", model]) == 0
    err = capsys.readouterr().err
    assert "RMSECV" in err and " *" in err  # the curve with the chosen count marked
    assert main(["predict", model, str(tmp_path / "s.csv"), "--out",
                 str(tmp_path / "r.csv")]) == 0
    res = pd.read_csv(tmp_path / "r.csv")
    assert np.max(np.abs(res[LABELS].to_numpy() - C)) < 0.05


@pytest.mark.parametrize(("n", "p", "method", "low", "high"), [
    (40, 121, "box", 0.025, 0.08),
    (200, 40, "box", 0.025, 0.08),
    (200, 40, "jackson-mudholkar", 0.01, 0.06),
])
def test_q_limit_false_alarm_rate(n, p, method, low, high):
    # At α = 0.05, new in-model samples should exceed the Q limit about 5 % of the time
    # (Box 1954; Jackson & Mudholkar 1979). Pooled over 4 calibrations × 1500 samples.
    from .conftest import gaussian_bands

    axis = np.linspace(400.0, 700.0, p)
    K = gaussian_bands(axis, (480, 530, 590), (40, 45, 40))
    rates = []
    for rs in range(4):
        rng = np.random.default_rng(100 + rs)
        C, A = _simulate(rng, K, n)
        ids = [f"c{i}" for i in range(n)]
        cal = build_pls(SpectralSet(axis, A, ids), ConcentrationTable(ids, LABELS, C),
                        components=3, cv="interleaved:8", q_limit=method, limit_alpha=0.05)
        _, At = _simulate(rng, K, 1500)
        res = cal.predict(SpectralSet(axis, At, [f"u{i}" for i in range(1500)]))
        rates.append((res["residual_ratio"] > 1).mean())
    assert low <= np.mean(rates) <= high, rates


@pytest.mark.parametrize("scale", [False, True])
def test_pls1_models_share_one_pass_over_the_spectra(calibration, scale):
    from bandsolve._scan import scan

    axis, K, rng, _ = calibration
    C, A = _simulate(rng, K, 40)
    ids = [f"cal{i}" for i in range(40)]
    cal = build_pls(SpectralSet(axis, A, ids), ConcentrationTable(ids, LABELS, C),
                    cv="interleaved:8", mode="pls1", scale=scale, components=3)
    _, X = _simulate(rng, K, 50)
    detail = cal.detail(X)
    # Theory: each PLS1 model's prediction is its own regression on the same spectra
    # (reference: the estimators' own predict, which reads the spectra model by model).
    expected = np.column_stack([est.predict(X) for est in cal.estimators])
    np.testing.assert_allclose(detail.concentrations, expected, rtol=0, atol=1e-10)
    # Identity: the products and weighted sums of squares are the same computed in one pass
    # (one weight column per column scale) or model by model.
    scans = [scan(X, est.scan_parts())[:2] for est in cal.estimators]
    apart = cal.kind.detail(cal.estimators, cal.limits.models, scans)
    np.testing.assert_allclose(detail.residual_ratio, apart.residual_ratio, rtol=1e-9)
    np.testing.assert_allclose(detail.t2_ratio, apart.t2_ratio, rtol=1e-9)


def test_q_limit_catches_a_band_at_the_noise_level_in_every_calibration():
    # Theory (Box 1954; Haaland & Thomas 1988 for the 1 + h factor): a band whose part
    # outside the model's span has an RMS equal to the noise σ adds p·σ² to a Q of about
    # (p − A)(1 + h)σ², about doubling it, far above a 99 % limit; clean samples exceed that
    # limit about 1 % of the time. Each of 4 calibrations of 25 random mixtures.
    from .conftest import gaussian_bands

    axis = np.linspace(400.0, 700.0, 151)
    K = gaussian_bands(axis, (450, 545, 640), (38, 38, 38))
    band = np.exp(-0.5 * ((axis - 630.0) / 18.0) ** 2)
    seen = band - K.T @ np.linalg.lstsq(K.T, band, rcond=None)[0]
    band *= 0.003 / np.sqrt(np.mean(seen**2))
    caught, false = [], []
    for rs in range(4):
        rng = np.random.default_rng(300 + rs)
        C, A = _simulate(rng, K, 25, low=0.1)
        ids = [f"c{i}" for i in range(25)]
        cal = build_pls(SpectralSet(axis, A, ids), ConcentrationTable(ids, LABELS, C),
                        components=3, cv="interleaved:5")
        _, At = _simulate(rng, K, 400, low=0.1)
        new = [f"u{i}" for i in range(400)]
        false.append((cal.predict(SpectralSet(axis, At, new))["residual_ratio"] > 1).mean())
        caught.append((cal.predict(SpectralSet(axis, At + band, new))["residual_ratio"]
                       > 1).mean())
    assert min(caught) >= 0.95, caught
    assert np.mean(false) <= 0.025, false


def test_as_many_components_as_points_leaves_no_q_to_check():
    # Theory: with A = p components the loadings span every spectral point, so a spectrum's
    # residual, and Q, are zero up to rounding; no limit can be set on it (an χ² with p − A = 0
    # degrees of freedom does not exist), so results say "unchecked" rather than compare
    # rounding noise with rounding noise.
    from bandsolve.calibration.build_pls import NO_Q_LEFT, fit_pls_with_limits
    from bandsolve.diagnostics import q_limit_from_values
    from bandsolve.errors import DataError

    rng = np.random.default_rng(5)
    Z = rng.uniform(0.0, 1.0, size=(20, 4))  # absorbances below the 2 AU ceiling
    Y = Z[:, :2] + 0.01 * rng.normal(size=(20, 2))
    _, lim, _, _ = fit_pls_with_limits(Z, Y, components=4, max_components=4,
                                       cv="interleaved:5")
    assert np.isnan(lim.residual) and lim.residual_method == NO_Q_LEFT
    with pytest.raises(DataError, match="max_dof"):
        q_limit_from_values(rng.chisquare(3, 30), 0.01, max_dof=0)
    axis = np.linspace(400.0, 700.0, 4)
    ids = [f"s{i}" for i in range(20)]
    cal = build_pls(SpectralSet(axis, Z, ids), ConcentrationTable(ids, LABELS[:2], Y),
                    components=4, max_components=4, cv="interleaved:5")
    out = cal.predict(SpectralSet(axis, Z[:3], ids[:3]))
    assert out["residual_ratio"].isna().all()
    assert out["flag_codes"].str.contains("unchecked").all()
