"""Control charts: run lengths against published tables, false-alarm rates, states in words.

Published average run lengths (ARL) used below, all from memory:
* two-sided tabular CUSUM, k = 1/2 (Montgomery, *Introduction to Statistical Quality Control*,
  table of CUSUM ARLs; Page 1954 scheme): h = 4: 168, 74.2, 26.6, 13.3, 8.38, 4.75, 3.34
  for shifts 0, 0.25, 0.5, 0.75, 1, 1.5, 2 σ; h = 5: 465, 139, 38.0, 17.0, 10.4, 5.75, 4.01.
* EWMA with asymptotic limits (Lucas & Saccucci 1990, Technometrics 32:1, as tabulated by
  Montgomery): λ = 0.1, L = 2.814: 500, 106, 31.3, 15.9, 10.3, 6.1, 4.4; λ = 0.2,
  L = 2.962: 500, 150, 41.8, 18.2, 10.5, 5.5, 3.7.
* Shewhart individuals chart with Western Electric rules 1–4: in-control ARL 91.75
  (Champ & Woodall 1987, Technometrics 29:393).
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from bandsolve.errors import DataError
from bandsolve.monitor.arl import cusum_arl, ewma_arl, shewhart_arl
from bandsolve.monitor.charts import (
    D2,
    ChartDesign,
    Limits,
    control_chart,
    cusum,
    moving_range_limits,
    run_rules,
)

SHIFTS = (0.0, 0.25, 0.5, 0.75, 1.0, 1.5, 2.0)
CUSUM_TABLE = {4.0: (168, 74.2, 26.6, 13.3, 8.38, 4.75, 3.34),
               5.0: (465, 139, 38.0, 17.0, 10.4, 5.75, 4.01)}
EWMA_TABLE = {(0.1, 2.814): (500, 106, 31.3, 15.9, 10.3, 6.1, 4.4),
              (0.2, 2.962): (500, 150, 41.8, 18.2, 10.5, 5.5, 3.7)}


# ---------------------------------------------------------------------- ARL computations
@pytest.mark.slow
@pytest.mark.parametrize("h", [4.0, 5.0])
def test_cusum_markov_chain_arl_matches_the_published_table(h):
    for shift, table in zip(SHIFTS, CUSUM_TABLE[h], strict=True):
        # Tables print 3 significant figures; the Markov chain (Brook & Evans 1972) is exact
        # to about 0.1 % with 201 states.
        assert cusum_arl(0.5, h, shift) == pytest.approx(table, rel=0.01)


def _siegmund(k: float, h: float, shift: float) -> float:
    """Siegmund's (1985) one-sided CUSUM ARL approximation, b = h + 1.166."""
    delta, b = shift - k, h + 1.166
    if abs(delta) < 1e-9:
        return b * b
    return (np.exp(-2 * delta * b) + 2 * delta * b - 1) / (2 * delta * delta)


@pytest.mark.parametrize("shift", [0.0, 0.5, 1.0])
def test_cusum_one_sided_arl_agrees_with_siegmund_approximation(shift):
    # Siegmund's approximation is good to a few percent for k = 1/2 (Montgomery, from memory).
    for h in (4.0, 5.0):
        assert cusum_arl(0.5, h, shift, two_sided=False) == pytest.approx(
            _siegmund(0.5, h, shift), rel=0.05)


@pytest.mark.slow
@pytest.mark.parametrize("design", list(EWMA_TABLE))
def test_ewma_markov_chain_arl_matches_lucas_saccucci(design):
    lam, width = design
    for shift, table in zip(SHIFTS, EWMA_TABLE[design], strict=True):
        assert ewma_arl(lam, width, shift) == pytest.approx(table, rel=0.02)


def test_shewhart_arl_is_the_reciprocal_normal_tail():
    # Theory: 1/(2Φ(−3)) = 370.4 (Montgomery).
    assert shewhart_arl() == pytest.approx(1 / (2 * stats.norm.cdf(-3)))
    assert shewhart_arl() == pytest.approx(370.4, abs=0.1)


# ---------------------------------------------------------------------- the charts themselves
def test_moving_range_sigma_matches_numpy():
    # Montgomery: σ̂ = MR̄/d₂, d₂ = 1.128 for n = 2 (theory: E|X1−X2| = 2σ/√π = 1.128σ).
    assert D2 == pytest.approx(2 / np.sqrt(np.pi), abs=5e-4)
    x = np.random.default_rng(1).normal(100, 2, 30)
    lim = moving_range_limits(x, 20)
    assert lim.centre == pytest.approx(np.mean(x[:20]))
    assert lim.sigma == pytest.approx(np.mean(np.abs(np.diff(x[:20]))) / 1.128)
    with pytest.raises(DataError, match="need 40 in-control runs"):
        moving_range_limits(x, 40)


def test_cusum_recursion_by_hand():
    # Page (1954) tabular CUSUM, k = 0.5, h = 2, computed by hand.
    up, down, alarms = cusum(np.array([1.0, 1.0, 1.5, -3.0, 0.0]), 0.5, 2.0)
    np.testing.assert_allclose(up, [0.5, 1.0, 2.0, 0.0, 0.0])
    np.testing.assert_allclose(down, [0.0, 0.0, 0.0, 2.5, 0.0])  # restarted after the alarm
    assert [(a.index, a.direction) for a in alarms] == [(3, "downward")]


def test_run_rules_on_constructed_sequences():
    # Western Electric rules (Montgomery): each pattern fires at the run that completes it.
    z = np.zeros(30)
    z[3] = 3.5                       # rule 1
    z[[8, 10]] = 2.3                 # rule 2 at 10 (two of three beyond 2σ)
    z[[14, 15, 16, 18]] = -1.4       # rule 3 at 18 (four of five beyond 1σ, below)
    z[21:29] = 0.2                   # rule 4 at 28 (eight in a row above)
    got = {(a.index, a.rule, a.direction) for a in run_rules(z)}
    assert got == {(3, "beyond 3σ", "upward"), (10, "2 of 3 beyond 2σ", "upward"),
                   (18, "4 of 5 beyond 1σ", "downward"), (28, "8 in a row", "upward")}


def _first(alarms, charts) -> int | None:
    return next((a.index + 1 for a in alarms if a.chart in charts), None)


@pytest.mark.slow
@pytest.mark.parametrize("h", [4.0, 5.0])
def test_a_drift_of_half_a_se_is_detected_within_the_tabled_run_count(h):
    # A persistent shift of 0.5 SE from the first monitored run: the CUSUM's mean run length
    # to detection matches the table (26.6 for h = 4, 38.0 for h = 5) within simulation
    # error (±3 standard errors of the mean of 1000 run lengths).
    rng = np.random.default_rng(12)
    design = ChartDesign(h=h, rules=False)
    known = Limits(centre=100.0, sigma=1.0, n=0)
    lengths = []
    for _ in range(1000):
        values = 100.0 + rng.normal(0.5, 1.0, 250)
        lengths.append(_first(control_chart(values, design, limits=known).alarms, {"cusum"}))
    lengths = np.array(lengths, dtype=float)
    se = lengths.std(ddof=1) / np.sqrt(len(lengths))
    assert abs(lengths.mean() - CUSUM_TABLE[h][2]) < 3 * se + 0.01 * CUSUM_TABLE[h][2]


def _trend_arl(k: float, h: float, slope: float, states: int = 201, horizon: int = 400
               ) -> float:
    """Mean run length of a two-sided CUSUM under a linear trend μ_t = slope·t, by a
    time-varying Brook & Evans (1972) Markov chain over the pair of sides (upper only:
    the lower side cannot signal on an upward trend of this size before the upper)."""
    w = 2 * h / (2 * states - 1)
    centres = np.arange(states) * w
    upper = (np.arange(states) + 0.5) * w
    p = np.zeros(states)
    p[0] = 1.0
    survive = []
    for t in range(1, horizon + 1):
        cdf = stats.norm.cdf(upper[None, :] - centres[:, None] + k - slope * t)
        p = p @ np.diff(np.hstack([np.zeros((states, 1)), cdf]), axis=1)
        survive.append(p.sum())
    return 1.0 + float(np.sum(survive))


@pytest.mark.slow
def test_a_trend_of_half_a_se_per_run_is_detected_when_the_markov_chain_says():
    # Drift read as a ramp of 0.5 SE per run: expected detection run from an independent
    # time-varying Markov chain (Brook & Evans 1972), compared with the chart's run lengths.
    expected = _trend_arl(0.5, 5.0, 0.5)
    rng = np.random.default_rng(13)
    known = Limits(centre=0.0, sigma=1.0, n=0)
    lengths = np.array([_first(control_chart(rng.normal(0, 1, 60) + 0.5 * np.arange(1, 61),
                                             ChartDesign(rules=False), limits=known).alarms,
                               {"cusum"}) for _ in range(600)], dtype=float)
    se = lengths.std(ddof=1) / np.sqrt(len(lengths))
    assert abs(lengths.mean() - expected) < 3 * se + 0.02 * expected
    assert lengths.mean() < 8  # 0.5 SE per run reaches 3 SE within 6 runs


@pytest.mark.slow
def test_in_control_200_runs_raise_false_alarms_at_the_tabled_rate():
    # 1000 in-control sequences of 200 runs with known limits. Expected alarms per sequence:
    # Shewhart 200/370.4 (theory); CUSUM k = 1/2, h = 5, restarted after each alarm,
    # 200/465 (renewal; Montgomery's table). Tolerance: 3 Poisson standard errors.
    rng = np.random.default_rng(14)
    known = Limits(centre=0.0, sigma=1.0, n=0)
    counts = {"shewhart": 0, "cusum": 0}
    first_rule = []
    m = 1000
    for _ in range(m):
        result = control_chart(rng.normal(size=200), ChartDesign(), limits=known)
        for a in result.alarms:
            if a.chart in counts:
                counts[a.chart] += 1
        first_rule.append(_first(result.alarms, {"shewhart", "rule"}) or np.nan)
    for chart, arl in (("shewhart", 1 / (2 * stats.norm.cdf(-3))), ("cusum", 465.0)):
        expected = m * 200 / arl
        assert abs(counts[chart] - expected) < 3 * np.sqrt(expected), (chart, counts[chart])
    # With run rules 1-4 the first false alarm comes after 91.75 runs on average (Champ &
    # Woodall 1987, from memory): the fraction of sequences without one in 200 runs is
    # about exp(−200/91.75) = 0.11 (geometric approximation); allow ±0.04.
    no_alarm = np.mean(np.isnan(first_rule))
    assert no_alarm == pytest.approx(np.exp(-200 / 91.75), abs=0.04)


# ---------------------------------------------------------------------- the state in words
def test_state_names_the_start_of_a_drift_by_page_change_point():
    rng = np.random.default_rng(15)
    values = np.concatenate([100 + rng.normal(0, 1, 40), 101.5 + rng.normal(0, 1, 20)])
    result = control_chart(values, ChartDesign(phase_one=20))
    assert not result.in_control and result.direction == "upward"
    # Page's estimate: the run after the evidence last stood at zero, near the true start 40.
    assert 30 <= result.since <= 45
    assert result.recent_mean() == pytest.approx(np.mean(values[result.since:]))


def test_state_in_control_names_the_run_after_the_last_alarm():
    values = np.full(40, 100.0) + np.tile([0.3, -0.3], 20)
    values[30] = 110.0  # one wild check standard
    result = control_chart(values, ChartDesign(phase_one=20))
    assert result.in_control and result.since == 31
    assert result.to_dict()["in_control_arl"]["cusum"] == pytest.approx(465, rel=0.01)


def test_unusable_chart_designs_are_refused():
    for bad in ({"phase_one": 1}, {"h": 0.0}, {"ewma_lambda": 1.5}):
        with pytest.raises(DataError):
            ChartDesign(**bad)
