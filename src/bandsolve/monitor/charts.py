"""Control charts for one series of check-standard results: Shewhart, CUSUM, EWMA, run rules.

A series (one value per run, for example a check standard's recovery in %) is standardised
with a centre and σ from its first ``phase_one`` runs (the in-control reference period):
centre = their mean, σ = mean moving range / d₂ with d₂ = 1.128 for ranges of two. Then

* **Shewhart individuals chart**: an alarm when ``|z| > 3`` (in-control ARL 370);
* **tabular CUSUM** with reference ``k`` and decision interval ``h`` (σ units),
  ``C⁺ₜ = max(0, C⁺ₜ₋₁ + zₜ − k)``, ``C⁻ₜ = max(0, C⁻ₜ₋₁ − zₜ − k)``, an alarm when either
  exceeds ``h``, after which both restart from zero (k = 0.5, h = 5: in-control ARL 465,
  38 runs to detect a 0.5σ shift);
* **EWMA** (optional) ``Eₜ = λzₜ + (1−λ)Eₜ₋₁`` against asymptotic limits ``±L√(λ/(2−λ))``;
* **Western Electric run rules** (optional): two of three beyond 2σ, four of five beyond 1σ,
  eight in a row, all on one side (together with the 3σ rule, in-control ARL about 92).

The *state* of the series at its last run is judged from the CUSUM evidence without restart
(a drift that persists keeps it above ``h``; values winsorised at the 3σ limit so a single
wild value does not count as a drift), the 3σ limit and the run rules; the start of a drift
is Page's change-point estimate, the run after the CUSUM last stood at zero.

References
----------
Montgomery, D. C. *Introduction to Statistical Quality Control* (Wiley): individuals chart
with moving-range σ (d₂ = 1.128), Western Electric rules, tabular CUSUM, EWMA.
ISO 7870-2:2023 Shewhart control charts; ISO 7870-4:2021 cumulative sum charts;
ISO 7870-6:2016 EWMA control charts.
Page, E. S. (1954). Continuous inspection schemes. *Biometrika* 41, 100–115.
Western Electric Company (1956). *Statistical Quality Control Handbook*.
Hawkins, D. M. (1993). Robustification of cumulative sum charts by winsorization.
*J. Qual. Technol.* 25, 248–261 (from memory).
Champ, C. W., Woodall, W. H. (1987). Exact results for Shewhart control charts with
supplementary runs rules. *Technometrics* 29, 393–399.
Lucas, J. M., Saccucci, M. S. (1990). *Technometrics* 32, 1–12.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np

from bandsolve.errors import DataError
from bandsolve.monitor.arl import cusum_arl, ewma_arl, ewma_halfwidth, shewhart_arl

__all__ = ["D2", "Alarm", "ChartDesign", "ChartResult", "Limits", "control_chart", "cusum",
           "ewma", "moving_range_limits", "run_rules"]

#: Mean range of two standard normal values (d₂ for n = 2).
D2 = 1.128


@dataclass(frozen=True)
class ChartDesign:
    """How a series is charted.

    Attributes
    ----------
    phase_one : int
        Runs that set the centre and σ (20–25 is the usual minimum).
    k, h : float
        CUSUM reference value and decision interval, in σ.
    width : float
        Shewhart limits, ±``width`` σ.
    ewma_lambda, ewma_width : float or None, float
        EWMA smoothing and limit width (None: no EWMA). λ = 0.1, L = 2.814 gives an
        in-control ARL of 500 (Lucas & Saccucci 1990).
    rules : bool
        Apply the Western Electric run rules 2–4.
    """

    phase_one: int = 20
    k: float = 0.5
    h: float = 5.0
    width: float = 3.0
    ewma_lambda: float | None = None
    ewma_width: float = 2.814
    rules: bool = True

    def __post_init__(self) -> None:
        if not (isinstance(self.phase_one, int) and self.phase_one >= 5):
            raise DataError(f"control limits need at least 5 reference runs (20-25 is usual), "
                            f"not {self.phase_one!r}")
        if not (self.h > 0 and self.k >= 0 and self.width > 0):
            raise DataError("CUSUM h and the Shewhart width must be positive and k >= 0")
        if self.ewma_lambda is not None and not 0 < self.ewma_lambda <= 1:
            raise DataError(f"EWMA smoothing must lie in (0, 1], not {self.ewma_lambda:g}")

    def in_control_arl(self) -> dict[str, float]:
        """In-control ARL of each chart (known σ): the mean runs between false alarms."""
        out = {"shewhart": shewhart_arl(0.0, self.width), "cusum": cusum_arl(self.k, self.h)}
        if self.ewma_lambda is not None:
            out["ewma"] = ewma_arl(self.ewma_lambda, self.ewma_width)
        return out


@dataclass(frozen=True)
class Limits:
    """Centre and σ of a series from its in-control reference runs."""

    centre: float
    sigma: float
    n: int
    method: str = "mean and mean moving range / 1.128 of the first runs"


@dataclass(frozen=True)
class Alarm:
    """One signal: at position ``index`` of the series, by ``chart`` (with its rule)."""

    index: int
    chart: str
    direction: str
    rule: str


def moving_range_limits(values: np.ndarray, n: int) -> Limits:
    """Centre (mean) and σ = MR̄/d₂ of the first ``n`` values (Montgomery, individuals chart)."""
    x = np.asarray(values, dtype=float)[:n]
    if len(x) < max(n, 2):
        raise DataError(f"control limits need {n} in-control runs; only {len(x)} recorded")
    sigma = float(np.mean(np.abs(np.diff(x))) / D2)
    if not sigma > 0:
        raise DataError("the in-control runs are all identical; their spread cannot set limits")
    return Limits(centre=float(x.mean()), sigma=sigma, n=n)


def cusum(z: np.ndarray, k: float, h: float, *, restart: bool = True
          ) -> tuple[np.ndarray, np.ndarray, list[Alarm]]:
    """Tabular CUSUM of standardised values (Page 1954; Montgomery).

    Returns
    -------
    upper, lower : ndarray, shape (n,)
        ``C⁺`` and ``C⁻`` after each run.
    alarms : list of Alarm
        Runs where a side exceeded ``h`` (both sides restart from zero when ``restart``).
    """
    up = np.zeros(len(z))
    down = np.zeros(len(z))
    alarms: list[Alarm] = []
    cu = cd = 0.0
    for i, v in enumerate(np.asarray(z, dtype=float)):
        cu, cd = max(0.0, cu + v - k), max(0.0, cd - v - k)
        up[i], down[i] = cu, cd
        if cu > h or cd > h:
            direction = "upward" if cu > h else "downward"
            alarms.append(Alarm(i, "cusum", direction, f"CUSUM beyond h = {h:g}σ"))
            if restart:
                cu = cd = 0.0
    return up, down, alarms


def ewma(z: np.ndarray, lam: float) -> np.ndarray:
    """EWMA statistic of standardised values, started at the centre (zero)."""
    out = np.empty(len(z))
    e = 0.0
    for i, v in enumerate(np.asarray(z, dtype=float)):
        e = lam * v + (1.0 - lam) * e
        out[i] = e
    return out


_RULES = ((2, 3, 2.0, "2 of 3 beyond 2σ"), (4, 5, 1.0, "4 of 5 beyond 1σ"),
          (8, 8, 0.0, "8 in a row"))


def _rolling_count(hits: np.ndarray, span: int) -> np.ndarray:
    """Number of true values among the last ``span`` runs (fewer at the start)."""
    total = np.cumsum(hits, dtype=int)
    return total - np.concatenate([np.zeros(span, dtype=int), total[:-span]])[:len(hits)]


def run_rules(z: np.ndarray, width: float = 3.0) -> list[Alarm]:
    """Western Electric rules 1–4 on standardised values, one alarm per run at most.

    Rule 1: beyond ``width``; rule 2: two of three beyond 2σ; rule 3: four of five beyond
    1σ; rule 4: eight in a row; 2–4 on the same side of the centre and including the run
    itself (Western Electric 1956; Montgomery). The first rule that fires names the alarm.
    """
    z = np.asarray(z, dtype=float)
    fired = np.zeros(len(z), dtype=int)  # 0: none, else 1 + rule position
    side = np.zeros(len(z), dtype=int)
    rule1 = np.abs(z) > width
    fired[rule1] = 1
    side[rule1] = np.sign(z[rule1]).astype(int)
    for r, (count, span, limit, _) in enumerate(_RULES, start=2):
        for s in (1, -1):
            hits = s * z > limit
            new = (fired == 0) & hits & (_rolling_count(hits, span) >= count)
            new &= np.arange(len(z)) >= span - 1
            fired[new], side[new] = r, s
    names = [f"beyond {width:g}σ"] + [rule[3] for rule in _RULES]
    return [Alarm(int(i), "shewhart" if fired[i] == 1 else "rule",
                  "upward" if side[i] > 0 else "downward", names[fired[i] - 1])
            for i in np.flatnonzero(fired)]


@dataclass
class ChartResult:
    """A charted series: standardised values, chart statistics, alarms and the state.

    Attributes
    ----------
    values : ndarray, shape (n,)
        The series as given (for example recovery in %).
    limits : Limits
    z : ndarray, shape (n,)
        ``(values − centre)/σ``.
    upper, lower : ndarray, shape (n,)
        CUSUM sides (restarted after each alarm).
    evidence_up, evidence_down : ndarray, shape (n,)
        CUSUM sides without restart, on values winsorised at ±``width`` (the current
        evidence of a drift).
    ewma : ndarray, shape (n,) or None
    alarms : list of Alarm
    out_of_control : ndarray of bool, shape (n,)
        Runs judged out of control (evidence beyond h, beyond 3σ, or a run rule).
    since : int
        Index where the current state began (Page's change point for a drift).
    direction : str or None
        ``"upward"``/``"downward"`` when the last run is out of control, else None.
    design : ChartDesign
    """

    values: np.ndarray
    limits: Limits
    z: np.ndarray
    upper: np.ndarray
    lower: np.ndarray
    evidence_up: np.ndarray
    evidence_down: np.ndarray
    ewma: np.ndarray | None
    alarms: list[Alarm]
    out_of_control: np.ndarray
    since: int
    direction: str | None
    design: ChartDesign = field(default_factory=ChartDesign)

    @property
    def in_control(self) -> bool:
        """True when the last run is in control."""
        return self.direction is None

    def recent_mean(self) -> float:
        """Mean of the values from :attr:`since` to the last run."""
        return float(np.mean(self.values[self.since:]))

    def to_dict(self) -> dict[str, Any]:
        """JSON-friendly description (positions are 0-based indices into the series)."""
        return {"centre": self.limits.centre, "sigma": self.limits.sigma,
                "reference_runs": self.limits.n, "limits_method": self.limits.method,
                "in_control": self.in_control, "direction": self.direction,
                "since_index": self.since, "recent_mean": self.recent_mean(),
                "alarms": [{"index": a.index, "chart": a.chart, "direction": a.direction,
                            "rule": a.rule} for a in self.alarms],
                "in_control_arl": self.design.in_control_arl()}


def _judged(z: np.ndarray, ev_up: np.ndarray, ev_down: np.ndarray, alarms: list[Alarm],
            design: ChartDesign) -> np.ndarray:
    bad = (ev_up > design.h) | (ev_down > design.h) | (np.abs(z) > design.width)
    for a in alarms:
        if a.chart in ("rule", "ewma"):
            bad[a.index] = True
    return bad


def _state(z: np.ndarray, ev_up: np.ndarray, ev_down: np.ndarray, bad: np.ndarray,
           design: ChartDesign) -> tuple[int, str | None]:
    n = len(z)
    if not bad[-1]:
        flagged = np.flatnonzero(bad)
        return (int(flagged[-1]) + 1 if flagged.size else 0), None
    side = ev_up if ev_up[-1] >= ev_down[-1] else ev_down
    direction = "upward" if side is ev_up else "downward"
    if side[-1] > design.h:  # Page: the drift began after the evidence last stood at zero
        zeros = np.flatnonzero(side == 0)
        return (int(zeros[-1]) + 1 if zeros.size else 0), direction
    return n - 1, "upward" if z[-1] > 0 else "downward"


def control_chart(values: np.ndarray, design: ChartDesign | None = None, *,
                  limits: Limits | None = None) -> ChartResult:
    """Chart one series (one value per run, oldest first).

    Parameters
    ----------
    values : ndarray, shape (n,)
        For example a check standard's recovery in % per run.
    design : ChartDesign, optional
    limits : Limits, optional
        Known centre and σ; by default from the first ``design.phase_one`` values.
    """
    design = design or ChartDesign()
    x = np.asarray(values, dtype=float)
    if x.ndim != 1 or not np.isfinite(x).all():
        raise DataError("a control chart needs one finite value per run")
    limits = limits or moving_range_limits(x, design.phase_one)
    z = (x - limits.centre) / limits.sigma
    upper, lower, alarms = cusum(z, design.k, design.h)
    # The evidence of a persistent drift: the CUSUM without restart, on values winsorised at
    # the Shewhart limit so one wild check standard (reported by the 3σ rule) cannot pose as
    # a drift for the next dozen runs (Hawkins 1993).
    ev_up, ev_down, _ = cusum(np.clip(z, -design.width, design.width), design.k, design.h,
                              restart=False)
    smooth = None
    if design.ewma_lambda is not None:
        smooth = ewma(z, design.ewma_lambda)
        c = ewma_halfwidth(design.ewma_lambda, design.ewma_width)
        alarms += [Alarm(int(i), "ewma", "upward" if smooth[i] > 0 else "downward",
                         f"EWMA beyond ±{design.ewma_width:g}σ") for i in
                   np.flatnonzero(np.abs(smooth) > c)]
    rules = run_rules(z, design.width)
    alarms += rules if design.rules else [a for a in rules if a.chart == "shewhart"]
    alarms.sort(key=lambda a: (a.index, a.chart))
    bad = _judged(z, ev_up, ev_down, alarms, design)
    since, direction = _state(z, ev_up, ev_down, bad, design)
    return ChartResult(x, limits, z, upper, lower, ev_up, ev_down, smooth, alarms, bad, since,
                       direction, design)
