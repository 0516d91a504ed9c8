"""Results ledger: an append-only SQLite record of every prediction run.

A run records when it ran, the model (checksum and training-file fingerprints), the bandsolve
version, user labels (batch, operator), every input with its SHA-256 and outcome, and every
result row (key columns plus the whole row as JSON).

While a batch runs, rows go to a private temporary database; when the batch ends they are
copied into the ledger in **one transaction**. A run killed at any moment therefore leaves
the ledger exactly as it was, and a long run never blocks other writers. Concurrent runs
from several processes wait for each other (SQLite busy timeout, then retries). Triggers
refuse UPDATE and DELETE: the ledger offers no way to change a recorded result; a
re-prediction is a new run.

Tables: ``runs(run_id, started, finished, model_path, model_checksum, training_files,
bandsolve_version, batch, operator, n_inputs, n_failed, n_results)``,
``inputs(run_id, position, path, sha256, status, reason)``,
``results(run_id, row, input_position, sample, source, flags, concentrations, record)``.
"""

from __future__ import annotations

import contextlib
import hashlib
import json
import math
import os
import shutil
import sqlite3
import tempfile
import time
from collections.abc import Iterator
from datetime import datetime, timezone
from pathlib import Path
from typing import Any
from urllib.parse import quote

import pandas as pd

from bandsolve import __version__
from bandsolve.calibration.model import Calibration
from bandsolve.errors import DataError
from bandsolve.flags import FLAG_COLUMN

__all__ = ["LedgerRecorder", "check_ledger", "list_runs", "list_inputs", "list_results",
           "list_checks"]

_SCHEMA = """
CREATE TABLE IF NOT EXISTS runs (
    run_id INTEGER PRIMARY KEY AUTOINCREMENT, started TEXT NOT NULL, finished TEXT NOT NULL,
    model_path TEXT, model_checksum TEXT NOT NULL, training_files TEXT NOT NULL,
    bandsolve_version TEXT NOT NULL, batch TEXT, operator TEXT,
    n_inputs INTEGER NOT NULL, n_failed INTEGER NOT NULL, n_results INTEGER NOT NULL);
CREATE TABLE IF NOT EXISTS inputs (
    run_id INTEGER NOT NULL REFERENCES runs(run_id), position INTEGER NOT NULL,
    path TEXT NOT NULL, sha256 TEXT, status TEXT NOT NULL, reason TEXT);
CREATE TABLE IF NOT EXISTS results (
    run_id INTEGER NOT NULL REFERENCES runs(run_id), row INTEGER NOT NULL,
    input_position INTEGER NOT NULL, sample TEXT NOT NULL, source TEXT, flags TEXT NOT NULL,
    concentrations TEXT NOT NULL, record TEXT NOT NULL);
CREATE INDEX IF NOT EXISTS results_run ON results(run_id);
CREATE INDEX IF NOT EXISTS results_sample ON results(sample);
CREATE TABLE IF NOT EXISTS check_results (
    run_id INTEGER NOT NULL REFERENCES runs(run_id), sample TEXT NOT NULL,
    standard TEXT NOT NULL, analyte TEXT NOT NULL, expected REAL NOT NULL, found REAL,
    se REAL, recovery_pct REAL, low REAL, high REAL, passed INTEGER NOT NULL, basis TEXT);
CREATE INDEX IF NOT EXISTS check_results_run ON check_results(run_id)
"""
#: Tables every ledger has; ``check_results`` (check standards, see
#: :mod:`bandsolve.batch.checks`) is added to older ledgers by their next run.
_TABLES = ("runs", "inputs", "results")
_APPEND_ONLY = (*_TABLES, "check_results")
# One statement each: executescript() would commit the open transaction first.
_SETUP = [s.strip() for s in _SCHEMA.split(";")] + [
    f"CREATE TRIGGER IF NOT EXISTS {t}_no_{op} BEFORE {op.upper()} ON {t} BEGIN "
    f"SELECT RAISE(ABORT, 'the results ledger is append-only: recorded {t} cannot be "
    f"changed or removed'); END" for t in _APPEND_ONLY for op in ("update", "delete")]
_SPOOL = """
CREATE TABLE results (row INTEGER PRIMARY KEY, input_position INTEGER, sample TEXT,
    source TEXT, flags TEXT, concentrations TEXT, record TEXT);
"""
_BUSY_SECONDS = 10.0
_RETRIES = 4


def _now() -> str:
    return datetime.now(timezone.utc).isoformat(timespec="seconds")


def _json_value(v: Any) -> Any:
    if isinstance(v, float) and not math.isfinite(v):
        return None
    return v.item() if hasattr(v, "item") else v


class LedgerRecorder:
    """A batch sink that records one run in a ledger (see
    :func:`bandsolve.batch.predict.run_batch`).

    Parameters
    ----------
    path : path-like
        The ledger (SQLite file); created when absent.
    model : Calibration
        The model used (its checksum and training-file fingerprints are recorded).
    model_path : str, optional
        Where the model file was read from.
    batch, operator : str, optional
        User labels stored with the run.
    stdin_text : str, optional
        Text read from standard input (``-``), hashed for the record.
    """

    def __init__(self, path: str | os.PathLike[str], model: Calibration, *,
                 model_path: str | None = None, batch: str | None = None,
                 operator: str | None = None, stdin_text: str | None = None) -> None:
        from bandsolve.calibration.modelfile import model_checksum

        self.path = Path(path)
        check_ledger(self.path, new_ok=True)
        self.started = _now()
        self.model_path, self.batch, self.operator = model_path, batch, operator
        self.checksum = model.provenance.get("model_checksum") or model_checksum(model)
        self.training = json.dumps(model.provenance.get("training_files", []), sort_keys=True)
        self.analytes = list(model.analytes)
        self._stdin_sha = (hashlib.sha256(stdin_text.encode()).hexdigest()
                           if stdin_text is not None else None)
        self._hashes: dict[int, str | None] = {}
        self._checks: list[tuple] = []
        self._position = -1
        self._dir = tempfile.mkdtemp(prefix="bandsolve-ledger-")
        self._spool_path = Path(self._dir) / "run.sqlite"
        self._spool = sqlite3.connect(self._spool_path, isolation_level=None)
        self._spool.executescript(_SPOOL)
        self._spool.execute("BEGIN")

    # -------------------------------------------------------------- sink protocol
    def begin_input(self, position: int, item: str) -> None:
        self._position = position
        self._spool.execute("SAVEPOINT input")

    def write(self, frame: pd.DataFrame) -> None:
        rows = []
        for record in frame.to_dict(orient="records"):
            clean = {k: _json_value(v) for k, v in record.items()}
            conc = {a: clean.get(a) for a in self.analytes}
            rows.append((self._position, str(clean["sample"]), clean.get("source"),
                         clean.get(FLAG_COLUMN) or "", json.dumps(conc), json.dumps(clean)))
        self._spool.executemany(
            "INSERT INTO results (input_position, sample, source, flags, concentrations, "
            "record) VALUES (?, ?, ?, ?, ?, ?)", rows)

    def discard_input(self) -> None:
        self._spool.execute("ROLLBACK TO input")
        self._spool.execute("RELEASE input")

    def commit_input(self) -> None:
        self._spool.execute("RELEASE input")

    def record_checks(self, table: pd.DataFrame) -> None:
        """Keep check-standard results (columns :data:`bandsolve.batch.checks.CHECK_COLUMNS`)
        to be written with the run by :meth:`finish`."""
        from bandsolve.batch.checks import CHECK_COLUMNS

        self._checks = [tuple(_json_value(v) for v in row)
                        for row in table[list(CHECK_COLUMNS)].itertuples(index=False)]

    # -------------------------------------------------------------- the run
    def _sha(self, item: str) -> str | None:
        if item == "-":
            return self._stdin_sha
        from bandsolve.calibration.modelfile import sha256_file

        try:
            return sha256_file(item) if os.path.isfile(item) else None
        except OSError:
            return None

    def finish(self, inputs: list[str], failures: list[Any]) -> int:
        """Write the run into the ledger in one transaction; returns its run id."""
        self._spool.execute("COMMIT")
        reasons = {f.input: f.reason for f in failures}
        input_rows = [(i, p, self._sha(p), "failed" if p in reasons else "predicted",
                       reasons.get(p)) for i, p in enumerate(inputs)]
        n_results = self._spool.execute("SELECT COUNT(*) FROM results").fetchone()[0]
        self._spool.close()
        run = (self.started, _now(), self.model_path, self.checksum, self.training,
               __version__, self.batch, self.operator, len(inputs), len(reasons), n_results)
        for attempt in range(_RETRIES):
            try:
                return self._append(run, input_rows)
            except sqlite3.DatabaseError as exc:
                if "locked" not in str(exc) and "busy" not in str(exc):
                    raise DataError(f"{self.path}: cannot write the results ledger "
                                    f"({exc})") from None
                if attempt == _RETRIES - 1:
                    raise DataError(f"{self.path}: the results ledger stayed locked by other "
                                    "runs; run again (nothing of this run was recorded)"
                                    ) from None
                time.sleep(0.05 * 2**attempt)
        raise AssertionError("unreachable")  # pragma: no cover

    def _append(self, run: tuple, input_rows: list[tuple]) -> int:
        self.path.parent.mkdir(parents=True, exist_ok=True)
        con = sqlite3.connect(self.path, timeout=_BUSY_SECONDS, isolation_level=None)
        try:
            con.execute("ATTACH DATABASE ? AS spool", (str(self._spool_path),))
            con.execute("BEGIN IMMEDIATE")
            try:
                for statement in _SETUP:
                    con.execute(statement)
                cur = con.execute(
                    "INSERT INTO runs (started, finished, model_path, model_checksum, "
                    "training_files, bandsolve_version, batch, operator, n_inputs, n_failed, "
                    "n_results) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)", run)
                run_id = int(cur.lastrowid)
                con.executemany("INSERT INTO inputs VALUES (?, ?, ?, ?, ?, ?)",
                                [(run_id, *r) for r in input_rows])
                con.execute(
                    "INSERT INTO main.results SELECT ?, row, input_position, sample, source, "
                    "flags, concentrations, record FROM spool.results ORDER BY row",
                    (run_id,))
                con.executemany("INSERT INTO check_results VALUES "
                                "(?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
                                [(run_id, *row) for row in self._checks])
                con.execute("COMMIT")
            except BaseException:
                con.execute("ROLLBACK")
                raise
            return run_id
        finally:
            con.close()

    def close(self) -> None:
        """Remove the temporary spool (call after :meth:`finish`, or to abandon the run)."""
        self._spool.close()
        shutil.rmtree(self._dir, ignore_errors=True)


# ---------------------------------------------------------------------- reading
def _not_a_ledger(path: str | os.PathLike[str], fix: str) -> DataError:
    return DataError(f"{path} is not a bandsolve results ledger (SQLite); {fix}")


def _tables(con: sqlite3.Connection, path: str | os.PathLike[str], fix: str) -> set[str]:
    try:
        rows = con.execute("SELECT name FROM sqlite_master WHERE type='table'").fetchall()
    except sqlite3.OperationalError as exc:  # locked, unreadable: a ledger we cannot read now
        raise DataError(f"{path}: cannot read the results ledger ({exc})") from None
    except sqlite3.DatabaseError:  # "file is not a database": some other file
        raise _not_a_ledger(path, fix) from None
    return {r[0] for r in rows}


def _open_ro(path: str | os.PathLike[str]) -> sqlite3.Connection:
    return sqlite3.connect(f"file:{quote(str(Path(path).resolve()))}?mode=ro", uri=True,
                           timeout=_BUSY_SECONDS)


def check_ledger(path: str | os.PathLike[str], *, new_ok: bool = False) -> None:
    """Refuse, before any work is done, a file that is not a results ledger.

    Parameters
    ----------
    path : path-like
        The ledger file.
    new_ok : bool
        Accept a path that does not exist yet, or an empty file (a ledger to be created).

    Raises
    ------
    DataError
        ``path`` is a folder, some other file (a CSV, a foreign SQLite database), or absent
        (when ``new_ok`` is false).
    """
    fix = ("give a new file name or an existing ledger" if new_ok
           else "give a ledger written by bandsolve predict --ledger")
    p = Path(path)
    if p.is_dir():
        raise DataError(f"{path} is a folder, not a results ledger; {fix}")
    if not p.exists():
        if new_ok:
            return
        raise DataError(f"{path}: no such ledger; it is created by bandsolve predict --ledger")
    if new_ok and p.stat().st_size == 0:
        return
    con = _open_ro(p)
    try:
        tables = _tables(con, path, fix)
    finally:
        con.close()
    if not set(_TABLES) <= tables and (tables or not new_ok):
        raise _not_a_ledger(path, fix)


@contextlib.contextmanager
def _connect_ro(path: str | os.PathLike[str]) -> Iterator[sqlite3.Connection]:
    check_ledger(path)
    con = _open_ro(path)
    try:
        yield con
    finally:
        con.close()


def _require_run(con: sqlite3.Connection, path: str | os.PathLike[str], run: int) -> None:
    """DataError naming the recorded run ids when ``run`` is not one of them."""
    low, high, n = con.execute("SELECT MIN(run_id), MAX(run_id), COUNT(*) FROM runs").fetchone()
    if not con.execute("SELECT 1 FROM runs WHERE run_id = ?", (run,)).fetchone():
        held = (f"it holds runs {low} to {high}" if n > 1 else f"it holds run {low}" if n
                else "it holds no runs yet")
        raise DataError(f"{path}: no run {run} in this ledger; {held} (list them with "
                        f"bandsolve ledger {path})")


def _since(value: str | None) -> str | None:
    if value is None:
        return None
    try:
        when = datetime.fromisoformat(value)
    except ValueError:
        raise DataError(f"--since {value!r} is not a date; use YYYY-MM-DD or an ISO time "
                        "such as 2025-03-01T08:00") from None
    if when.tzinfo is None:
        when = when.replace(tzinfo=timezone.utc)
    now = datetime.now(timezone.utc)
    if when > now:
        raise DataError(f"--since {value} is in the future (it is now "
                        f"{now.isoformat(timespec='minutes')} UTC), so no run can have started "
                        "then; check the date")
    return when.astimezone(timezone.utc).isoformat(timespec="seconds")


def list_runs(path: str | os.PathLike[str], *, since: str | None = None) -> pd.DataFrame:
    """Every run (one row each), oldest first, with ``n_flagged`` (result rows carrying a
    flag); ``since`` keeps runs started at/after a date (a future date is an error)."""
    with _connect_ro(path) as con:
        return pd.read_sql_query(
            "SELECT runs.*, (SELECT COUNT(*) FROM results r WHERE r.run_id = runs.run_id "
            "AND r.flags != '') AS n_flagged FROM runs WHERE started >= COALESCE(?, '') "
            "ORDER BY run_id", con, params=(_since(since),))


def list_inputs(path: str | os.PathLike[str], run: int) -> pd.DataFrame:
    """Inputs of one run with their SHA-256, status and failure reason (DataError: no such run)."""
    with _connect_ro(path) as con:
        _require_run(con, path, run)
        return pd.read_sql_query("SELECT * FROM inputs WHERE run_id = ? ORDER BY position",
                                 con, params=(run,))


def list_results(path: str | os.PathLike[str], *, run: int | None = None,
                 since: str | None = None, sample: str | None = None) -> pd.DataFrame:
    """Recorded result rows with their run's labels, expanded from the stored JSON rows.

    Parameters
    ----------
    run : int, optional
        Only this run (a DataError when the ledger holds no such run).
    since : str, optional
        Only runs started at or after this ISO date/time (UTC when no zone is given).
    sample : str, optional
        Glob pattern on the sample id (``*`` and ``?``; case-sensitive).

    Returns
    -------
    pandas.DataFrame
        ``run_id``, ``started``, ``batch``, ``operator``, ``model_checksum``, ``input``,
        ``input_sha256``, then the columns of the stored results table.
    """
    query = (
        "SELECT r.run_id, u.started, u.batch, u.operator, u.model_checksum, i.path AS input, "
        "i.sha256 AS input_sha256, r.record FROM results r JOIN runs u USING (run_id) "
        "JOIN inputs i ON i.run_id = r.run_id AND i.position = r.input_position "
        "WHERE (? IS NULL OR r.run_id = ?) AND u.started >= COALESCE(?, '') "
        "AND (? IS NULL OR r.sample GLOB ?) ORDER BY r.run_id, r.row")
    with _connect_ro(path) as con:
        if run is not None:
            _require_run(con, path, run)
        rows = con.execute(query, (run, run, _since(since), sample, sample)).fetchall()
    head = ["run_id", "started", "batch", "operator", "model_checksum", "input", "input_sha256"]
    records = [dict(zip(head, r[:-1], strict=True)) | json.loads(r[-1]) for r in rows]
    return pd.DataFrame.from_records(records, columns=None if records else head)


def list_checks(path: str | os.PathLike[str]) -> pd.DataFrame:
    """Recorded check-standard results with their run's labels, oldest run first.

    Returns
    -------
    pandas.DataFrame
        ``run_id``, ``started``, ``batch``, ``operator``, ``model_checksum``, then the
        columns of :data:`bandsolve.batch.checks.CHECK_COLUMNS` (``passed`` as bool). Empty
        for a ledger without check standards.
    """
    from bandsolve.batch.checks import CHECK_COLUMNS

    head = ["run_id", "started", "batch", "operator", "model_checksum"]
    with _connect_ro(path) as con:
        if "check_results" not in _tables(con, path, "give a ledger written by bandsolve"):
            return pd.DataFrame(columns=[*head, *CHECK_COLUMNS])
        frame = pd.read_sql_query(
            "SELECT u.run_id, u.started, u.batch, u.operator, u.model_checksum, "
            + ", ".join(f"c.{c}" for c in CHECK_COLUMNS)
            + " FROM check_results c JOIN runs u USING (run_id) ORDER BY c.run_id, c.rowid",
            con)
    frame["passed"] = frame["passed"].astype(bool)
    return frame
