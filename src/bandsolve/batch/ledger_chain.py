"""The hash chain of a results ledger: what makes a rewrite visible, and the check that finds it.

Every result row carries ``row_hash`` = SHA-256 of the previous row's hash and the row's
content; the first row of a run starts from the run's ``prev_hash``. Every run carries
``run_hash`` = SHA-256 of its own record (run id, times, model, labels, counts, results
file and its SHA-256), of every input row (path, SHA-256 of the bytes read, status), of its
last row hash, and of ``prev_hash`` = the ``run_hash`` of the run before it (64 zeros for the
first run). Changing, removing, inserting or renumbering anything breaks a link that
:func:`verify_ledger` names by run id.

What this guarantees, and what it does not
------------------------------------------
Without a key, the chain detects edits made with any SQLite tool, deleted or inserted runs
and rows, and result counts that do not match; it does **not** detect a complete rewrite by
someone who recomputes every hash with this published recipe, nor the removal of the newest
runs together with the SQLite sequence counter. With a lab key (:mod:`bandsolve.labkey`),
each run also carries ``seal`` = HMAC of its run hash: a rewrite without the key is
detected. Removing the newest runs is detected by comparing the reported chain head (run id
and hash) with one kept elsewhere (a lab notebook, a LIMS).

References
----------
Haber, S., Stornetta, W. S. (1991). How to time-stamp a digital document. Journal of
Cryptology 3(2), 99-111 (linking each record to its predecessor by a hash).
Schneier, B., Kelsey, J. (1999). Secure audit logs to support computer forensics. ACM
Transactions on Information and System Security 2(2), 159-176 (keyed hash chains).
"""

from __future__ import annotations

import hashlib
import json
import os
import sqlite3
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

from bandsolve.batch.checks import CHECK_COLUMNS
from bandsolve.batch.ledger_read import check_ledger, open_ro
from bandsolve.errors import DataError
from bandsolve.labkey import LabKey

__all__ = ["GENESIS", "RUN_FIELDS", "LedgerCheck", "chain_head", "check_rows", "row_hash",
           "run_hash", "verify_ledger"]

GENESIS = "0" * 64
SEAL_PURPOSE = "ledger seal"
#: Columns of ``runs`` covered by the run hash, in order.
RUN_FIELDS = ("run_id", "prev_hash", "started", "finished", "model_path", "model_checksum",
              "training_files", "bandsolve_version", "batch", "operator", "n_inputs",
              "n_failed", "n_results", "results_path", "results_sha256", "key_id")
ROW_FIELDS = ("row", "input_position", "sample", "source", "flags", "concentrations", "record")
INPUT_FIELDS = ("position", "path", "sha256", "status", "reason")
CHECK_FIELDS = CHECK_COLUMNS
#: Tables whose rows can never be changed or removed (each has two guarding triggers).
APPEND_ONLY = ("runs", "inputs", "results", "check_results")


def _canonical(values: Sequence[Any]) -> bytes:
    return json.dumps(list(values), ensure_ascii=False, separators=(",", ":")).encode()


def row_hash(prev: str, row: Sequence[Any]) -> str:
    """Hash of one result row (values in :data:`ROW_FIELDS` order) chained to ``prev``."""
    return hashlib.sha256(b"row\0" + prev.encode() + b"\0" + _canonical(row)).hexdigest()


def run_hash(run: Sequence[Any], inputs: Sequence[Sequence[Any]], last_row: str,
             checks: Sequence[Sequence[Any]] = ()) -> str:
    """Hash of a run record (:data:`RUN_FIELDS` order), its inputs, its last row hash and its
    check-standard rows (:data:`CHECK_FIELDS` order, in any order: they are sorted)."""
    ordered = sorted((list(c) for c in checks), key=lambda c: _canonical(c))
    body = _canonical([list(run), [list(i) for i in inputs], last_row, ordered])
    return hashlib.sha256(b"run\0" + body).hexdigest()


@dataclass
class LedgerCheck:
    """Outcome of :func:`verify_ledger`.

    ``problem`` is the first broken link in words (None when the chain holds), ``run_id``
    the run it was found in; ``head`` is ``(run_id, run_hash)`` of the newest run, to be
    noted elsewhere; ``notes`` say what was not checked (for example seals without a key).
    """

    n_runs: int = 0
    n_results: int = 0
    problem: str | None = None
    run_id: int | None = None
    head: tuple[int, str] | None = None
    notes: list[str] = field(default_factory=list)

    @property
    def ok(self) -> bool:
        return self.problem is None

    def summary(self) -> str:
        """A few lines for a person."""
        if not self.ok:
            return f"ledger check FAILED: {self.problem}"
        lines = [f"ledger check passed: {self.n_runs} runs and {self.n_results} results, "
                 "every hash link intact"]
        if self.head:
            lines.append(f"chain head: run {self.head[0]}, hash {self.head[1]} (note it "
                         "elsewhere: removing the newest runs is seen only against it)")
        return "\n".join(lines + self.notes)


class _Broken(Exception):
    def __init__(self, run_id: int | None, problem: str) -> None:
        super().__init__(problem)
        self.run_id, self.problem = run_id, problem


def _structure(con: sqlite3.Connection) -> None:
    result = [r[0] for r in con.execute("PRAGMA main.integrity_check").fetchall()]
    if result != ["ok"]:
        raise _Broken(None, "the SQLite file itself is damaged (" + "; ".join(result[:3])
                      + "); restore it from a backup")
    names = {(r[0], r[1]) for r in con.execute("SELECT type, name FROM sqlite_master")}
    guarded = [t for t in APPEND_ONLY if ("table", t) in names]
    missing = [f"{t}_no_{op}" for t in guarded for op in ("update", "delete")
               if ("trigger", f"{t}_no_{op}") not in names]
    if missing:
        raise _Broken(None, f"the append-only triggers ({', '.join(missing)}) were removed from "
                      "the ledger; it may have been edited: compare it with a backup")


def _runs(con: sqlite3.Connection) -> list[sqlite3.Row]:
    cols = {r[1] for r in con.execute("PRAGMA table_info(runs)")}
    have = [c if c in cols else f"NULL AS {c}" for c in (*RUN_FIELDS, "run_hash", "seal")]
    return con.execute(f"SELECT {', '.join(have)} FROM runs ORDER BY run_id").fetchall()


def _check_rows(con: sqlite3.Connection, run: sqlite3.Row, prev: str) -> tuple[str, int]:
    """Re-walk the result rows of ``run``; returns the last row hash and the row count."""
    run_id, current, count = run["run_id"], prev, 0
    has_hash = "row_hash" in {r[1] for r in con.execute("PRAGMA table_info(results)")}
    cursor = con.execute(f"SELECT {', '.join(ROW_FIELDS)}, "
                         f"{'row_hash' if has_hash else 'NULL'} FROM results WHERE run_id = ? "
                         "ORDER BY row", (run_id,))
    for values in cursor:
        current = row_hash(current, tuple(values)[:-1])
        stored = values[-1]
        if stored is not None and stored != current:
            raise _Broken(run_id, f"run {run_id}, result row {values[0]} (sample "
                          f"{values[2]!r}) was changed, inserted or removed after recording")
        count += 1
    if run["n_results"] is not None and count != run["n_results"]:
        raise _Broken(run_id, f"run {run_id} records {run['n_results']} results but the "
                      f"ledger holds {count} for it: results were removed or added")
    return current, count


def _stored_rows(con: sqlite3.Connection, run: sqlite3.Row, start: str) -> tuple[str, int]:
    """The stored last row hash and the row count of ``run``, without re-hashing the rows."""
    run_id = run["run_id"]
    count, last = con.execute("SELECT COUNT(*), (SELECT row_hash FROM results WHERE run_id = ? "
                              "ORDER BY row DESC LIMIT 1) FROM results WHERE run_id = ?",
                              (run_id, run_id)).fetchone()
    if count != run["n_results"]:
        raise _Broken(run_id, f"run {run_id} records {run['n_results']} results but the "
                      f"ledger holds {count} for it: results were removed or added")
    return (last if count else start) or "", count


def verify_ledger(path: str | os.PathLike[str], key: LabKey | None = None, *,
                  every_row: bool = True) -> LedgerCheck:
    """Re-walk the whole chain of a ledger and report the first broken link.

    Parameters
    ----------
    path : path-like
        The ledger (opened read-only).
    key : LabKey, optional
        The lab key: every run must then carry a valid seal made with it.
    every_row : bool
        Re-hash every result row (the full check, cost proportional to the rows). When
        False, only the newest run's rows are re-hashed; older runs are checked through
        their stored last row hash (in the run hash), their row counts and their seals,
        which finds removed, added or renumbered runs and rows but not an edited row
        content (the check made before each append; ``--verify`` does the full one).

    Returns
    -------
    LedgerCheck
    """
    check_ledger(path)
    check = LedgerCheck()
    con = open_ro(path)
    con.row_factory = sqlite3.Row
    try:
        _walk(con, key, check, every_row)
    except _Broken as broken:
        check.problem, check.run_id = broken.problem, broken.run_id
    except sqlite3.DatabaseError as exc:
        check.problem = f"the ledger cannot be read to its end ({exc}); restore it from a backup"
    finally:
        con.close()
    return check


def _walk(con: sqlite3.Connection, key: LabKey | None, check: LedgerCheck,
          every_row: bool = True) -> None:
    _structure(con)
    prev, chained, expected_id, unsealed = GENESIS, False, 1, 0
    runs = _runs(con)
    for run in runs:
        run_id = run["run_id"]
        if run_id != expected_id:
            raise _Broken(run_id, f"run {expected_id} is missing before run {run_id}: runs "
                          "were removed or renumbered")
        start = run["prev_hash"] or prev
        if every_row or run is runs[-1] or run["run_hash"] is None:
            last, count = _check_rows(con, run, start)
        else:
            last, count = _stored_rows(con, run, start)
        inputs = con.execute(f"SELECT {', '.join(INPUT_FIELDS)} FROM inputs WHERE run_id = ? "
                             "ORDER BY position", (run_id,)).fetchall()
        checks = check_rows(con, run_id)
        if run["run_hash"] is None:
            if chained:
                raise _Broken(run_id, f"run {run_id} carries no hash although earlier runs "
                              "do: it was inserted or altered outside bandsolve")
            prev = run_hash(tuple(run[f] for f in RUN_FIELDS), [tuple(i) for i in inputs],
                            last, checks)
            check.notes.append(f"note: run {run_id} was recorded before hash chaining; it is "
                               "covered only by the runs recorded after it")
        else:
            chained = True
            if run["prev_hash"] != prev:
                raise _Broken(run_id, f"run {run_id} does not link to the run before it: a "
                              "run before it was removed, inserted or changed")
            prev = run_hash(tuple(run[f] for f in RUN_FIELDS), [tuple(i) for i in inputs],
                            last, checks)
            if prev != run["run_hash"]:
                raise _Broken(run_id, f"run {run_id}: its record or inputs were changed after "
                              "recording")
        _check_seal(run, prev, key)
        unsealed += run["seal"] is None
        check.n_runs, check.n_results = check.n_runs + 1, check.n_results + count
        check.head, expected_id = (run_id, prev), run_id + 1
    _check_sequence(con, expected_id - 1)
    if key is None and check.n_runs > unsealed:
        check.notes.append(f"note: {check.n_runs - unsealed} runs carry a keyed seal that was "
                           "not checked; give the lab key (--key-file) to check them")


def check_rows(con: sqlite3.Connection, run_id: int) -> list[tuple]:
    """The check-standard rows of a run as stored (the values the run hash covers)."""
    tables = {r[0] for r in con.execute("SELECT name FROM sqlite_master WHERE type = 'table'")}
    if "check_results" not in tables:
        return []
    return [tuple(r) for r in con.execute(f"SELECT {', '.join(CHECK_FIELDS)} FROM "
                                          "check_results WHERE run_id = ?", (run_id,))]


def _check_seal(run: sqlite3.Row, computed: str, key: LabKey | None) -> None:
    run_id = run["run_id"]
    if key is None:
        return
    if run["seal"] is None:
        raise _Broken(run_id, f"run {run_id} carries no keyed seal: it was recorded without "
                      "the lab key, or its seal was stripped")
    if run["key_id"] != key.key_id:
        raise _Broken(run_id, f"run {run_id} was sealed with another key (id {run['key_id']}, "
                      f"this key is {key.key_id})")
    if not key.verify(SEAL_PURPOSE, computed, run["seal"]):
        raise _Broken(run_id, f"run {run_id}: its keyed seal does not match; the run was "
                      "rewritten by someone without the lab key")


def _check_sequence(con: sqlite3.Connection, last_run: int) -> None:
    row = con.execute("SELECT seq FROM sqlite_sequence WHERE name = 'runs'").fetchone()
    if row is not None and row[0] > last_run:
        raise _Broken(row[0], f"the ledger once held run {row[0]} but now ends at run "
                      f"{last_run}: the newest runs were removed")


def chain_head(con: sqlite3.Connection) -> str:
    """Hash of the newest run, found by walking the chain on an open connection.

    Raises
    ------
    DataError
        When the chain is broken (nothing may be appended to it).
    """
    check, factory = LedgerCheck(), con.row_factory
    con.row_factory = sqlite3.Row
    try:
        _walk(con, None, check)
    except _Broken as broken:
        raise DataError(f"refusing to append to a damaged ledger: {broken.problem}") from None
    finally:
        con.row_factory = factory
    return check.head[1] if check.head else GENESIS
