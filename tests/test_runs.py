"""Calibrations measured over several runs (days): error models from leave-one-run-out errors.

CLS (``build_cls(runs=...)``) and PLS cross-validated by runs (``cv="groups"``). Expected
values come from numpy (least-squares refits without each run; the CLS standard error of
Haaland & Thomas 1988), an independent maximisation of the normal likelihood (scipy), the
Kish (1965) design effect (tested in ``test_validated.py``) and coverage definitions on
simulated day-to-day effects.
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from scipy import optimize, stats

from bandsolve.calibration.build import build_cls
from bandsolve.calibration.build_pls import build_pls
from bandsolve.cli import main
from bandsolve.cls import CLSRegressor
from bandsolve.cls_loo import cross_validated_error_scale, error_model, leave_runs_out
from bandsolve.concentrations import ConcentrationTable
from bandsolve.crossval import cross_validate_pls
from bandsolve.errors import DataError
from bandsolve.io import write_concentrations_csv, write_spectra_csv
from bandsolve.spectra import SpectralSet
from bandsolve.variance_function import effective_dof, log_likelihood
from tests.conftest import gaussian_bands

AXIS = np.linspace(400.0, 700.0, 121)
K = gaussian_bands(AXIS, (480, 530, 590), (40, 45, 40))
LABELS = ("A [mg/L]", "B [mg/L]", "C [mg/L]")
Z = (AXIS - AXIS.mean()) / 150.0


def _measure(rng, conc, day):
    """Spectra of ``conc`` measured on a day with its own gain, offset and slope."""
    gain, offset, slope = day
    return (1 + gain) * conc @ K + offset + slope * Z + rng.normal(0, 0.002, (len(conc),
                                                                           AXIS.size))


def _calibration(rng, n_runs=5, per_run=5, effects=True):
    conc = rng.uniform(0.1, 1.0, (n_runs * per_run, 3))
    days = [(rng.normal(0, 0.02), rng.normal(0, 0.002), rng.normal(0, 0.002)) if effects
            else (0.0, 0.0, 0.0) for _ in range(n_runs)]
    run_of = np.repeat(np.arange(n_runs), per_run)
    x = np.vstack([_measure(rng, conc[run_of == r], days[r]) for r in range(n_runs)])
    ids = [f"c{r}-{i}" for i, r in enumerate(run_of)]
    return (SpectralSet(AXIS, x, ids), ConcentrationTable(ids, LABELS, conc),
            dict(zip(ids, run_of.astype(str), strict=True)))


def test_leave_runs_out_matches_numpy_refits():
    # Each run predicted by K̂ = lstsq(C, A) fitted without it, ĉ = lstsq(K̂ᵀ, a), and
    # SE_k = √(s²[(K̂K̂ᵀ)⁻¹]_kk) with s² = ‖a − K̂ᵀĉ‖²/(p − m) (Haaland & Thomas 1988).
    rng = np.random.default_rng(1)
    spectra, table, runs = _calibration(rng)
    X, C = spectra.values, np.asarray(table.values)
    labels = np.array([runs[s] for s in spectra.sample_ids])
    est = CLSRegressor().fit(X, C)
    errors, ses = leave_runs_out(est, X, C, labels)
    for r in np.unique(labels):
        held = labels == r
        k_hat = np.linalg.lstsq(C[~held], X[~held], rcond=None)[0]
        c_hat = np.linalg.lstsq(k_hat.T, X[held].T, rcond=None)[0].T
        s2 = np.sum((X[held] - c_hat @ k_hat) ** 2, axis=1) / (AXIS.size - 3)
        se = np.sqrt(s2[:, None] * np.diag(np.linalg.inv(k_hat @ k_hat.T))[None, :])
        np.testing.assert_allclose(errors[held], c_hat - C[held], rtol=1e-8, atol=1e-12)
        np.testing.assert_allclose(ses[held], se, rtol=1e-8)


def test_error_scale_from_runs_uses_the_runs_degrees_of_freedom():
    # κ and γ per analyte are the error model of the leave-one-run-out errors; the degrees of
    # freedom are the smallest Kish effective degrees of freedom over the analytes.
    rng = np.random.default_rng(2)
    spectra, table, runs = _calibration(rng)
    X, C = spectra.values, np.asarray(table.values)
    labels = np.array([runs[s] for s in spectra.sample_ids])
    errors, ses = leave_runs_out(CLSRegressor().fit(X, C), X, C, labels)
    kappa, gamma, dof = cross_validated_error_scale(errors, ses, C, labels)
    dofs = []
    for k in range(3):
        kap, gam = error_model(errors[:, k], ses[:, k], C[:, k])
        assert (kappa[k], gamma[k]) == pytest.approx((kap, gam))
        sd = np.sqrt((kap * ses[:, k]) ** 2 + (gam * C[:, k]) ** 2)
        dofs.append(effective_dof(errors[:, k] / sd, labels))
    assert dof == int(np.floor(min(dofs))) and 4 <= dof <= 24
    assert kappa.max() > 2  # the day effects are far above the white noise


def test_runs_restore_coverage_of_day_to_day_effects():
    # Calibration measured over 5 days (each its gain, SD 2 %; offset and slope, SD 0.002 AU),
    # new samples on 10 other days. Leave-one-out keeps each sample's day-mates in the model,
    # so part of the day effect cancels and intervals undercover; leaving whole days out shows
    # it (coverage definition, pooled over 30 calibrations and 3 analytes).
    rng = np.random.default_rng(3)
    hits = {"loo": 0, "runs": 0}
    total = 0
    for _ in range(30):
        spectra, table, runs = _calibration(rng)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            cals = {"loo": build_cls(spectra, table), "runs": build_cls(spectra, table,
                                                                         runs=runs)}
        conc = rng.uniform(0.1, 1.0, (100, 3))
        days = [(rng.normal(0, 0.02), rng.normal(0, 0.002), rng.normal(0, 0.002))
                for _ in range(10)]
        x = np.vstack([_measure(rng, c, d) for c, d in zip(np.array_split(conc, 10), days,
                                                            strict=True)])
        new = SpectralSet(AXIS, x, [f"u{i}" for i in range(100)])
        for name, cal in cals.items():
            res = cal.predict(new)
            hits[name] += sum(int(((res[f"{a} low95"] <= conc[:, k])
                                   & (conc[:, k] <= res[f"{a} high95"])).sum())
                              for k, a in enumerate(LABELS))
        total += conc.size
    assert hits["runs"] / total >= 0.88, hits["runs"] / total
    assert hits["runs"] / total >= hits["loo"] / total + 0.03, hits


def test_runs_do_not_widen_intervals_without_day_effects():
    # Without day effects the leave-one-run-out errors are white noise: coverage stays near
    # 95 % (at most 0.98 over 20 calibrations), as without runs.
    rng = np.random.default_rng(4)
    hit = total = 0
    for _ in range(20):
        spectra, table, runs = _calibration(rng, effects=False)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            cal = build_cls(spectra, table, runs=runs)
        conc = rng.uniform(0.1, 1.0, (100, 3))
        res = cal.predict(SpectralSet(AXIS, _measure(rng, conc, (0.0, 0.0, 0.0)),
                                      [f"u{i}" for i in range(100)]))
        hit += sum(int(((res[f"{a} low95"] <= conc[:, k]) & (conc[:, k] <= res[f"{a} high95"])
                        ).sum()) for k, a in enumerate(LABELS))
        total += conc.size
    assert 0.92 <= hit / total <= 0.98, hit / total


def test_too_few_runs_or_a_run_holding_an_analyte_is_refused():
    rng = np.random.default_rng(5)
    spectra, table, runs = _calibration(rng, n_runs=2, per_run=10)
    with pytest.raises(DataError, match="at least 3"):
        build_cls(spectra, table, runs=runs)
    # Pure standards whose analyte C was measured on one day only: without that day, C has
    # no standard left to estimate its spectrum from.
    conc = np.vstack([np.eye(3)[k] * v for k in range(3) for v in (0.2, 0.5, 0.8, 1.0)])
    ids = [f"s{i}" for i in range(12)]
    x = conc @ K + rng.normal(0, 0.002, (12, AXIS.size))
    days = {s: str(i % 4) if i < 8 else "9" for i, s in enumerate(ids)}
    with pytest.raises(DataError, match="without run '9'"):
        build_cls(SpectralSet(AXIS, x, ids), ConcentrationTable(ids, LABELS, conc), runs=days)


def test_build_with_runs_from_the_command_line(tmp_path, capsys):
    rng = np.random.default_rng(6)
    spectra, table, _ = _calibration(rng)
    write_spectra_csv(spectra, tmp_path / "s.csv")
    write_concentrations_csv(table, tmp_path / "c.csv")
    args = ["build", "--spectra", str(tmp_path / "s.csv"), "--concentrations",
            str(tmp_path / "c.csv"), "--quiet"]
    assert main([*args, "--method", "cls", "--runs", "~c(\\d)-", "--out",
                 str(tmp_path / "m.bsm")]) == 0
    capsys.readouterr()
    # Every result row says what its interval rests on, the runs included.
    assert main(["predict", str(tmp_path / "m.bsm"), str(tmp_path / "s.csv"), "--out",
                 str(tmp_path / "r.csv"), "--quiet"]) == 0
    assert "calibration only (leave-one-run-out errors, 5 runs)" in open(tmp_path / "r.csv").read()
    capsys.readouterr()
    assert main(["inspect", str(tmp_path / "m.bsm")]) == 0
    assert "from leave-one-run-out errors, 5 runs" in capsys.readouterr().out.replace("\n    ", " ")
    assert main(["report", str(tmp_path / "m.bsm"), "--out", str(tmp_path / "m.html"),
                 "--quiet"]) == 0
    assert "from leave-one-run-out errors, 5 runs" in open(tmp_path / "m.html").read()
    assert main([*args, "--method", "pls", "--runs", "~c(\\d)-", "--out",
                 str(tmp_path / "p.bsm")]) == 2
    assert "--runs applies only to --method cls" in capsys.readouterr().err


def _new_days(rng, n=100):
    conc = rng.uniform(0.1, 1.0, (n, 3))
    days = [(rng.normal(0, 0.02), rng.normal(0, 0.002), rng.normal(0, 0.002)) for _ in range(10)]
    x = np.vstack([_measure(rng, c, d) for c, d in zip(np.array_split(conc, 10), days,
                                                        strict=True)])
    return conc, SpectralSet(AXIS, x, [f"u{i}" for i in range(n)])


def test_pls_by_runs_fits_its_error_model_to_the_runs_errors():
    # PLS2 cross-validated by leaving each day out: κ and γ maximise the normal likelihood of
    # Var(e) = κ²(1 + h)σ²_e + γ²c² over the leave-one-day-out errors (Rocke & Lorenzato
    # 1995; maximised here independently by Nelder–Mead), and every SE follows
    # √(κ²(1 + h)σ²_e + γ²ĉ²) with the noise floor (numpy).
    rng = np.random.default_rng(7)
    spectra, table, runs = _calibration(rng)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        cal = build_pls(spectra, table, cv="groups", groups=runs)
    lim = cal.limits.models[0]
    a = cal.estimators[0].n_components
    labels = np.array([runs[s] for s in spectra.sample_ids])
    C = np.asarray(table.values)
    cv = cross_validate_pls(spectra.values, C, a, cv="groups", groups=labels)
    e, grow = cv.errors[a - 1], 1.0 + cv.leverage(a - 1)
    s2e = np.asarray(lim.rmsecv) ** 2 / (1 + (a + 1) / len(C))
    for k in range(3):
        def nll(x, k=k):
            return -log_likelihood(e[:, k] ** 2, np.exp(x[0]) * grow * s2e[k]
                                   + np.exp(x[1]) * C[:, k] ** 2)
        ref = optimize.minimize(nll, [0.0, np.log(1e-4)], method="Nelder-Mead",
                                options={"xatol": 1e-10, "fatol": 1e-12, "maxiter": 4000})
        ours = -nll(np.log([lim.error_scale[k] ** 2 + 1e-300, lim.relative_error[k] ** 2
                            + 1e-300]))
        assert ours >= -ref.fun - 1e-6 * abs(ref.fun)
    assert lim.error_scale_method == "leave-one-run-out errors, 5 runs"
    assert 4 <= lim.error_scale_dof <= 24
    _, new = _new_days(rng, 20)
    res = cal.predict(new)
    h = cal.estimators[0].leverage(cal.preprocessor.transform(new.values))
    for k, label in enumerate(LABELS):
        var = (1 + h) * lim.error_scale[k] ** 2 * s2e[k] + (lim.relative_error[k]
                                                             * res[label]) ** 2
        sd = np.sqrt(np.maximum(var, (1 + h) * lim.noise_floor[k]))
        np.testing.assert_allclose(res[f"{label} SE"], sd, rtol=1e-9)
        t = stats.t.ppf(0.975, lim.error_scale_dof)
        np.testing.assert_allclose(res[f"{label} high95"] - res[label], t * sd, rtol=1e-9)


def test_pls_by_runs_covers_the_top_of_the_range():
    # Day gains make errors grow with the level: with the proportional part and the runs'
    # degrees of freedom, new days' samples in the top third of the range are covered at
    # least 0.84 (coverage definition, 30 calibrations; the plain cross-validated SE, which
    # averages the error over the levels, gave 0.76 here, 0.85 pooled). Five days leave the
    # error model uncertain: pooled coverage here is about 0.87, not 0.95 (README).
    rng = np.random.default_rng(8)
    hit = total = top_hit = top_total = 0
    for _ in range(30):
        spectra, table, runs = _calibration(rng)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            cal = build_pls(spectra, table, cv="groups", groups=runs)
        conc, new = _new_days(rng)
        res = cal.predict(new)
        inside = np.column_stack([(res[f"{a} low95"] <= conc[:, k])
                                  & (conc[:, k] <= res[f"{a} high95"])
                                  for k, a in enumerate(LABELS)])
        hit, total = hit + int(inside.sum()), total + inside.size
        top_hit += int(inside[conc > 0.7].sum())
        top_total += int((conc > 0.7).sum())
    assert hit / total >= 0.86, hit / total
    assert top_hit / top_total >= 0.84, top_hit / top_total


def test_runs_error_model_of_a_non_negative_model_is_that_of_the_unconstrained_one():
    # A non-negative solve holds absent analytes at zero without an SE; the error model from
    # the runs is fitted to the unconstrained predictions, as the leave-one-out one is, so it
    # is the same with or without the constraint (and not silently empty).
    rng = np.random.default_rng(9)
    conc = np.vstack([np.eye(3)[k] * v for k in range(3) for v in (0.2, 0.4, 0.6, 0.8, 1.0)])
    run_of = np.tile(np.arange(5), 3)  # each day one level of each analyte
    days = [(rng.normal(0, 0.02), rng.normal(0, 0.002), rng.normal(0, 0.002)) for _ in range(5)]
    x = np.vstack([_measure(rng, conc[i:i + 1], days[r]) for i, r in enumerate(run_of)])
    ids = [f"s{i}" for i in range(15)]
    spectra, table = SpectralSet(AXIS, x, ids), ConcentrationTable(ids, LABELS, conc)
    runs = dict(zip(ids, run_of.astype(str), strict=True))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        plain = build_cls(spectra, table, runs=runs).limits.models[0]
        held = build_cls(spectra, table, runs=runs, non_negative=True).limits.models[0]
    assert held.error_scale == pytest.approx(plain.error_scale)
    assert held.relative_error == pytest.approx(plain.relative_error)
    assert held.error_scale_dof == plain.error_scale_dof > 0


def _validated_after_runs(rng, runs_model=True):
    """A CLS calibration over 5 days (with or without its runs), validated on 30 mixtures
    from 5 further days (the days named)."""
    from bandsolve.evaluate.assess import assess, validated_model

    spectra, table, runs = _calibration(rng)
    conc, _ = _new_days(rng, 30)
    days = [(rng.normal(0, 0.02), rng.normal(0, 0.002), rng.normal(0, 0.002)) for _ in range(5)]
    x = np.vstack([_measure(rng, c, d) for c, d in zip(np.array_split(conc, 5), days,
                                                        strict=True)])
    ids = [f"v{i}" for i in range(30)]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        cal = build_cls(spectra, table, runs=runs if runs_model else None)
        result = assess(cal, SpectralSet(AXIS, x, ids), ConcentrationTable(ids, LABELS, conc))
        val = validated_model(cal, result, [], {v: str(i // 6) for i, v in enumerate(ids)})
    return cal, val, result


def test_validation_of_a_runs_model_is_pooled_with_its_own_error_model():
    # Two independent variance estimates of the same day-to-day error, with ν_c and ν_v
    # degrees of freedom, pooled as in a pooled variance (Satterthwaite 1946; the pooled
    # two-sample t): SE² = s² + ν_v/(ν_c + ν_v)·(τ̂² + κ̂²ĉ²) and t on ν_c + ν_v. Reference:
    # τ̂, κ̂ re-estimated with scipy's Nelder–Mead on the normal likelihood of the validation
    # errors, ν_v as the unpooled validation reports it, t from scipy.stats.t.
    from bandsolve.evaluate.validated import validated_calibration

    rng = np.random.default_rng(8)
    cal, val, result = _validated_after_runs(rng)
    basis = val.interval
    nu_c = min(m.error_scale_dof for m in cal.limits.models)
    assert basis.pooled and basis.calibration_dof == nu_c > 0
    frame = result.samples
    e, s, c = (np.column_stack([frame[f"{a} {col}"] for a in LABELS])
               for col in ("error", "SE (calibration)", "reference"))
    alone = validated_calibration(_without_runs(cal), e, s, [],
                                  np.repeat(np.arange(5), 6), c).interval
    new = _new_days(rng, 40)[1]
    before, after = cal.predict(new), val.predict(new)
    for k, a in enumerate(LABELS):
        def nll(v, k=k):
            var = s[:, k] ** 2 + v[0] ** 2 + (v[1] * c[:, k]) ** 2
            return -stats.norm.logpdf(e[:, k], scale=np.sqrt(var)).sum()
        tau, kappa = np.abs(optimize.minimize(nll, [1e-3, 1e-2], method="Nelder-Mead",
                                              options={"xatol": 1e-9, "fatol": 1e-12}).x)
        nu_v = alone.analyte_dof[k]
        w = nu_v / (nu_c + nu_v)
        se2 = before[f"{a} SE"] ** 2 + w * (tau**2 + (kappa * after[a]) ** 2)
        np.testing.assert_allclose(after[f"{a} SE"], np.sqrt(se2), rtol=2e-3, atol=1e-6)
        half = (after[f"{a} high95"] - after[f"{a} low95"]) / 2
        np.testing.assert_allclose(half, stats.t.ppf(0.975, nu_c + nu_v) * after[f"{a} SE"],
                                   rtol=1e-9)


def _without_runs(cal):
    """The same calibration with its error model of runs forgotten (the unpooled reference)."""
    import dataclasses

    models = tuple(dataclasses.replace(m, error_scale_runs=0) for m in cal.limits.models)
    return dataclasses.replace(cal, limits=dataclasses.replace(cal.limits, models=models))


@pytest.mark.slow
def test_validating_a_runs_model_does_not_count_the_day_effects_twice():
    # A calibration over 5 days with --runs already covers new days' samples; adding a
    # validation's model error in full on top of it gave 0.986 (README). Pooled: inside
    # 0.93–0.975, pooled over 30 calibrations and 3 analytes (coverage definition).
    rng = np.random.default_rng(11)
    hits = total = 0
    for _ in range(30):
        _, val, _ = _validated_after_runs(rng)
        conc, new = _new_days(rng)
        res = val.predict(new)
        hits += sum(int(((res[f"{a} low95"] <= conc[:, k]) & (conc[:, k] <= res[f"{a} high95"]))
                        .sum()) for k, a in enumerate(LABELS))
        total += conc.size
    assert 0.93 <= hits / total <= 0.975, hits / total
