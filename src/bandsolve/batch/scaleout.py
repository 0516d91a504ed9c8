"""Scale-out with Dask (optional extra ``bandsolve[dask]``): lazy prediction of huge sets.

:func:`predict_dask` maps the model over row blocks of a Dask array (``map_blocks``) or the
partitions of a Dask DataFrame (``map_partitions``); nothing is computed until you ask, so it
runs on whatever scheduler is active (threads, processes, a ``dask.distributed`` cluster).
Rows are always evaluated in the fixed blocks of :data:`bandsolve.calibration.blocks.EVAL_ROWS`
counted from row 0 (arrays are rechunked to whole blocks), so the numbers are bit-identical to
:func:`bandsolve.batch.predict.predict_inputs` on the same spectra. DataFrame partitions whose
lengths are not whole blocks give results equal to rounding (about 1e-15 relative).

For a batch of files on a cluster use ``bandsolve predict ... --scheduler ADDRESS``
(:func:`bandsolve.batch.predict.run_batch` with ``scheduler=``).
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

from bandsolve.batch.predict import evaluate_set, result_table_columns
from bandsolve.calibration.blocks import EVAL_ROWS
from bandsolve.calibration.model import TEXT_COLUMNS, Calibration
from bandsolve.errors import BandsolveError, DataError
from bandsolve.flags import FLAG_COLUMN, flag_bits
from bandsolve.spectra import SpectralSet

__all__ = ["numeric_columns", "predict_dask"]

def numeric_columns(model: Calibration) -> list[str]:
    """Columns of the array :func:`predict_dask` returns for a Dask array, in order.

    The result-table columns that are numbers, then ``flag_bits`` (the flag bit mask of
    :data:`bandsolve.flags.FLAG_BITS`, as a float).
    """
    return [c for c in result_table_columns(model) if c not in TEXT_COLUMNS] + ["flag_bits"]


def _numeric_block(block: np.ndarray, model: Calibration, axis: np.ndarray,
                   block_info: dict | None = None) -> np.ndarray:
    start = block_info[0]["array-location"][0][0] if block_info else 0
    ids = [f"row{start + i}" for i in range(block.shape[0])]
    spectra = SpectralSet(axis=axis, values=block, sample_ids=ids, axis_unit=model.axis_unit,
                          source="dask array")
    frame = evaluate_set(model, spectra)
    values = frame[numeric_columns(model)[:-1]].to_numpy(dtype=float)
    return np.column_stack([values, flag_bits(frame[FLAG_COLUMN].tolist()).astype(float)])


def _frame_partition(part: pd.DataFrame, model: Calibration, axis: np.ndarray,
                     source: str) -> pd.DataFrame:
    if not len(part):
        return pd.DataFrame({c: pd.Series(dtype=str if c in TEXT_COLUMNS else float)
                             for c in result_table_columns(model)})
    spectra = SpectralSet(axis=axis, values=part.to_numpy(dtype=float),
                          sample_ids=[str(i) for i in part.index], axis_unit=model.axis_unit,
                          source=source)
    return evaluate_set(model, spectra)


def predict_dask(model: Calibration, spectra: Any, *, axis=None,
                 source: str = "dask dataframe") -> Any:
    """Lazy prediction of a Dask array or Dask DataFrame of absorbance spectra.

    Parameters
    ----------
    model : Calibration
    spectra : dask.array.Array of shape (n, p), or dask.dataframe.DataFrame
        Array rows are spectra; sample ids become ``row<i>``. DataFrame rows are spectra,
        the index holds the sample ids and the column labels the axis values.
    axis : array_like of shape (p,), optional
        Axis of an array's columns in the model's unit (default: the model's axis).
    source : str
        Source label of DataFrame rows in the results.

    Returns
    -------
    dask.array.Array of shape (n, len(numeric_columns(model))), or dask.dataframe.DataFrame
        For an array: the numeric result columns (:func:`numeric_columns`); for a DataFrame:
        the full results table of :meth:`Calibration.predict`, one partition per partition.

    Raises
    ------
    DataError
        For input that is neither, or an axis of the wrong length; errors inside the blocks
        (spectra not covering the model range) surface when the result is computed.
    """
    try:
        import dask.array as da
        import dask.dataframe as dd
    except ImportError:
        raise BandsolveError("Dask prediction needs the dask extra: pip install "
                             "'bandsolve[dask]'") from None
    if isinstance(spectra, dd.DataFrame):
        try:
            grid = np.asarray([float(c) for c in spectra.columns])
        except (TypeError, ValueError):
            raise DataError("the DataFrame's column labels must be the axis values "
                            f"(numbers), got {list(spectra.columns)[:3]}...") from None
        meta = _frame_partition(pd.DataFrame(), model, grid, source)
        return spectra.map_partitions(_frame_partition, model, grid, source, meta=meta)
    if not isinstance(spectra, da.Array) or spectra.ndim != 2:
        raise DataError("predict_dask needs a 2-D Dask array (spectra × axis points) or a "
                        "Dask DataFrame")
    grid = np.asarray(model.axis if axis is None else axis, dtype=float)
    if grid.shape != (spectra.shape[1],):
        raise DataError(f"the array has {spectra.shape[1]} points per spectrum but the axis "
                        f"has {grid.size}; pass axis= with one value per column")
    rows = max(EVAL_ROWS, -(-max(spectra.chunks[0]) // EVAL_ROWS) * EVAL_ROWS)
    blocks = spectra.rechunk({0: rows, 1: -1})
    k = len(numeric_columns(model))
    return blocks.map_blocks(_numeric_block, model, grid, dtype=float,
                             chunks=(blocks.chunks[0], (k,)))
