"""Spectral images: a cube of spectra (rows × columns × wavelengths) to concentration maps.

Input: a ``.npy`` array of absorbance, shape (rows, cols, p), read memory-mapped (never
pickled). The spectral axis comes from, in order: the ``axis`` argument; a sidecar file
``<cube stem>.axis.npy`` (1-D, in the model's axis unit) beside the cube; the model's own axis
when the cube has exactly as many points (the results' notes say it was assumed). A cube on
another axis covering the model's range is resampled like any spectra.

Output, in the output folder: ``<stem>.<analyte>.npy`` (rows × cols float64) per analyte
(the analyte label made file-safe) and ``<stem>.flags.npy`` (rows × cols uint16), a bit mask
with the bits of :data:`bandsolve.flags.FLAG_BITS`. Pixels go through the same chunked,
parallel path as batch prediction (:mod:`bandsolve.batch.predict`), so the numbers equal
those of the table.
"""

from __future__ import annotations

import os
import re
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from bandsolve.batch.predict import predict_sets
from bandsolve.batch.tasks import DEFAULT_CHUNK, iter_array_sets
from bandsolve.calibration.model import Calibration
from bandsolve.errors import DataError, FormatError
from bandsolve.flags import FLAG_COLUMN, flag_bits
from bandsolve.io.atomic import atomic_write, output_folder

__all__ = ["CubeResult", "predict_cube"]

@dataclass(frozen=True)
class CubeResult:
    """Files written for one cube and what was assumed.

    Attributes
    ----------
    maps : dict of str to Path
        Concentration map file per analyte label.
    flag_map : Path
    shape : tuple of int
        (rows, cols) of the maps.
    notes : str
        Notes of the prediction (resampling, assumed axis).
    """

    maps: dict[str, Path]
    flag_map: Path
    shape: tuple[int, int]
    notes: str


def _axis_for(model: Calibration, path: Path, p: int, axis) -> tuple[np.ndarray, str]:
    sidecar = path.with_name(path.stem + ".axis.npy")
    if axis is not None:
        return np.asarray(axis, dtype=float), ""
    if sidecar.is_file():
        return np.load(sidecar, allow_pickle=False).astype(float), ""
    if p == model.axis.size:
        return np.asarray(model.axis), "axis assumed to be the model's (no sidecar file)"
    raise DataError(f"{path}: {p} wavelengths per pixel but the model has {model.axis.size}, "
                    f"and no axis file {sidecar.name} was found; save the cube's axis there")


def _safe(label: str) -> str:
    return re.sub(r"[^A-Za-z0-9._-]+", "_", label).strip("_") or "analyte"


def predict_cube(model: Calibration, path: str | os.PathLike[str],
                 out_folder: str | os.PathLike[str], *, axis=None,
                 chunk_size: int = DEFAULT_CHUNK, n_jobs: int = 1) -> CubeResult:
    """Concentration and flag maps of a spectral image cube (see the module notes).

    Parameters
    ----------
    model : Calibration
    path : path-like
        ``.npy`` cube of absorbance, shape (rows, cols, p).
    out_folder : path-like
        Folder for the map files (created when absent, in an existing parent folder); each
        file is written atomically.
    axis : array_like of shape (p,), optional
        Spectral axis of the cube in the model's unit.
    chunk_size, n_jobs
        As in :func:`bandsolve.batch.predict.run_batch`.

    Returns
    -------
    CubeResult
    """
    path = Path(path)
    try:
        cube = np.load(path, mmap_mode="r", allow_pickle=False)
    except (OSError, ValueError) as exc:
        raise FormatError(f"{path}: not a readable .npy array ({exc})") from None
    if cube.ndim != 3 or not np.issubdtype(cube.dtype, np.number):
        raise FormatError(f"{path}: expected a numeric rows × columns × wavelengths array, "
                          f"got shape {cube.shape} of {cube.dtype}")
    rows, cols, p = cube.shape
    grid, note = _axis_for(model, path, p, axis)
    if grid.shape != (p,):
        raise DataError(f"{path}: the axis has {grid.size} points but the cube has {p}")
    flat = cube.reshape(rows * cols, p)
    sets = iter_array_sets(flat, grid, model.axis_unit, str(path), task_rows=chunk_size)
    conc = np.empty((rows * cols, model.n_analytes))
    bits = np.empty(rows * cols, dtype=np.uint16)
    notes = ""
    start = 0
    for frame in predict_sets(model, sets, n_jobs):
        stop = start + len(frame)
        conc[start:stop] = frame[list(model.analytes)].to_numpy(dtype=float)
        bits[start:stop] = flag_bits(frame[FLAG_COLUMN].tolist())
        notes = str(frame["notes"].iloc[0])
        start = stop
    out = output_folder(out_folder, option="--out")
    maps = {}
    for k, label in enumerate(model.analytes):
        maps[label] = out / f"{path.stem}.{_safe(label)}.npy"
        _save(maps[label], conc[:, k].reshape(rows, cols))
    flag_map = out / f"{path.stem}.flags.npy"
    _save(flag_map, bits.reshape(rows, cols))
    return CubeResult(maps, flag_map, (rows, cols), "; ".join(x for x in (note, notes) if x))


def _save(target: Path, array: np.ndarray) -> None:
    with atomic_write(target, "wb") as handle:
        np.save(handle, array, allow_pickle=False)

