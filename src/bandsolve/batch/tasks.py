"""Cutting batch inputs into prediction tasks of whole evaluation blocks.

One input (a file, a folder or ``-`` for standard input) is read as whole spectral sets or, for
a wide text table of any size, as blocks of lines still to parse (:func:`read_input`). Its
parts are re-cut into tasks of whole evaluation blocks of :data:`EVAL_ROWS` rows counted from
the input's first spectrum, at most ``chunk_size`` spectra and about :data:`TASK_BYTES` of text
each (:func:`cut_tasks`), so that every spectrum is evaluated in the same block whatever the
chunking. Arrays (spectral images) are cut the same way (:func:`iter_array_sets`).
"""

from __future__ import annotations

import itertools
import os
from collections.abc import Iterable, Iterator, Sequence
from dataclasses import replace
from pathlib import Path
from typing import Any

import numpy as np

from bandsolve.calibration.blocks import EVAL_ROWS
from bandsolve.errors import DataError, FormatError
from bandsolve.io._wide import RowBlock, cut_rows
from bandsolve.io.csv_spectra import WideRows
from bandsolve.spectra import SpectralSet

__all__ = ["DEFAULT_CHUNK", "TASK_BYTES", "cut_tasks", "iter_array_sets", "read_input"]

#: Text of a wide table held by one task, at most (bytes), unless one evaluation block of
#: :data:`EVAL_ROWS` rows is longer: memory is bounded by bytes, not by a count of rows.
TASK_BYTES = 16 << 20

#: Most spectra per task unless told otherwise (rounded up to whole evaluation blocks).
DEFAULT_CHUNK = 10_000


def read_input(item: str, options: dict[str, Any], stdin_text: str | None
               ) -> Iterator[SpectralSet | WideRows]:
    """The spectra of one input: blocks of rows still to parse for a wide text table (every
    size alike), else whole spectral sets."""
    from bandsolve.io import read_spectra, read_spectra_text
    from bandsolve.io.csv_spectra import open_spectra_text
    from bandsolve.io.jcamp import JCAMP_SUFFIXES

    if item == "-":
        yield read_spectra_text(stdin_text or "", source="<stdin>", **options)
        return
    if not os.path.exists(item):
        if os.path.islink(item):
            raise DataError(f"{item}: a symbolic link to {os.readlink(item)}, which does not "
                            "exist; fix or remove the link")
        raise DataError(f"{item}: no such file; check the path")
    path = Path(item)
    if (path.is_dir() or path.suffix.lower() in JCAMP_SUFFIXES
            or options.get("replicates") == "average"):
        yield read_spectra(item, **options)
        return
    stream = {k: v for k, v in options.items() if k != "replicates"}
    with open_spectra_text(item, **stream) as opened:
        if isinstance(opened, SpectralSet):
            yield opened
        else:
            yield from opened


def cut_tasks(parts: Iterator[SpectralSet | WideRows], chunk_size: int
              ) -> Iterator[SpectralSet | WideRows]:
    """Re-cut one input's parts into tasks of whole evaluation blocks."""
    first = next(parts, None)
    if first is None:
        return
    rest = itertools.chain([first], parts)
    if isinstance(first, SpectralSet):
        yield from _regroup(rest, _task_rows(chunk_size))
        return
    text = sum(len(b.data) for b in first.blocks)
    bytes_per_row = max(text / max(len(first), 1), 1.0)
    by_bytes = max(1, int(TASK_BYTES // (EVAL_ROWS * bytes_per_row))) * EVAL_ROWS
    yield from _regroup_rows(rest, min(_task_rows(chunk_size), by_bytes))


def _regroup_rows(parts: Iterable[WideRows], task_rows: int) -> Iterator[WideRows]:
    """Blocks of rows re-cut into tasks of exactly ``task_rows`` rows (the last may be short);
    only the block that straddles two tasks is copied."""
    pending: list[RowBlock] = []
    held, first, model_part = 0, True, None
    for part in parts:
        model_part = part
        for block in part.blocks:
            while held + len(block) >= task_rows:
                need = task_rows - held
                head, block = cut_rows(block, need) if need < len(block) else (block, None)
                yield replace(part, blocks=(*pending, head), first=first)
                first, pending, held = False, [], 0
                if block is None:
                    break
            if block is not None and len(block):
                pending.append(block)
                held += len(block)
    if held and model_part is not None:
        yield replace(model_part, blocks=tuple(pending), first=first)


def _rows(s: SpectralSet, start: int, stop: int) -> SpectralSet:
    if start == 0 and stop >= s.n_samples:
        return s
    return SpectralSet(axis=s.axis, values=s.values[start:stop],
                       sample_ids=s.sample_ids[start:stop], axis_unit=s.axis_unit,
                       quantity=s.quantity, path_length_cm=s.path_length_cm, source=s.source,
                       metadata=s.metadata)


def _regroup(sets: Iterable[SpectralSet], task_rows: int) -> Iterator[SpectralSet]:
    """Re-cut consecutive sets into sets of exactly ``task_rows`` rows (the last may be short)."""
    from bandsolve.spectra import concat

    pending: list[SpectralSet] = []
    held = 0
    for s in sets:
        pending.append(s)
        held += s.n_samples
        while held >= task_rows:
            joined = pending[0] if len(pending) == 1 else concat(pending)
            yield _rows(joined, 0, task_rows)
            rest = _rows(joined, task_rows, joined.n_samples) if held > task_rows else None
            pending, held = ([rest], rest.n_samples) if rest is not None else ([], 0)
    if held:
        yield pending[0] if len(pending) == 1 else concat(pending)


def iter_array_sets(values: np.ndarray, axis: np.ndarray, axis_unit: str, source: str,
                    ids: Sequence[str] | None = None, task_rows: int = DEFAULT_CHUNK,
                    ) -> Iterator[SpectralSet]:
    """Absorbance rows of a (possibly memory-mapped) array as sets of ``task_rows`` spectra.

    ``task_rows`` is rounded up to whole evaluation blocks. Sample ids default to ``row<i>``.
    """
    step = _task_rows(task_rows)
    for start in range(0, values.shape[0], step):
        stop = min(start + step, values.shape[0])
        names = ids[start:stop] if ids is not None else [f"row{i}" for i in range(start, stop)]
        yield SpectralSet(axis=axis, values=np.asarray(values[start:stop], dtype=float),
                          sample_ids=names, axis_unit=axis_unit, source=source)


def _task_rows(chunk_size: int) -> int:
    if not isinstance(chunk_size, int | np.integer) or chunk_size < 1:
        raise FormatError(f"chunk size must be a positive whole number, got {chunk_size!r}")
    return -(-int(chunk_size) // EVAL_ROWS) * EVAL_ROWS
