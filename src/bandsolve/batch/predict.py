"""Batch prediction over many input files: every good file predicted, every bad one reported.

How a batch runs
----------------
Inputs are read one after another and cut into tasks (:mod:`bandsolve.batch.tasks`). A wide
text table (any size) is cut into blocks of whole lines
(:func:`bandsolve.io.csv_spectra.open_spectra_text`) that are parsed inside the tasks, so with
several jobs the parsing runs in the worker processes; other files are read whole. Rows are
regrouped into tasks of whole *evaluation blocks* of :data:`EVAL_ROWS` rows counted from the
first spectrum of each input (at most ``chunk_size`` spectra and about
:data:`~bandsolve.batch.tasks.TASK_BYTES` of text), and tasks are predicted in parallel by
worker processes beside this one (:mod:`bandsolve.batch._pool`) or on a ``dask.distributed``
cluster through joblib. Ids are checked for repeats across all the tasks of a file, in input
order, as the whole-file reader does. Because every spectrum is always evaluated in the same
block, the numbers are bit-identical whatever the chunk size, the number of jobs or the engine
(matrix products give last-digit differences when the row grouping changes).

Results leave in input order through *sinks* (an output file, a results ledger, an in-memory
table). Each sink keeps an input's rows aside until the whole input has been predicted, so a
file that fails half-way (a NaN in row 20 000) contributes no rows at all: a file is either
fully predicted or listed as a failure with its reason.
"""

from __future__ import annotations

import contextlib
import os
import warnings
from collections.abc import Iterable, Iterator, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Protocol

import pandas as pd

from bandsolve.batch._pool import shared_work, workers_for
from bandsolve.batch.tasks import DEFAULT_CHUNK, cut_tasks, iter_array_sets, read_input
from bandsolve.calibration.blocks import EVAL_ROWS
from bandsolve.calibration.model import Calibration, result_columns
from bandsolve.errors import BandsolveError, BandsolveWarning, DataError, FormatError
from bandsolve.flags import FLAG_COLUMN
from bandsolve.io.csv_spectra import WideRows
from bandsolve.io.single import expand_inputs
from bandsolve.progress import ProgressCallback, step
from bandsolve.spectra import SpectralSet

__all__ = ["EVAL_ROWS", "BatchFailure", "BatchResult", "BatchSummary",
           "predict_inputs", "predict_sets", "run_batch", "result_table_columns", "iter_array_sets",
           "evaluate_set"]


@dataclass(frozen=True)
class BatchFailure:
    """One input that could not be predicted, and why."""

    input: str
    reason: str


@dataclass
class BatchSummary:
    """What a batch did: inputs in order, failures with reasons, counts of result rows."""

    inputs: list[str]
    failures: list[BatchFailure] = field(default_factory=list)
    n_predicted: int = 0
    n_flagged: int = 0


@dataclass
class BatchResult:
    """Results of a batch: one table for all good inputs, and the failures."""

    table: pd.DataFrame
    failures: list[BatchFailure] = field(default_factory=list)
    inputs: list[str] = field(default_factory=list)

    @property
    def n_flagged(self) -> int:
        """Number of result rows with at least one flag."""
        return int((self.table[FLAG_COLUMN].astype(str) != "").sum()) if len(self.table) else 0


class Sink(Protocol):
    """Receives result rows input by input; an input's rows count only once committed."""

    def begin_input(self, position: int, item: str) -> None: ...
    def write(self, frame: pd.DataFrame) -> None: ...
    def discard_input(self) -> None: ...
    def commit_input(self) -> None: ...


def result_table_columns(model: Calibration) -> list[str]:
    """Column names of every results table of ``model``, in order."""
    cols = ["sample", "source"]
    for label in model.analytes:
        cols.extend(result_columns(label))
    return [*cols, "residual_ratio", "t2_ratio", "leverage_ratio", FLAG_COLUMN, "interval_basis",
            "notes"]


def evaluate_set(model: Calibration, spectra: SpectralSet) -> pd.DataFrame:
    """Results table of ``spectra``, evaluated in blocks of :data:`EVAL_ROWS` rows.

    The first row of ``spectra`` must be the first row of an evaluation block (a task start).
    """
    return model.predict(spectra)


def _task(model: Calibration, position: int, payload: SpectralSet | WideRows | BatchFailure):
    """Parse (blocks of a wide table) and predict one task, in whichever process runs it.

    Returns ``(position, results or failure, (line numbers of the rows or None, warnings))``;
    warnings are handed back so that workers in other processes do not lose them.
    """
    if isinstance(payload, BatchFailure):
        return position, payload, None
    try:
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always", BandsolveWarning)
            spectra = payload.spectra() if isinstance(payload, WideRows) else payload
            frame = evaluate_set(model, spectra)
    except BandsolveError as exc:
        source = payload.table.source if isinstance(payload, WideRows) else payload.source
        return position, BatchFailure(source or "", str(exc)), None
    lines = payload.lines if isinstance(payload, WideRows) else None
    return position, frame, (lines, [(str(w.message), w.category) for w in caught])


def _checked(results, files: Sequence[str]):
    """Results in order, with ids checked across each file's tasks and warnings passed on."""
    from bandsolve.io._wide import IdGuard

    guards: dict[int, IdGuard] = {}
    for position, result, extra in results:
        if extra is not None:
            lines, caught = extra
            for message, category in caught:
                warnings.warn(message, category, stacklevel=2)
            if lines is not None:
                guard = guards.setdefault(position, IdGuard(files[position]))
                try:
                    guard.add(result["sample"].tolist(), lines)
                except BandsolveError as exc:
                    result = BatchFailure(files[position], str(exc))
        yield position, result


# ---------------------------------------------------------------------- running
def predict_sets(model: Calibration, sets: Iterable[SpectralSet],
                 n_jobs: int = 1) -> Iterator[pd.DataFrame]:
    """Results tables of consecutive sets, in order, predicted by ``n_jobs`` processes (this one
    included: ``n_jobs - 1`` workers).

    Each set must start an evaluation block (as made by :func:`iter_array_sets`). The first
    error stops the iteration.
    """
    for _, result in _checked(_results(model, ((0, s) for s in sets), n_jobs), [""]):
        if isinstance(result, BatchFailure):
            raise DataError(result.reason)
        yield result


def _payloads(files: Sequence[str], options: dict[str, Any], stdin_text: str | None,
              chunk_size: int, skip: set[int]):
    for position, item in enumerate(files):
        try:
            for payload in cut_tasks(read_input(item, options, stdin_text), chunk_size):
                if position in skip:
                    break
                yield position, payload
        except (BandsolveError, OSError, UnicodeError) as exc:
            yield position, BatchFailure(item, str(exc))


def _results(model: Calibration, payloads, n_jobs: int, cluster: bool = False):
    """Outcomes of :func:`_task` in input order: on a dask cluster through joblib, else on
    ``n_jobs`` local processes, this one included (:mod:`bandsolve.batch._pool`)."""
    calls = ((model, pos, p) for pos, p in payloads)
    if not cluster:
        return shared_work(_task, calls, workers_for(n_jobs, os.cpu_count() or 1), _light)
    from joblib import Parallel, delayed

    return Parallel(n_jobs=n_jobs, return_as="generator", pre_dispatch="n_jobs")(
        delayed(_task)(*args) for args in calls)


def _light(args: tuple) -> tuple:
    """A task for a worker on this machine: rows of a text file travel without their text,
    which the worker reads from the file itself (the main process holds no text for it)."""
    model, position, payload = args
    return model, position, payload.detached() if isinstance(payload, WideRows) else payload


@contextlib.contextmanager
def _engine(scheduler: str | None):
    if scheduler is None:
        yield
        return
    try:
        from distributed import Client
        from joblib import parallel_config
    except ImportError:
        raise BandsolveError("--scheduler needs the dask extra: pip install "
                             "'bandsolve[dask]'") from None
    try:
        client = Client(scheduler, timeout="10s")
    except OSError as exc:
        raise BandsolveError(f"cannot reach the Dask scheduler at {scheduler} ({exc}); check "
                             "the address and that the cluster is running") from None
    with client, parallel_config(backend="dask"):
        yield


def run_batch(model: Calibration, inputs: Sequence[str], sinks: Sequence[Sink], *,
              read_options: dict[str, Any] | None = None, pattern: str | None = None,
              stdin_text: str | None = None, chunk_size: int = DEFAULT_CHUNK,
              n_jobs: int = 1, scheduler: str | None = None,
              progress: ProgressCallback | None = None) -> BatchSummary:
    """Predict every spectrum of ``inputs`` and pass the rows, input by input, to ``sinks``.

    Parameters
    ----------
    model : Calibration
    inputs : sequence of str
        Files, folders (searched recursively, with ``pattern``) or ``-`` for ``stdin_text``.
    sinks : sequence of Sink
        Receivers of the rows; an input's rows are committed only when it fully succeeded.
    read_options : dict, optional
        Keyword arguments of :func:`bandsolve.io.read_spectra`.
    chunk_size : int
        Most spectra per task (rounded up to whole evaluation blocks); a task of a wide text
        file also holds at most about :data:`~bandsolve.batch.tasks.TASK_BYTES` of text, so
        memory is bounded by bytes.
    n_jobs : int
        Processes that predict, this one included (``n_jobs - 1`` worker processes; -1: one
        per core); on a cluster, joblib workers. Results do not depend on it.
    scheduler : str, optional
        Address of a running ``dask.distributed`` scheduler to run the tasks on.
    progress : callable, optional
        ``progress(done, total, label)`` as each input is finished (:mod:`bandsolve.progress`).

    Returns
    -------
    BatchSummary
    """
    files = expand_inputs(inputs, pattern)
    summary = BatchSummary(inputs=files)
    if n_jobs == 0:
        raise FormatError("jobs must be a positive number of workers, or -1 for all cores")
    failed: set[int] = set()
    current: int | None = None
    pending = flagged = 0  # rows of the current input, counted once it is committed

    def close_current() -> None:
        if current is not None and current not in failed:
            for sink in sinks:
                sink.commit_input()
            summary.n_predicted += pending
            summary.n_flagged += flagged
        if current is not None:
            step(progress, current + 1, len(files), Path(files[current]).name)

    payloads = _payloads(files, read_options or {}, stdin_text, chunk_size, failed)
    with _engine(scheduler):
        n_workers = -1 if scheduler and n_jobs == 1 else n_jobs
        results = _results(model, payloads, n_workers, cluster=scheduler is not None)
        for position, result in _checked(results, files):
            if position in failed:
                continue
            if position != current:
                close_current()
                current, pending, flagged = position, 0, 0
                for sink in sinks:
                    sink.begin_input(position, files[position])
            if isinstance(result, BatchFailure):
                failed.add(position)
                summary.failures.append(BatchFailure(files[position], result.reason))
                for sink in sinks:
                    sink.discard_input()
                continue
            pending += len(result)
            flagged += int((result[FLAG_COLUMN] != "").sum())
            for sink in sinks:
                sink.write(result)
        close_current()
    return summary


class _TableSink:
    """Collects committed rows in memory (for :func:`predict_inputs`)."""

    def __init__(self) -> None:
        self.frames: list[pd.DataFrame] = []
        self._open: list[pd.DataFrame] = []

    def begin_input(self, position: int, item: str) -> None:
        self._open = []

    def write(self, frame: pd.DataFrame) -> None:
        self._open.append(frame)

    def discard_input(self) -> None:
        self._open = []

    def commit_input(self) -> None:
        self.frames.extend(self._open)
        self._open = []


def predict_inputs(model: Calibration, inputs: Sequence[str], *,
                   read_options: dict[str, Any] | None = None, pattern: str | None = None,
                   stdin_text: str | None = None, chunk_size: int = DEFAULT_CHUNK,
                   n_jobs: int = 1, scheduler: str | None = None) -> BatchResult:
    """Predict every spectrum in ``inputs`` into one in-memory table; bad files are recorded.

    Options as in :func:`run_batch`.

    Returns
    -------
    BatchResult
        ``table`` has the columns of :meth:`Calibration.predict` for all good inputs, in
        input order; ``failures`` names each input that could not be read or predicted.
    """
    sink = _TableSink()
    summary = run_batch(model, inputs, [sink], read_options=read_options, pattern=pattern,
                        stdin_text=stdin_text, chunk_size=chunk_size, n_jobs=n_jobs,
                        scheduler=scheduler)
    table = (pd.concat(sink.frames, ignore_index=True) if sink.frames
             else pd.DataFrame(columns=result_table_columns(model)))
    return BatchResult(table=table, failures=summary.failures, inputs=summary.inputs)
