"""Validated intervals: the two-component model error, coverage in ``assess``, --out-model.

Expected values come from theory (the normal likelihood of the two-component error model,
Rocke & Lorenzato 1995, maximised independently with scipy), scipy's beta quantiles (Clopper &
Pearson 1934) and numpy.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import optimize, stats

from bandsolve.calibration.build import build_cls
from bandsolve.calibration.modelfile import load_model, save_model
from bandsolve.cli import main
from bandsolve.concentrations import ConcentrationTable
from bandsolve.errors import DataError
from bandsolve.evaluate.assess import assess, validated_model
from bandsolve.evaluate.validated import coverage_interval, model_error, validated_calibration
from bandsolve.io import write_concentrations_csv, write_spectra_csv
from bandsolve.spectra import SpectralSet
from bandsolve.variance_function import effective_dof
from tests.conftest import gaussian_bands

AXIS = np.linspace(400.0, 700.0, 121)
K = gaussian_bands(AXIS, (480, 530, 590), (40, 45, 40))
LABELS = ("A [mg/L]", "B [mg/L]", "C [mg/L]")


def test_model_error_equal_weights_is_mean_square_minus_variance():
    # With equal s and no levels, the likelihood of e ~ N(0, s² + τ²) peaks at
    # τ² = mean(e²) − s² (theory), truncated at zero; κ is not estimated.
    rng = np.random.default_rng(3)
    e = rng.normal(0, 0.5, 40)
    s = np.full(40, 0.2)
    tau2, kappa2 = model_error(e, s)
    assert tau2 == pytest.approx(max(np.mean(e**2) - 0.04, 0.0), rel=1e-6)
    assert kappa2 == 0.0
    assert model_error(np.zeros(5), np.ones(5)) == (0.0, 0.0)  # truncated at zero
    # Two distinct levels cannot separate τ from κ (MIN_LEVELS = 3): τ alone, as without levels.
    two = np.where(np.arange(40) % 2, 0.2, 0.8)
    assert model_error(e, s, two) == pytest.approx(model_error(e, s), rel=1e-9)


def test_model_error_is_the_maximum_of_the_normal_likelihood():
    # Rocke & Lorenzato (1995): e ~ N(0, s² + τ² + κ²c²). The same likelihood written with
    # scipy.stats.norm and maximised by Nelder–Mead on log-parameters gives the same optimum.
    rng = np.random.default_rng(11)
    c = rng.uniform(0.05, 1.0, 60)
    s = rng.uniform(0.004, 0.008, 60)
    e = rng.normal(0, np.sqrt(s**2 + 0.006**2 + (0.03 * c) ** 2))

    def nll(x):
        sd = np.sqrt(s**2 + np.exp(x[0]) + np.exp(x[1]) * c**2)
        return -np.sum(stats.norm.logpdf(e, 0.0, sd))

    ref = optimize.minimize(nll, np.log([1e-5, 1e-3]), method="Nelder-Mead",
                            options={"xatol": 1e-10, "fatol": 1e-12, "maxiter": 4000})
    tau2, kappa2 = model_error(e, s, c)
    assert (tau2, kappa2) == pytest.approx(tuple(np.exp(ref.x)), rel=2e-3)


def test_model_error_recovers_both_parts():
    # Consistency of maximum likelihood (theory): 4000 samples with τ = 0.01, κ = 4 %.
    rng = np.random.default_rng(12)
    c = rng.uniform(0.1, 1.0, 4000)
    s = rng.uniform(0.002, 0.006, 4000)
    e = rng.normal(0, np.sqrt(s**2 + 0.01**2 + (0.04 * c) ** 2))
    tau2, kappa2 = model_error(e, s, c)
    assert np.sqrt(tau2) == pytest.approx(0.01, rel=0.1)
    assert np.sqrt(kappa2) == pytest.approx(0.04, rel=0.05)


def test_model_error_is_unbiased_for_large_tau():
    # E[τ̂²] ≈ τ² when truncation never bites (theory): heterogeneous s, 2000 repetitions.
    rng = np.random.default_rng(5)
    s = rng.uniform(0.05, 0.2, 30)
    tau = 0.3
    est = [model_error(rng.normal(0, np.sqrt(s**2 + tau**2)), s)[0] for _ in range(2000)]
    assert np.mean(est) == pytest.approx(tau**2, rel=0.04)


def test_coverage_interval_is_clopper_pearson():
    # Clopper & Pearson (1934): beta quantiles B(α/2; x, n−x+1) and B(1−α/2; x+1, n−x).
    low, high = coverage_interval(27, 30)
    assert low == pytest.approx(stats.beta.ppf(0.025, 27, 4), rel=1e-9)
    assert high == pytest.approx(stats.beta.ppf(0.975, 28, 3), rel=1e-9)


def _day(rng, conc, prefix, gain=0.0, offset=0.0):
    ids = [f"{prefix}{i}" for i in range(len(conc))]
    x = (1 + gain) * conc @ K + offset + rng.normal(0, 0.002, (len(conc), AXIS.size))
    return SpectralSet(AXIS, x, ids), ConcentrationTable(ids, LABELS, conc)


def test_assess_reports_coverage_and_writes_a_validated_model(tmp_path):
    rng = np.random.default_rng(8)
    cal = build_cls(*_day(rng, rng.uniform(0.1, 1, (20, 3)), "c"))
    spectra, table = _day(rng, rng.uniform(0.1, 1, (30, 3)), "v", gain=0.04)
    result = assess(cal, spectra, table)
    frame = result.samples
    ref = np.asarray(table.values)
    for k, label in enumerate(LABELS):
        inside = (frame[f"{label} low95"] <= ref[:, k]) & (ref[:, k] <= frame[f"{label} high95"])
        assert result.analytes[k].covered == int(inside.sum())  # counted by numpy
    # A 4 % gain change between calibration and validation day is invisible to calibration:
    # the calibration-only intervals miss, and the model error is well above zero.
    assert min(a.coverage for a in result.analytes) < 0.8
    new = validated_model(cal, result, [])
    assert new.interval.n_validation == 30 and cal.interval is None
    tau = np.asarray(new.interval.model_error_sd)
    kappa = np.asarray(new.interval.relative_error)
    # A gain is an error proportional to the level: it shows as κ near the 4 % of the gain.
    assert np.all((kappa > 0.025) & (kappa < 0.055)), kappa
    later, _ = _day(rng, rng.uniform(0.1, 1, (5, 3)), "u", gain=0.04)
    base, val = cal.predict(later), new.predict(later)
    for k, label in enumerate(LABELS):  # √(s² + τ² + κ²ĉ²), numpy
        np.testing.assert_allclose(val[f"{label} SE"], np.sqrt(
            base[f"{label} SE"] ** 2 + tau[k] ** 2 + (kappa[k] * val[label]) ** 2), rtol=1e-12)
        lim = cal.limits.models[0]  # calibration df: samples behind κ > 1, else p − m
        cal_dof = lim.error_scale_dof if lim.error_scale[k] > 1 else AXIS.size - 3
        t = stats.t.ppf(0.975, min(cal_dof, 29))  # and ν = n_validation − 1
        np.testing.assert_allclose(val[f"{label} high95"] - val[label],
                                   t * val[f"{label} SE"], rtol=1e-12)
    assert set(val["interval_basis"]) == {new.interval_basis}
    assert "validated on 30" in new.interval_basis and "calibration only" in set(
        base["interval_basis"])
    save_model(new, tmp_path / "v.bsm")
    assert load_model(tmp_path / "v.bsm").interval == new.interval


def test_validation_on_calibration_data_is_refused():
    rng = np.random.default_rng(9)
    spectra, table = _day(rng, rng.uniform(0.1, 1, (20, 3)), "c")
    cal = build_cls(spectra, table)
    result = assess(cal, spectra, table)
    object.__setattr__(result, "calibration_files", ("cal.csv",))
    with pytest.raises(DataError, match="not built from"):
        validated_model(cal, result, [])


def test_assess_out_model_from_the_command_line(tmp_path, capsys):
    rng = np.random.default_rng(10)
    cal = build_cls(*_day(rng, rng.uniform(0.1, 1, (20, 3)), "c"))
    save_model(cal, tmp_path / "m.bsm")
    spectra, table = _day(rng, rng.uniform(0.1, 1, (30, 3)), "v", gain=0.03)
    write_spectra_csv(spectra, tmp_path / "v.csv")
    write_concentrations_csv(table, tmp_path / "vc.csv")
    args = ["assess", str(tmp_path / "m.bsm"), "--spectra", str(tmp_path / "v.csv"),
            "--concentrations", str(tmp_path / "vc.csv")]
    assert main([*args, "--out-model", str(tmp_path / "m.bsm")]) == 2  # never in place
    assert "never changed in place" in capsys.readouterr().err
    assert main([*args, "--runs", "~v(\\d)"]) == 2  # runs mean nothing without a new model
    assert "--runs sets the degrees of freedom" in capsys.readouterr().err
    assert main([*args, "--out-model", str(tmp_path / "new.bsm"),
                 "--samples", str(tmp_path / "s.csv")]) == 0
    out = capsys.readouterr()
    assert "intervals cover" in out.out and "validated model written" in out.err
    new = load_model(tmp_path / "new.bsm")
    assert [f["name"] for f in new.interval.validation_files] == ["v.csv", "vc.csv"]
    assert "A [mg/L] low95" in open(tmp_path / "s.csv").read()
    # Runs named by a pattern on the ids (v0…v29 → first digit: 10 runs) are recorded, and the
    # effective degrees of freedom stay between runs − 1 and n − 1 (Kish design effect).
    assert main([*args, "--out-model", str(tmp_path / "runs.bsm"), "--runs", "~v(\\d)"]) == 0
    basis = load_model(tmp_path / "runs.bsm").interval
    assert basis.n_runs == 10 and all(9 <= v <= 29 for v in basis.t_dof)
    capsys.readouterr()
    assert main(["inspect", str(tmp_path / "new.bsm")]) == 0
    shown = capsys.readouterr().out
    assert "validated on 30 independent samples" in shown and "model error added" in shown
    from bandsolve.report._sections import model_section

    assert "validated on 30" in model_section(new) and "calibration only" in model_section(
        load_model(tmp_path / "m.bsm"))


@pytest.mark.slow
def test_validation_restores_coverage_under_day_to_day_effects():
    # Each day its own gain (SD 2 %) and baseline offset (SD 0.002 AU): calibration-only
    # intervals miss those errors; after validation on 30 mixtures over 10 days, new samples
    # on other days are covered about 95 % of the time (coverage definition; the two-component
    # model error of Rocke & Lorenzato 1995), pooled over 25 calibrations.
    rng = np.random.default_rng(40)

    def days(k):
        return [(rng.normal(0, 0.02), rng.normal(0, 0.002)) for _ in range(k)]

    def measure(conc, day_list, prefix):
        parts = [_day(rng, c, f"{prefix}{i}-", gain=g, offset=o)[0].values
                 for i, (c, (g, o)) in enumerate(zip(np.array_split(conc, len(day_list)),
                                                     day_list, strict=True))]
        ids = [f"{prefix}{i}" for i in range(len(conc))]
        return SpectralSet(AXIS, np.vstack(parts), ids), ConcentrationTable(ids, LABELS, conc)

    before = after = total = top_hit = top_total = 0
    for _ in range(25):
        cal = build_cls(*measure(rng.uniform(0.1, 1, (20, 3)), days(1), "c"))
        val = validated_model(cal, assess(cal, *measure(rng.uniform(0.1, 1, (30, 3)), days(10),
                                                        "v")), [])
        conc = rng.uniform(0.15, 0.95, (100, 3))
        spectra, _ = measure(conc, days(10), "u")
        for model, count in ((cal, "before"), (val, "after")):
            res = model.predict(spectra)
            inside = np.column_stack([(res[f"{a} low95"] <= conc[:, k])
                                      & (conc[:, k] <= res[f"{a} high95"])
                                      for k, a in enumerate(LABELS)])
            if count == "before":
                before += int(inside.sum())
            else:
                after += int(inside.sum())
                top_hit += int(inside[conc > 0.7].sum())
                top_total += int((conc > 0.7).sum())
        total += conc.size
    assert before / total < 0.8
    assert 0.90 <= after / total <= 0.98, after / total
    # The gain is an error proportional to the level: with its part κ the top of the range is
    # covered too (an additive model error alone, averaged over the levels, gave 0.85 there).
    assert top_hit / top_total >= 0.90, top_hit / top_total


def test_effective_dof_balanced_runs_match_the_anova_intra_class_correlation():
    # Balanced one-way ANOVA: ρ = (MSB − MSW)/(MSB + (k − 1)MSW) (Searle, Casella & McCulloch
    # 1992, Variance Components, §3.5), design effect 1 + (k − 1)ρ (Kish 1965, §5.4).
    rng = np.random.default_rng(5)
    g, k = 6, 5
    z = (rng.normal(0, 1, g)[:, None] + rng.normal(0, 0.5, (g, k))).ravel()
    runs = np.repeat(np.arange(g), k)
    means = z.reshape(g, k).mean(axis=1)
    msb = k * np.sum((means - z.mean()) ** 2) / (g - 1)
    msw = np.sum((z.reshape(g, k) - means[:, None]) ** 2) / (g * (k - 1))
    rho = (msb - msw) / (msb + (k - 1) * msw)
    expected = max(g - 1, (g * k - 1) / (1 + (k - 1) * rho))
    assert effective_dof(z, runs) == pytest.approx(expected, rel=1e-12)
    # Errors identical within a run: ρ = 1, deff = k, so (n − 1)/k — about one value per run.
    same = np.repeat(rng.normal(0, 1, g), k)
    assert effective_dof(same, runs) == pytest.approx((g * k - 1) / k)
    # No runs given, or one sample per run: n − 1.
    assert effective_dof(z, None) == g * k - 1
    assert effective_dof(z, np.arange(g * k)) == g * k - 1


def test_run_aware_dof_keeps_coverage_when_errors_are_shared_within_days():
    # Validation errors = day effect (SD 1) + sample noise (SD 0.3), 30 samples from 5 days;
    # new samples come from new days. A prediction interval ±t_ν·√(s² + τ̂²) covers a new
    # error 95 % of the time when ν matches the information in τ̂² (Student 1908). Counting
    # the 30 samples as independent (ν = 29) undercovers, since τ̂² rests on 5 day effects.
    rng = np.random.default_rng(21)
    runs = np.repeat(np.arange(5), 6)
    hit_runs = hit_plain = total = 0
    for _ in range(2000):
        e = rng.normal(0, 1, 5)[runs] + rng.normal(0, 0.3, 30)
        s = np.full(30, 0.3)
        tau2 = model_error(e, s)[0]
        sd = np.sqrt(0.09 + tau2)
        new = rng.normal(0, 1, 20) + rng.normal(0, 0.3, 20)
        z = e / sd
        for dof, _label in ((effective_dof(z, runs), "runs"), (29, "plain")):
            inside = int(np.sum(np.abs(new) <= stats.t.ppf(0.975, dof) * sd))
            if _label == "runs":
                hit_runs += inside
            else:
                hit_plain += inside
        total += 20
    assert hit_runs / total >= 0.925, hit_runs / total
    assert hit_plain / total < hit_runs / total - 0.02


def test_each_analyte_uses_its_own_effective_degrees_of_freedom():
    # Analyte A's validation errors share a day effect, B's do not: A's model error rests on
    # about 5 day effects, B's on 30 samples (Kish 1965 design effect), and each interval uses
    # the t quantile of its own analyte (Student 1908), not the smallest over the analytes.
    rng = np.random.default_rng(30)
    cal = build_cls(*_day(rng, rng.uniform(0.1, 1, (20, 3)), "c"))
    runs = np.repeat(np.arange(5), 6)
    s = np.full((30, 3), 0.002)
    e = np.column_stack([rng.normal(0, 0.01, 5)[runs], rng.normal(0, 0.01, 30),
                         rng.normal(0, 0.01, 30)]) + rng.normal(0, 0.002, (30, 3))
    new = validated_calibration(cal, e, s, [], runs)
    dofs = []
    for k in range(3):
        tau2, _ = model_error(e[:, k], s[:, k])
        dofs.append(effective_dof(e[:, k] / np.sqrt(s[:, k] ** 2 + tau2), runs))
    np.testing.assert_allclose(new.interval.t_dof, dofs, rtol=1e-12)
    assert dofs[0] < 10 < dofs[1] and new.interval.dof == min(dofs)
    later, _ = _day(rng, rng.uniform(0.1, 1, (4, 3)), "u")
    res = new.predict(later)
    lim = cal.limits.models[0]
    for k, label in enumerate(LABELS):
        cal_dof = lim.error_scale_dof if lim.error_scale[k] > 1 else AXIS.size - 3
        t = stats.t.ppf(0.975, min(cal_dof, dofs[k]))
        np.testing.assert_allclose(res[f"{label} high95"] - res[label], t * res[f"{label} SE"],
                                   rtol=1e-12)


@settings(max_examples=60, deadline=None)
@given(scale=st.floats(1e-6, 1e3), n=st.integers(5, 40), stream=st.integers(0, 2**32 - 1))
def test_model_error_follows_the_concentration_unit_and_ignores_sample_order(scale, n, stream):
    # Identities of the likelihood (theory): errors, SEs and levels in another unit (× scale)
    # scale τ² by scale² and leave κ², a fraction, unchanged; the order of samples is
    # irrelevant. Both parts are never negative.
    rng = np.random.default_rng(stream)
    c = rng.uniform(0.0, 1.0, n)
    s = rng.uniform(0.01, 0.05, n)
    e = rng.normal(0, np.sqrt(s**2 + rng.uniform(0, 0.05) ** 2 + (rng.uniform(0, 0.1) * c) ** 2))
    tau2, kappa2 = model_error(e, s, c)
    assert tau2 >= 0 and kappa2 >= 0
    t2, k2 = model_error(scale * e, scale * s, scale * c)
    assert t2 == pytest.approx(scale**2 * tau2, rel=1e-4, abs=1e-9 * scale**2)
    assert k2 == pytest.approx(kappa2, rel=1e-4, abs=1e-9)
    order = rng.permutation(n)
    assert model_error(e[order], s[order], c[order]) == pytest.approx((tau2, kappa2), rel=1e-6,
                                                                       abs=1e-12)
