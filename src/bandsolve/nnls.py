"""Non-negative least squares for many spectra at once, from the normal equations.

A CLS prediction solves, for every spectrum x, ``min ‖x − bg − Kᵀc‖²``.  With the products
``h = K(x − bg)`` (one row per spectrum, already computed by the prediction scan) and the
Gram matrix ``G = KKᵀ`` (k×k, the same for all spectra) the objective is
``‖x − bg‖² − 2cᵀh + cᵀGc``: the per-spectrum problem is only k-dimensional and never reads
the spectrum again.  :func:`nnls_gram` solves it with some coefficients constrained to be
≥ 0 (concentrations of analytes that can only be present or absent) and the others free
(baseline terms).

The solver is the active-set method of Lawson & Hanson in its normal-equation form
(Bro & De Jong 1997), run for all spectra together with masks instead of a loop over
spectra.  Each spectrum starts from the sign pattern of its unconstrained estimate; a first
round exchanges every concentration on the wrong side at once (one step of block principal
pivoting, Júdice & Pires 1994), which leaves most spectra solved or within a step or two of
the answer; from there every spectrum not yet solved takes one Lawson-Hanson step per round
(free one concentration, or hold one at zero), which cannot cycle.  The minimizer on a
passive set P needs ``(G_PP)⁻¹``: it is formed once per distinct set met (the reuse of Van
Benthem & Keenan 2004), in one batched inversion per round, and applied to all the spectra
that share it.  Every answer is then checked against the optimality conditions, and a
spectrum that fails (nearly degenerate problems only) is solved again on its own.

References
----------
.. [1] Lawson, C. L., & Hanson, R. J. (1974). *Solving Least Squares Problems*, ch. 23.
   Prentice-Hall.
.. [2] Bro, R., & De Jong, S. (1997). A fast non-negativity-constrained least squares
   algorithm. *Journal of Chemometrics*, 11(5), 393-401.
.. [3] Júdice, J. J., & Pires, F. M. (1994). A block principal pivoting algorithm for
   large-scale strictly monotone linear complementarity problems. *Computers & Operations
   Research*, 21(5), 587-596.
.. [4] Van Benthem, M. H., & Keenan, M. R. (2004). Fast algorithm for the solution of
   large-scale non-negativity-constrained least squares problems. *Journal of
   Chemometrics*, 18(10), 441-450.
"""

from __future__ import annotations

import functools
from dataclasses import dataclass

import numpy as np

__all__ = ["NNLSResult", "nnls_gram"]


@dataclass(frozen=True)
class NNLSResult:
    """Solutions of many bound-constrained least-squares problems.

    Attributes
    ----------
    coef : ndarray, shape (n, k)
        Minimizers; constrained coefficients are ≥ 0.
    at_bound : ndarray of bool, shape (n, k)
        True where a constrained coefficient is held at zero by its bound (the active set).
    objective : ndarray, shape (n,)
        ``cᵀGc − 2cᵀh``: add ``‖x − bg‖²`` to get each spectrum's residual sum of squares.
    """

    coef: np.ndarray
    at_bound: np.ndarray
    objective: np.ndarray


class _PassiveInverses:
    """``(G_PP)⁻¹`` for every passive set P met, each formed once, as a k×k matrix that is zero
    outside P×P, so that ``inverse @ h`` is the minimizer on P."""

    def __init__(self, gram: np.ndarray, bound: np.ndarray):
        self.gram = gram
        # One bit per constrained coefficient (free ones are always passive): a set's number.
        self.bits = np.where(bound, 2.0 ** (np.cumsum(bound) - 1), 0.0)
        m = int(bound.sum())
        # Up to 2^16 possible sets, a table from set number to stored inverse: no sorting.
        self.slot = np.full(2**m, -1) if m <= 16 else None
        self.stack = np.empty((0, *gram.shape))

    def _invert(self, sets: np.ndarray) -> np.ndarray:
        inside = sets[:, :, None] & sets[:, None, :]
        # The identity outside P keeps every matrix invertible without changing the P block.
        outside = np.eye(len(self.gram)) * ~sets[:, :, None]
        inverse = np.linalg.inv(np.where(inside, self.gram, outside))
        inverse[~inside] = 0.0
        return inverse

    def __call__(self, passive: np.ndarray) -> np.ndarray:
        """The inverse for each row's passive set, shape (n, k, k)."""
        if self.slot is None:  # more than 16 constrained coefficients: sort the sets instead
            sets, which = np.unique(passive, axis=0, return_inverse=True)
            return self._invert(sets)[which.reshape(-1)]
        numbers = (passive @ self.bits).astype(np.intp)
        which = self.slot[numbers]
        new = which < 0
        if new.any():
            fresh, first = np.unique(numbers[new], return_index=True)
            self.slot[fresh] = len(self.stack) + np.arange(len(fresh))
            self.stack = np.concatenate([self.stack, self._invert(passive[new][first])])
            which = self.slot[numbers]
        return np.take(self.stack, which, axis=0)


def _row_max(values: np.ndarray) -> np.ndarray:
    """``values.max(axis=1)`` for few columns, one vector operation per column (numpy's
    reduction along a short last axis costs a call per row)."""
    return functools.reduce(np.maximum, values.T)


def _row_min(values: np.ndarray) -> np.ndarray:
    """``values.min(axis=1)``, as :func:`_row_max`."""
    return functools.reduce(np.minimum, values.T)


def _gradient_tolerance(gram: np.ndarray, h: np.ndarray, coef: np.ndarray) -> np.ndarray:
    """Per row, the size of rounding in the gradient ``Gc − h``: 1000 units in the last place
    of its largest terms."""
    size = _row_max(np.abs(h)) + np.abs(gram).max() * _row_max(np.abs(coef))
    return 1e3 * np.finfo(float).eps * size


def _optimal(gram: np.ndarray, h: np.ndarray, coef: np.ndarray, passive: np.ndarray,
             bound: np.ndarray) -> np.ndarray:
    """Which rows satisfy the optimality (Karush-Kuhn-Tucker) conditions to rounding: the
    gradient ``Gc − h`` vanishes on the passive set and is ≥ 0 where a concentration is held
    at zero, and constrained coefficients are ≥ 0 (Lawson & Hanson 1974, ch. 23)."""
    grad = coef @ gram - h
    tol = _gradient_tolerance(gram, h, coef)[:, None]
    kkt = np.where(passive, np.abs(grad) <= tol, grad >= -tol) & (~bound | (coef >= 0.0))
    return functools.reduce(np.logical_and, kkt.T)


def _exact_rows(gram: np.ndarray, h: np.ndarray, bound: np.ndarray) -> np.ndarray:
    """The same minimizers, one row at a time, with ``scipy.optimize.nnls``.

    The free coefficients are eliminated first (Schur complement S of their block); with
    ``S = RᵀR`` the objective is ``‖Rc − R⁻ᵀh‖²`` up to a constant, an NNLS problem of the
    constrained coefficients alone.
    """
    from scipy.optimize import nnls  # needed only for nearly degenerate problems

    free = ~bound
    g_ff, g_fb = gram[np.ix_(free, free)], gram[np.ix_(free, bound)]
    elim = np.linalg.solve(g_ff, g_fb)
    upper = np.linalg.cholesky(gram[np.ix_(bound, bound)] - g_fb.T @ elim).T
    target = np.linalg.solve(upper.T, (h[:, bound] - h[:, free] @ elim).T).T
    coef = np.zeros_like(h)
    if bound.any():  # (scipy's nnls must not be called with no columns)
        coef[:, bound] = [nnls(upper, row, maxiter=50 * len(upper))[0] for row in target]
    coef[:, free] = np.linalg.solve(g_ff, (h[:, free] - coef[:, bound] @ g_fb.T).T).T
    return coef


def _lawson_hanson(gram: np.ndarray, h: np.ndarray, bound: np.ndarray,
                   inverses: _PassiveInverses, limit: int) -> tuple[np.ndarray, np.ndarray]:
    """The active-set iteration for all rows at once: coefficients and passive sets (rows not
    solved within ``limit`` rounds come back as zero with only the free coefficients passive).
    """
    n = len(h)
    # Start from the sign pattern of the unconstrained minimizer.
    unconstrained = h @ np.linalg.inv(gram)
    free = (unconstrained > 0.0) | ~bound
    tol = _gradient_tolerance(gram, h, unconstrained)
    coef, passive = np.zeros_like(h), np.broadcast_to(~bound, h.shape).copy()
    rows, hh = np.arange(n), h  # the rows not yet solved, and their products
    for round_ in range(limit):
        z = np.einsum("nij,nj->ni", inverses(free), hh)
        bad = (z <= 0.0) & free & bound
        if round_ == 0:
            # One exchange of block principal pivoting (Júdice & Pires 1994): every negative
            # concentration is held at zero and every held one whose gradient wants it
            # positive is freed, from the feasible point z with negatives set to zero.
            flip = bad | (~free & bound & (hh - z @ gram > tol[:, None]))
            c = np.where(bound, np.maximum(z, 0.0), z)
            solved = ~functools.reduce(np.logical_or, flip.T)
            free ^= flip
        else:
            # Lawson-Hanson: if the minimizer on the passive set is not feasible, move from c
            # towards it until the first concentration reaches zero, and hold that one at zero.
            ratio = np.full(z.shape, np.inf)
            np.divide(c, np.maximum(c - z, np.finfo(float).tiny), out=ratio, where=bad)
            step = _row_min(ratio)
            feasible = step > 1.0
            c += np.minimum(step, 1.0)[:, None] * (z - c)
            np.copyto(c, z, where=feasible[:, None])
            held = bad & ((ratio <= step[:, None]) | (c <= 0.0))
            c[held] = 0.0
            free &= ~held
            # At a feasible minimizer, free the held concentration whose gradient most wants
            # it positive; if none does, the spectrum is solved.
            w = np.where(free | ~feasible[:, None], -np.inf, hh - c @ gram)
            best = np.argmax(w, axis=1)
            more = np.take_along_axis(w, best[:, None], axis=1)[:, 0] > tol
            free[more, best[more]] = True
            solved = feasible & ~more
        done = np.flatnonzero(solved)
        coef[rows[done]], passive[rows[done]] = c[done], free[done]
        keep = np.flatnonzero(~solved)
        rows, c, free, hh, tol = rows[keep], c[keep], free[keep], hh[keep], tol[keep]
        if rows.size == 0:
            break
    return coef, passive


def nnls_gram(gram, h, constrained=None, max_iter: int | None = None) -> NNLSResult:
    """Minimize ``cᵀGc − 2cᵀh`` for every row of h, with ``c_j ≥ 0`` where constrained.

    Parameters
    ----------
    gram : array_like, shape (k, k)
        ``G = KKᵀ``, symmetric positive definite (K of full row rank).
    h : array_like, shape (n, k)
        ``K(x − bg)`` of each spectrum, in AU × (AU per unit concentration).
    constrained : array_like of bool, shape (k,), optional
        Which coefficients must be ≥ 0 (default: all), e.g. the analytes but not the
        baseline terms.
    max_iter : int, optional
        Most rounds (steps of the active-set method) for the batch (default ``5k``); rows
        not solved by then are solved one at a time by ``scipy.optimize.nnls``.

    Returns
    -------
    NNLSResult
        Rows of h that are not finite get NaN coefficients and no coefficient at the bound.

    Notes
    -----
    Because G is positive definite the problem is strictly convex, so its minimizer is
    unique: any correct solver, scipy's per-spectrum ``nnls`` on ``(Kᵀ, x − bg)`` included,
    returns the same coefficients up to rounding.  The normal-equation form squares the
    condition number of K, which costs digits only for nearly collinear pure spectra: for ten
    Gaussian bands overlapping so much that cond(K) = 5.6e3, answers differ from scipy's
    QR-based ``nnls`` by about 1e-8, and so does an exact solution of the same rounded
    products; for cond(K) ≤ 300, by less than 1e-10.

    Every row's answer is checked against the optimality (Karush-Kuhn-Tucker) conditions
    before it is returned: the gradient ``Gc − h`` vanishes on the free and positive
    coefficients and is ≥ 0 on those held at zero, to rounding.  A row that fails (nearly
    degenerate problems only) is solved again by ``scipy.optimize.nnls``.

    Examples
    --------
    >>> import numpy as np
    >>> K = np.array([[1.0, 0.0, 1.0], [0.0, 1.0, 1.0]])
    >>> x = np.array([[2.0, -1.0, 1.0]])
    >>> nnls_gram(K @ K.T, x @ K.T).coef.round(12)
    array([[1.5, 0. ]])
    """
    gram = np.asarray(gram, dtype=float)
    h = np.atleast_2d(np.asarray(h, dtype=float))
    k = h.shape[1]
    finite = functools.reduce(np.logical_and, np.isfinite(h).T)
    bound = np.ones(k, bool) if constrained is None else np.asarray(constrained, bool)
    limit = 5 * k if max_iter is None else int(max_iter)
    inverses = _PassiveInverses(gram, bound)
    coef, passive = _lawson_hanson(gram, h, bound, inverses, limit)
    # Check every spectrum; where rounding in the inverse leaves too large a gradient on the
    # passive set, one step of iterative refinement; what still fails is solved one by one.
    retry = np.flatnonzero(finite & ~_optimal(gram, h, coef, passive, bound))
    if retry.size:
        coef[retry] += np.einsum("nij,nj->ni", inverses(passive[retry]),
                                 h[retry] - coef[retry] @ gram)
        retry = retry[~_optimal(gram, h[retry], coef[retry], passive[retry], bound)]
    if retry.size:
        coef[retry] = _exact_rows(gram, h[retry], bound)
        passive[retry] = (coef[retry] != 0.0) | ~bound
    coef[~finite], passive[~finite] = np.nan, True  # a spectrum with missing values: no estimate
    objective = ((coef @ gram - 2.0 * h) * coef) @ np.ones(k)
    return NNLSResult(coef, bound & ~passive, objective)
