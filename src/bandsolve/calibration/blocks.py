"""How a calibration reads spectra: fixed blocks of rows, one scan pass each, on all cores.

:meth:`~bandsolve.calibration.model.Calibration.detail` evaluates absorbance in blocks of
:data:`EVAL_ROWS` rows counted from the first row given, so a spectrum's numbers never depend
on how a batch was chunked, how many jobs ran it or on which engine. Each block is read once
for every estimator's products, sums of squares and the largest absorbance
(:mod:`bandsolve._scan`); blocks run on all cores at once.
"""

from __future__ import annotations

import itertools
import os
from collections.abc import Callable, Sequence
from concurrent.futures import ThreadPoolExecutor
from typing import Any

import numpy as np

from bandsolve._scan import ScanParts, embed, scan
from bandsolve._threads import single_blas_thread
from bandsolve.calibration.detail import Detail
from bandsolve.errors import DataError
from bandsolve.preprocess import SpectralPreprocessor

__all__ = ["EVAL_ROWS", "in_blocks", "scan_block"]

#: Threads evaluating blocks at once (each block's numbers do not depend on which thread).
_CORES = max(1, min(os.cpu_count() or 1, 8))

#: Rows per evaluation block: spectra are always evaluated in these fixed blocks (counted from
#: the first row given) so results do not depend on how a batch is chunked. Blocks are
#: evaluated on all cores at once; inside a block, spectra are read in cache-sized slices
#: (:mod:`bandsolve._scan`). Measured on 2 cores, 2×10⁵ × 300: 4096 rows 6.7× the
#: memory-read floor, 8192 rows 5.4× (CLS).
EVAL_ROWS = 8192


def _scan_all(data: np.ndarray, parts: list[ScanParts], mask: np.ndarray | None
              ) -> tuple[list[tuple[np.ndarray, np.ndarray]], np.ndarray]:
    """Scan products of every estimator in one pass over the spectra (PLS1: one per analyte).

    Estimators with different column scales need different weighted sums of squares: each
    distinct set of weights becomes one column of the scan's weight matrix.
    """
    weights: list[np.ndarray] = []
    which = []
    for p in parts:
        found = next((k for k, w in enumerate(weights) if np.array_equal(w, p.weights)), None)
        if found is None:
            weights.append(p.weights)
            found = len(weights) - 1
        which.append(found)
    shared = weights[0] if len(weights) == 1 else np.column_stack(weights)
    H, ss, top = scan(data, ScanParts(np.hstack([p.matrix for p in parts]), shared), mask)
    bounds = np.cumsum([0] + [p.matrix.shape[1] for p in parts])
    return [(H[:, a:b], ss if ss.ndim == 1 else ss[:, k])
            for (a, b), k in zip(itertools.pairwise(bounds), which, strict=True)], top


def scan_block(X: np.ndarray, preprocessor: SpectralPreprocessor, estimators: Sequence[Any]
               ) -> tuple[list[tuple[np.ndarray, np.ndarray]], np.ndarray]:
    """Every estimator's scan products of one block of absorbance on the model grid.

    Parameters
    ----------
    X : ndarray, shape (n, p)
        Absorbance on the model's axis, row-major.
    preprocessor : SpectralPreprocessor
        The calibration's fitted preprocessing.
    estimators : sequence
        Fitted estimators; each gives its :meth:`scan_parts`.

    Returns
    -------
    scans : list of (H, ss)
        Per estimator: products, shape (n, c), and weighted sums of squares, shape (n,).
    top : ndarray, shape (n,)
        Largest absorbance of each spectrum in the used points (AU), for the ceiling flag.

    Raises
    ------
    DataError
        A NaN or infinity in a used point.
    """
    pre, mask = preprocessor, preprocessor.used_mask
    parts = [est.scan_parts() for est in estimators]
    if pre.savgol_window is None and not pre.offset:
        # A window only selects points: fold it into the scan (zero rows outside it),
        # so each spectrum is read once for products, sums of squares and its maximum.
        data = X
        if not mask.all():
            parts = [embed(p, mask) for p in parts]
    else:
        data = pre.apply(X)
    scans, top = _scan_all(data, parts, mask if data is X else None)
    if data is not X:
        top = X.max(axis=1, where=mask, initial=-np.inf)
    # A NaN or infinity anywhere in a used point reaches the sums of squares; checking
    # them is cheaper than another pass over the spectra.
    if not (all(np.isfinite(ss).all() for _, ss in scans) and np.isfinite(top).all()):
        raise DataError("spectra contain NaN or infinite values; fix or remove them")
    return scans, top


def in_blocks(X: np.ndarray, evaluate: Callable[[np.ndarray], Detail]) -> Detail:
    """``evaluate`` applied to fixed blocks of :data:`EVAL_ROWS` rows of X, joined in order.

    Few blocks run one after another; many run one per core at once (numpy releases the GIL
    in BLAS and ufunc loops), each with a single BLAS thread.
    """
    starts = range(0, len(X), EVAL_ROWS)
    with single_blas_thread():
        if len(starts) < 2 * _CORES:
            blocks = [evaluate(X[i:i + EVAL_ROWS]) for i in starts]
        else:
            with ThreadPoolExecutor(_CORES) as pool:
                blocks = list(pool.map(lambda i: evaluate(X[i:i + EVAL_ROWS]), starts))
    if len(blocks) == 1:
        return blocks[0]
    first = blocks[0]
    return Detail(
        concentrations=np.vstack([b.concentrations for b in blocks]),
        standard_errors=np.vstack([b.standard_errors for b in blocks]),
        dof=first.dof,
        residual_ratio=np.concatenate([b.residual_ratio for b in blocks]),
        t2_ratio=np.concatenate([b.t2_ratio for b in blocks]),
        leverage_ratio=np.concatenate([b.leverage_ratio for b in blocks]),
        notes=first.notes,
        max_absorbance=np.concatenate([b.max_absorbance for b in blocks]),
    )
