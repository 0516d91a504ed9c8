"""Design point generators: cyclic multilevel designs, D-optimal exchange, validation points."""

from __future__ import annotations

import itertools
import math
import warnings
from collections.abc import Callable, Sequence

import numpy as np
from numpy.typing import ArrayLike, NDArray

from bandsolve.design.amounts import AnalyteRange
from bandsolve.errors import BandsolveWarning, DataError
from bandsolve.progress import ProgressCallback, step

__all__ = [
    "CYCLIC_GENERATORS",
    "cyclic_design",
    "d_efficiency",
    "d_optimal_design",
    "level_values",
    "range_decimals",
    "validation_set",
]

Constraint = Callable[[NDArray[np.float64]], NDArray[np.bool_]]

# Primitive order-2 recurrences s[t+2] = alpha*s[t+1] + beta*s[t] (mod l), start (0, 1).
# l = 5: x^2 - x - 3 is primitive over GF(5) (period 24), Brereton (1997).
# l = 3: x^2 - 2x - 1 = x^2 + x + 2 is primitive over GF(3) (period 8).
CYCLIC_GENERATORS: dict[int, tuple[int, int]] = {5: (1, 3), 3: (2, 1)}
# Largest number of columns that are pairwise balanced (every level pair once): l + 1 shifts
# apart, column j is a multiple (mod l) of column 1. For l = 5, up to 12 columns stay
# uncorrelated, but columns 6 shifts apart are functionally linked.
_RECOMMENDED = {5: 6, 3: 4}
_UNCORRELATED = {5: 12, 3: 4}
_MAX_CANDIDATES = 200_000


def level_values(levels: int) -> NDArray[np.float64]:
    """Coded levels of an ``levels``-level factor, symmetric about 0 (5 → −2, −1, 0, 1, 2)."""
    return np.arange(levels, dtype=float) - (levels - 1) / 2


def _recurrence(levels: int) -> NDArray[np.int64]:
    alpha, beta = CYCLIC_GENERATORS[levels]
    period = levels**2 - 1
    seq = np.zeros(period, dtype=np.int64)
    seq[1] = 1
    for t in range(period - 2):
        seq[t + 2] = (alpha * seq[t + 1] + beta * seq[t]) % levels
    return seq


def cyclic_design(n_factors: int, levels: int = 5) -> NDArray[np.float64]:
    """Multilevel calibration design built from a cyclic generator over GF(l).

    A primitive order-2 recurrence over GF(l) gives a sequence of period l² − 1 in which every
    ordered pair of consecutive-state values except (0, 0) occurs once. Its values are relabelled
    symmetrically (l = 5: 0, 1, 2, 3, 4 → 0, 1, 2, −2, −1; l = 3: 0, 1, 2 → 0, 1, −1), column j
    is the sequence shifted cyclically by j − 1, and one all-centre row is appended.

    Parameters
    ----------
    n_factors : int
        Number of analytes (columns). l = 5: up to 6 recommended, 7–12 allowed with a warning;
        l = 3: up to 4.
    levels : {5, 3}
        Number of concentration levels.

    Returns
    -------
    ndarray of shape (l², n_factors)
        Coded levels, −2..2 (l = 5) or −1..1 (l = 3). Each level appears l times per column;
        any two of the first l + 1 columns contain all l² level pairs and are uncorrelated.

    Raises
    ------
    DataError
        For another number of levels or too many factors.

    Warns
    -----
    BandsolveWarning
        For l = 5 and 7–12 factors: the columns stay uncorrelated, but columns six shifts
        apart are functionally linked (one is twice the other, mod 5), so interaction and
        curvature terms of those analytes cannot be told apart.

    References
    ----------
    Brereton, R. G. (1997). Multilevel multifactor designs for multivariate calibration.
    Analyst, 122, 1521–1529.
    """
    if levels not in CYCLIC_GENERATORS:
        raise DataError(f"cyclic designs are available for 3 or 5 levels, not {levels}; "
                        "use levels=5 or levels=3, or a D-optimal design for other level counts")
    if not 1 <= n_factors <= _UNCORRELATED[levels]:
        raise DataError(
            f"a {levels}-level cyclic design handles 1 to {_UNCORRELATED[levels]} analytes, "
            f"not {n_factors}; use a D-optimal design with more runs for more analytes"
        )
    if n_factors > _RECOMMENDED[levels]:
        warnings.warn(
            f"{n_factors} analytes in a {levels}-level cyclic design: the columns are "
            "uncorrelated, but columns 6 shifts apart are functionally linked (one is twice the "
            "other, mod 5), so nonlinear or interaction effects of those analytes are confounded; "
            "keep to 6 analytes or use a D-optimal design with more runs",
            BandsolveWarning,
            stacklevel=2,
        )
    relabel = np.array([v if v <= levels // 2 else v - levels for v in range(levels)], dtype=float)
    seq = relabel[_recurrence(levels)]
    columns = [np.roll(seq, -shift) for shift in range(n_factors)]
    return np.vstack([np.column_stack(columns), np.zeros((1, n_factors))])


def d_efficiency(coded: ArrayLike, half_range: float) -> float:
    """D-efficiency ``det(DᵀD)^(1/p) / n`` of a design for the model intercept + linear terms.

    ``D`` holds a column of ones and the coded levels divided by ``half_range`` (so that they
    span −1..1); p is the number of model terms and n the number of runs. It is 1 for a two-level
    orthogonal design and lower for designs with interior levels or correlated columns.
    """
    x = np.asarray(coded, dtype=float) / half_range
    model = np.column_stack([np.ones(len(x)), x])
    sign, logdet = np.linalg.slogdet(model.T @ model)
    return float(np.exp(logdet / model.shape[1]) / len(x)) if sign > 0 else 0.0


def _candidate_grid(n_factors: int, levels: int) -> NDArray[np.float64]:
    if levels < 2:
        raise DataError(f"a D-optimal design needs at least 2 levels per analyte, not {levels}")
    if levels**n_factors > _MAX_CANDIDATES:
        raise DataError(
            f"{levels} levels for {n_factors} analytes give {levels**n_factors} candidate "
            "mixtures, too many to search; use fewer levels or pass your own candidates"
        )
    return np.array(list(itertools.product(level_values(levels), repeat=n_factors)))


def _exchange(
    model: NDArray[np.float64], start: NDArray[np.intp], max_iter: int
) -> NDArray[np.intp]:
    """Fedorov point exchange: swap the design/candidate pair that most raises det(DᵀD)."""
    idx = start.copy()
    n_terms = model.shape[1]
    for _ in range(max_iter):
        info = model[idx].T @ model[idx]
        # A tiny ridge keeps the first steps defined when the random start is singular.
        inv = np.linalg.inv(info + 1e-9 * np.trace(info) / n_terms * np.eye(n_terms))
        scaled = model @ inv
        var = np.einsum("ij,ij->i", scaled, model)
        cross = scaled[idx] @ model.T
        gain = var[None, :] - var[idx][:, None] * (1 + var[None, :]) + cross**2
        i, j = np.unravel_index(np.argmax(gain), gain.shape)
        if gain[i, j] <= 1e-9:
            break
        idx[i] = j
    return idx


def d_optimal_design(
    n_runs: int,
    n_factors: int,
    levels: int = 5,
    *,
    candidates: ArrayLike | None = None,
    constraints: Constraint | Sequence[Constraint] | None = None,
    n_starts: int = 5,
    max_iter: int = 500,
    random_state: int | np.random.Generator | None = 0,
    progress: ProgressCallback | None = None,
    quadratic: bool = False,
) -> NDArray[np.float64]:
    """D-optimal design chosen from a candidate grid by Fedorov point exchange.

    The model is intercept + linear terms, ``D = [1, x_1 … x_k]``; the design maximises
    ``det(DᵀD)``, which minimises the joint confidence region of the linear calibration
    coefficients. Starting from random candidate subsets, the exchange repeatedly replaces the
    design point and candidate whose swap raises the determinant most (by the factor
    ``1 + Δ``), until no swap helps; the best of ``n_starts`` starts is returned. Points may
    repeat (replicate mixtures). For the linear model the optimum uses only the extreme
    levels, so the design cannot reveal curvature; ``quadratic=True`` adds a squared term per
    analyte (``x_k²``), which needs three levels of every analyte to be estimated, so the
    chosen mixtures include the centre level.

    Parameters
    ----------
    n_runs : int
        Number of mixtures; at least ``n_factors + 1``.
    n_factors : int
        Number of analytes.
    levels : int, default 5
        Levels per analyte of the full-factorial candidate grid, coded symmetrically about 0
        (5 → −2..2). Ignored when ``candidates`` is given.
    candidates : array-like of shape (N, n_factors), optional
        Your own candidate mixtures in coded units.
    constraints : callable or sequence of callables, optional
        Each maps the (N, n_factors) candidate array to a boolean mask of acceptable
        mixtures, for example a ceiling on total concentration or predicted absorbance.
        Candidates failing any constraint are removed before the search.
    n_starts : int, default 5
        Number of random starts.
    max_iter : int, default 500
        Largest number of exchanges per start.
    random_state : int, Generator or None, default 0
        Random state of the random starts.
    progress : callable, optional
        ``progress(done, total, label)`` after each start (see :mod:`bandsolve.progress`).
    quadratic : bool, default False
        Model intercept + linear + pure quadratic terms (needs ``2·n_factors + 1`` runs).

    Returns
    -------
    ndarray of shape (n_runs, n_factors)
        Coded levels of the chosen mixtures.

    Raises
    ------
    DataError
        If too few runs or too few acceptable candidates remain.

    References
    ----------
    Fedorov, V. V. (1972). Theory of Optimal Experiments. Academic Press.
    Brereton, R. G. (1997). Analyst, 122, 1521–1529 (D-optimal alternative for constrained
    ranges or arbitrary run counts).
    """
    grid = (_candidate_grid(n_factors, levels) if candidates is None
            else np.asarray(candidates, dtype=float))
    if grid.ndim != 2 or grid.shape[1] != n_factors:
        raise DataError(f"candidates must have {n_factors} columns (one per analyte), "
                        f"got an array of shape {grid.shape}")
    if constraints is not None:
        for rule in [constraints] if callable(constraints) else constraints:
            grid = grid[np.asarray(rule(grid), dtype=bool)]
    n_terms = (2 if quadratic else 1) * n_factors + 1
    if n_runs < n_terms:
        terms = "a linear and a squared term" if quadratic else "one term"
        raise DataError(f"a design for {n_factors} analytes needs at least {n_terms} mixtures "
                        f"(intercept + {terms} per analyte), not {n_runs}; ask for more runs")
    model = np.column_stack([np.ones(len(grid)), grid] + ([grid**2] if quadratic else []))
    if len(grid) == 0 or np.linalg.matrix_rank(model) < n_terms:
        raise DataError(
            f"the constraints leave {len(grid)} candidate mixtures, too few to separate "
            f"{n_factors} analytes; relax the constraints (e.g. a lower top concentration "
            "or a shorter path length)"
        )
    rng = np.random.default_rng(random_state)
    best, best_logdet = None, -np.inf
    for i in range(n_starts):
        start = rng.choice(len(grid), n_runs, replace=n_runs > len(grid))
        idx = _exchange(model, start, max_iter)
        step(progress, i + 1, n_starts, "D-optimal search")
        sign, logdet = np.linalg.slogdet(model[idx].T @ model[idx])
        if sign > 0 and logdet > best_logdet:
            best, best_logdet = idx, logdet
    if best is None:
        raise DataError("no D-optimal design with a nonsingular model was found; "
                        "ask for more runs or more starts (n_starts)")
    return grid[best]


def range_decimals(ranges: Sequence[AnalyteRange], figures: int = 3) -> list[int]:
    """Decimals that give each range's width ``figures`` significant figures.

    The last kept digit is that of the ``figures``-th significant figure of ``high − low``:
    with 3 figures a 0-10 mg/L range is written in 0.1 mg/L steps (10.0) and a 0-5 mg/L range
    in 0.01 mg/L steps (5.00), so every range holds at least 10^(figures−1) steps.

    Parameters
    ----------
    ranges : sequence of AnalyteRange
        One range per analyte.
    figures : int, default 3
        Significant figures of the range width; at least 1.

    Returns
    -------
    list of int
        Decimals per analyte (negative for wide ranges: −1 rounds to tens).
    """
    if figures < 1:
        raise DataError(f"significant figures must be at least 1, not {figures}")
    return [figures - 1 - math.floor(math.log10(r.high - r.low)) for r in ranges]


def validation_set(
    ranges: Sequence[AnalyteRange],
    n: int,
    calibration_points: ArrayLike,
    random_state: int | np.random.Generator | None = None,
    decimals: int | Sequence[int] | None = None,
) -> NDArray[np.float64]:
    """Random validation mixtures inside the analyte ranges, none equal to a calibration point.

    Parameters
    ----------
    ranges : sequence of AnalyteRange
        One range per analyte (m analytes).
    n : int
        Number of validation mixtures.
    calibration_points : array-like of shape (n_cal, m)
        Calibration concentrations, in the units of ``ranges``.
    random_state : int, Generator or None
        Random state of the random draws.
    decimals : int or sequence of int, optional
        Round concentrations to this many decimals (as they would be written on a label); a
        sequence gives one count per analyte (see :func:`range_decimals`).

    Returns
    -------
    ndarray of shape (n, m)
        Concentrations, uniformly distributed in each range; no row equals a calibration
        mixture or another validation mixture (all concentrations within 1e-9 of the range).

    Raises
    ------
    DataError
        If that many distinct mixtures cannot be found (too coarse a rounding).
    """
    low = np.array([r.low for r in ranges])
    high = np.array([r.high for r in ranges])
    tol = 1e-9 * (high - low)
    taken = np.asarray(calibration_points, dtype=float).reshape(-1, len(ranges))
    rng = np.random.default_rng(random_state)
    places = None if decimals is None else np.broadcast_to(decimals, low.shape)
    chosen: list[NDArray[np.float64]] = []
    for _ in range(1000 * n):
        point = rng.uniform(low, high)
        if places is not None:
            rounded = [round(float(v), int(d)) for v, d in zip(point, places, strict=True)]
            point = np.clip(rounded, low, high)
        if not np.any(np.all(np.abs(taken - point) <= tol, axis=1)):
            chosen.append(point)
            taken = np.vstack([taken, point])
        if len(chosen) == n:
            break
    if len(chosen) == n:
        return np.array(chosen).reshape(n, len(ranges))
    raise DataError(
        f"could not find {n} validation mixtures that differ from the calibration mixtures "
        f"(found {len(chosen)}); ask for fewer validation mixtures or round to more decimals"
    )
