"""Reading a results ledger: refuse what is not one, list runs, inputs and results.

The ledger is opened read-only (SQLite ``mode=ro``), so reading never changes it. Writing is
:mod:`bandsolve.batch.ledger`; the hash-chain check is :mod:`bandsolve.batch.ledger_chain`.
"""

from __future__ import annotations

import contextlib
import json
import os
import sqlite3
from collections.abc import Iterator
from datetime import datetime, timezone
from pathlib import Path
from urllib.parse import quote

import pandas as pd

from bandsolve.errors import DataError

__all__ = ["TABLES", "check_ledger", "open_ro", "list_runs", "list_inputs", "list_results",
           "list_checks"]

TABLES = ("runs", "inputs", "results")
BUSY_SECONDS = 10.0


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


def open_ro(path: str | os.PathLike[str]) -> sqlite3.Connection:
    """A read-only connection; first lets SQLite roll back a run killed while appending.

    A killed writer leaves a *hot journal* beside the ledger; SQLite removes it (restoring
    the ledger as it was before that run) on the next read, which needs write access. That
    rollback changes nothing that was committed (SQLite documentation, "Atomic Commit").
    """
    journal = Path(f"{path}-journal")
    if journal.is_file() and journal.stat().st_size:
        with contextlib.suppress(sqlite3.DatabaseError):
            con = sqlite3.connect(path, timeout=BUSY_SECONDS)
            try:
                con.execute("SELECT COUNT(*) FROM sqlite_master").fetchone()
            finally:
                con.close()
    return sqlite3.connect(f"file:{quote(str(Path(path).resolve()))}?mode=ro", uri=True,
                           timeout=BUSY_SECONDS)


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
    if p.exists() and not p.is_dir() and not p.is_file():
        raise DataError(f"{path} is not a regular file (a FIFO, device or socket); a results "
                        f"ledger is an SQLite file: {fix}")
    if p.is_dir():
        raise DataError(f"{path} is a folder, not a results ledger; {fix}")
    if not p.exists():
        if new_ok:
            return
        raise DataError(f"{path}: no such ledger; it is created by bandsolve predict --ledger")
    if new_ok and p.stat().st_size == 0:
        return
    con = open_ro(p)
    try:
        tables = _tables(con, path, fix)
    finally:
        con.close()
    if not set(TABLES) <= tables and (tables or not new_ok):
        raise _not_a_ledger(path, fix)


@contextlib.contextmanager
def _connect_ro(path: str | os.PathLike[str]) -> Iterator[sqlite3.Connection]:
    check_ledger(path)
    con = open_ro(path)
    try:
        yield con
    except sqlite3.DatabaseError as exc:
        raise DataError(f"{path}: the results ledger cannot be read ({exc}); check it with "
                        f"bandsolve ledger {path} --verify and restore it from a backup"
                        ) from None
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
