"""Results ledger: an append-only, hash-chained SQLite record of every prediction run.

A run records when it ran, the model (checksum and training-file fingerprints), the bandsolve
version, user labels (batch, operator), every input with the SHA-256 of the bytes actually
read and its outcome, the results file (path and SHA-256), and every result row (key columns
plus the whole row as JSON). Runs and rows are chained by hash, and sealed with the lab key
when one is given (:mod:`bandsolve.batch.ledger_chain` says what that does and does not
guarantee).

Before a batch is computed, the ledger is checked: a damaged file, a broken chain, a ledger
that cannot be written (read-only file or folder) or a nearly full disk are refused, so no
work is lost to a record that cannot be made. While the batch runs, rows go to a private
spool; when it ends they are copied into the ledger in **one transaction**, so a run killed
at any moment leaves the ledger as it was. Concurrent runs wait for each other (SQLite busy
timeout, then retries). Triggers refuse UPDATE and DELETE; a re-prediction is a new run.

Tables: ``runs(run_id, started, finished, model_path, model_checksum, training_files,
bandsolve_version, batch, operator, n_inputs, n_failed, n_results, results_path,
results_sha256, key_id, prev_hash, run_hash, seal)``,
``inputs(run_id, position, path, sha256, status, reason)``,
``results(run_id, row, input_position, sample, source, flags, concentrations, record,
row_hash)``.
"""

from __future__ import annotations

import json
import math
import os
import shutil
import sqlite3
import time
from datetime import datetime, timezone
from pathlib import Path
from typing import Any

import pandas as pd

from bandsolve import __version__
from bandsolve.batch.ledger_chain import (
    APPEND_ONLY,
    GENESIS,
    RUN_FIELDS,
    SEAL_PURPOSE,
    LedgerCheck,
    chain_head,
    check_rows,
    row_hash,
    run_hash,
    verify_ledger,
)
from bandsolve.batch.ledger_read import (
    BUSY_SECONDS,
    check_ledger,
    list_checks,
    list_inputs,
    list_results,
    list_runs,
)
from bandsolve.calibration.model import Calibration
from bandsolve.calibration.modelfile import sha256_file
from bandsolve.errors import DataError
from bandsolve.flags import FLAG_COLUMN
from bandsolve.io.atomic import SpoolFolder, remove_stray_spools
from bandsolve.io.fingerprint import Fingerprints, record_bytes
from bandsolve.labkey import LabKey

__all__ = ["LedgerRecorder", "LedgerCheck", "check_ledger", "verify_ledger", "list_runs",
           "list_inputs", "list_results", "list_checks", "check_free_space", "prepare_ledger",
           "MIN_FREE_BYTES"]

_SCHEMA = """
CREATE TABLE IF NOT EXISTS runs (
    run_id INTEGER PRIMARY KEY AUTOINCREMENT, started TEXT NOT NULL, finished TEXT NOT NULL,
    model_path TEXT, model_checksum TEXT NOT NULL, training_files TEXT NOT NULL,
    bandsolve_version TEXT NOT NULL, batch TEXT, operator TEXT,
    n_inputs INTEGER NOT NULL, n_failed INTEGER NOT NULL, n_results INTEGER NOT NULL,
    results_path TEXT, results_sha256 TEXT, key_id TEXT, prev_hash TEXT, run_hash TEXT,
    seal TEXT);
CREATE TABLE IF NOT EXISTS inputs (
    run_id INTEGER NOT NULL REFERENCES runs(run_id), position INTEGER NOT NULL,
    path TEXT NOT NULL, sha256 TEXT, status TEXT NOT NULL, reason TEXT);
CREATE TABLE IF NOT EXISTS results (
    run_id INTEGER NOT NULL REFERENCES runs(run_id), row INTEGER NOT NULL,
    input_position INTEGER NOT NULL, sample TEXT NOT NULL, source TEXT, flags TEXT NOT NULL,
    concentrations TEXT NOT NULL, record TEXT NOT NULL, row_hash TEXT);
CREATE INDEX IF NOT EXISTS results_run ON results(run_id);
CREATE INDEX IF NOT EXISTS results_sample ON results(sample);
CREATE TABLE IF NOT EXISTS check_results (
    run_id INTEGER NOT NULL REFERENCES runs(run_id), sample TEXT NOT NULL,
    standard TEXT NOT NULL, analyte TEXT NOT NULL, expected REAL NOT NULL, found REAL,
    se REAL, recovery_pct REAL, low REAL, high REAL, passed INTEGER NOT NULL, basis TEXT);
CREATE INDEX IF NOT EXISTS check_results_run ON check_results(run_id)
"""
# Columns added since the first ledgers (older files gain them on their next run).
_ADDED = {"runs": ("results_path", "results_sha256", "key_id", "prev_hash", "run_hash", "seal"),
          "results": ("row_hash",)}
# One statement each: executescript() would commit the open transaction first.
_SETUP = [s.strip() for s in _SCHEMA.split(";")] + [
    f"CREATE TRIGGER IF NOT EXISTS {t}_no_{op} BEFORE {op.upper()} ON {t} BEGIN "
    f"SELECT RAISE(ABORT, 'the results ledger is append-only: recorded {t} cannot be "
    f"changed or removed'); END" for t in APPEND_ONLY for op in ("update", "delete")]
_SPOOL = """
CREATE TABLE results (row INTEGER PRIMARY KEY, input_position INTEGER, sample TEXT,
    source TEXT, flags TEXT, concentrations TEXT, record TEXT);
"""
_RETRIES = 4
_INSERT_ROWS = 5000
#: A ledger (or results) folder with less free space than this is refused before any work.
MIN_FREE_BYTES = 16 << 20


def _now() -> str:
    return datetime.now(timezone.utc).isoformat(timespec="seconds")


def _json_value(v: Any) -> Any:
    if isinstance(v, float) and not math.isfinite(v):
        return None
    return v.item() if hasattr(v, "item") else v


def _full(exc: BaseException) -> bool:
    return "full" in str(exc) or getattr(exc, "errno", None) == 28  # ENOSPC


def check_free_space(folder: str | os.PathLike[str], what: str) -> None:
    """Refuse a folder whose disk has less than :data:`MIN_FREE_BYTES` free."""
    free = shutil.disk_usage(folder).free
    if free < MIN_FREE_BYTES:
        raise DataError(f"{folder}: the disk holding the {what} has only {free >> 20} MB free "
                        f"(at least {MIN_FREE_BYTES >> 20} MB are needed); free some space and "
                        "run again (nothing was computed)")


def _check_writable(path: Path) -> None:
    """Open a write transaction and roll it back: a read-only file or folder fails here."""
    try:
        con = sqlite3.connect(path, timeout=BUSY_SECONDS, isolation_level=None)
        try:
            con.execute("BEGIN IMMEDIATE")
            con.execute("CREATE TABLE bandsolve_write_probe (x)")
            con.execute("ROLLBACK")
        finally:
            con.close()
    except sqlite3.DatabaseError as exc:
        if "locked" in str(exc) or "busy" in str(exc):
            return  # another run is appending: it will be waited for at the end
        raise DataError(f"{path}: the results ledger cannot be written ({exc}); check that the "
                        "file and its folder are writable (nothing was computed)") from None


def prepare_ledger(path: str | os.PathLike[str], key: LabKey | None = None) -> None:
    """Check, before the batch is computed, everything that can fail about the ledger.

    Raises
    ------
    DataError
        The ledger is damaged, its chain or seals are broken (quick check, see
        :func:`~bandsolve.batch.ledger_chain.verify_ledger`), it cannot be written, or its
        disk is nearly full.
    """
    path = Path(path)
    check_ledger(path, new_ok=True)
    if not path.parent.is_dir():
        raise DataError(f"--ledger {path}: the folder {path.parent} does not exist; create it "
                        "first or correct the path (bandsolve does not create folders)")
    check_free_space(path.parent, "ledger")
    if path.exists() and path.stat().st_size:
        check = verify_ledger(path, key, every_row=False)
        if not check.ok:
            raise DataError(f"{path}: refusing to append to a damaged ledger: {check.problem} "
                            f"(see bandsolve ledger {path} --verify)")
        _check_writable(path)
    elif not os.access(path.parent, os.W_OK):
        raise DataError(f"{path}: cannot create the results ledger, the folder {path.parent} "
                        "is not writable (nothing was computed)")


class LedgerRecorder:
    """A batch sink that records one run in a ledger (see
    :func:`bandsolve.batch.predict.run_batch`).

    Parameters
    ----------
    path : path-like
        The ledger (SQLite file); created when absent, in an existing folder.
    model : Calibration
        The model used (its checksum and training-file fingerprints are recorded).
    model_path : str, optional
        Where the model file was read from.
    batch, operator : str, optional
        User labels stored with the run.
    stdin_bytes : bytes, optional
        The raw bytes read from standard input (``-``), fingerprinted for the record.
    key : LabKey, optional
        Seal the run with the lab key; the existing runs must carry valid seals of it.

    Raises
    ------
    DataError
        Before any work, when the ledger is damaged, its chain or seals are broken, it
        cannot be written, or its disk is nearly full.
    """

    def __init__(self, path: str | os.PathLike[str], model: Calibration, *,
                 model_path: str | None = None, batch: str | None = None,
                 operator: str | None = None, stdin_bytes: bytes | None = None,
                 key: LabKey | None = None) -> None:
        from bandsolve.calibration.modelfile import model_checksum

        self.path, self.key = Path(path), key
        prepare_ledger(self.path, key)
        remove_stray_spools("ledger")
        self.started = _now()
        self.model_path, self.batch, self.operator = model_path, batch, operator
        self.checksum = model.provenance.get("model_checksum") or model_checksum(model)
        self.training = json.dumps(model.provenance.get("training_files", []), sort_keys=True)
        self.analytes = list(model.analytes)
        self._seen: Fingerprints | None = Fingerprints().__enter__()  # left in close()
        if stdin_bytes is not None:
            record_bytes("-", stdin_bytes)
        self._checks: list[tuple] = []
        self._position = -1
        self._folder = SpoolFolder("ledger")
        self._spool_path = self._folder.path / "run.sqlite"
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
        """SHA-256 of the bytes the readers took from ``item`` (None if not read to its end)."""
        seen = self._seen.get(item) if self._seen is not None else None
        return seen.sha256 if seen is not None and seen.complete else None

    def finish(self, inputs: list[str], failures: list[Any], *,
               results_file: str | os.PathLike[str] | None = None,
               results_path: str | os.PathLike[str] | None = None) -> int:
        """Write the run into the ledger in one transaction; returns its run id.

        Parameters
        ----------
        inputs, failures
            From the :class:`~bandsolve.batch.predict.BatchSummary`.
        results_file : path-like, optional
            The complete results file as it is now (possibly still a temporary file), whose
            SHA-256 is recorded.
        results_path : path-like, optional
            Where that file will be found (recorded as an absolute path).
        """
        self._spool.execute("COMMIT")
        reasons = {f.input: f.reason for f in failures}
        input_rows = [(i, p, self._sha(p), "failed" if p in reasons else "predicted",
                       reasons.get(p)) for i, p in enumerate(inputs)]
        n_results = self._spool.execute("SELECT COUNT(*) FROM results").fetchone()[0]
        self._spool.close()
        results = (None if results_path is None else os.path.abspath(results_path),
                   None if results_file is None else sha256_file(results_file))
        run = {"started": self.started, "finished": _now(), "model_path": self.model_path,
               "model_checksum": self.checksum, "training_files": self.training,
               "bandsolve_version": __version__, "batch": self.batch,
               "operator": self.operator, "n_inputs": len(inputs), "n_failed": len(reasons),
               "n_results": n_results, "results_path": results[0],
               "results_sha256": results[1],
               "key_id": self.key.key_id if self.key is not None else None}
        for attempt in range(_RETRIES):
            try:
                return self._append(run, input_rows)
            except sqlite3.DatabaseError as exc:
                if _full(exc):
                    raise DataError(f"{self.path}: the disk is full; nothing of this run was "
                                    "recorded and no results file was written: free space "
                                    "and run again") from None
                if "locked" not in str(exc) and "busy" not in str(exc):
                    raise DataError(f"{self.path}: cannot write the results ledger "
                                    f"({exc})") from None
                if attempt == _RETRIES - 1:
                    raise DataError(f"{self.path}: the results ledger stayed locked by other "
                                    "runs; run again (nothing of this run was recorded)"
                                    ) from None
                time.sleep(0.05 * 2**attempt)
        raise AssertionError("unreachable")  # pragma: no cover

    def _append(self, run: dict[str, Any], input_rows: list[tuple]) -> int:
        con = sqlite3.connect(self.path, timeout=BUSY_SECONDS, isolation_level=None)
        try:
            con.execute("ATTACH DATABASE ? AS spool", (str(self._spool_path),))
            con.execute("BEGIN IMMEDIATE")
            try:
                run_id = self._insert(con, run, input_rows)
                con.execute("COMMIT")
            except BaseException:
                if con.in_transaction:
                    con.execute("ROLLBACK")
                raise
            return run_id
        finally:
            con.close()

    def _insert(self, con: sqlite3.Connection, run: dict[str, Any],
                input_rows: list[tuple]) -> int:
        for statement in _SETUP:
            con.execute(statement)
        for table, columns in _ADDED.items():
            have = {r[1] for r in con.execute(f"PRAGMA table_info({table})")}
            for column in columns:
                if column not in have:
                    con.execute(f"ALTER TABLE {table} ADD COLUMN {column} TEXT")
        run_id = 1 + con.execute("SELECT COALESCE(MAX(seq), 0) FROM sqlite_sequence WHERE "
                                 "name = 'runs'").fetchone()[0]
        run = {"run_id": run_id, "prev_hash": _head(con), **run}
        last, batch = run["prev_hash"], []
        cursor = con.execute("SELECT row, input_position, sample, source, flags, "
                             "concentrations, record FROM spool.results ORDER BY row")
        for values in cursor:
            last = row_hash(last, values)
            batch.append((run_id, *values, last))
            if len(batch) >= _INSERT_ROWS:
                con.executemany("INSERT INTO main.results VALUES (?,?,?,?,?,?,?,?,?)", batch)
                batch = []
        con.executemany("INSERT INTO main.results VALUES (?,?,?,?,?,?,?,?,?)", batch)
        con.executemany("INSERT INTO inputs VALUES (?, ?, ?, ?, ?, ?)",
                        [(run_id, *r) for r in input_rows])
        con.executemany("INSERT INTO check_results VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
                        [(run_id, *row) for row in self._checks])
        values = tuple(run[f] for f in RUN_FIELDS)
        chained = run_hash(values, input_rows, last, check_rows(con, run_id))
        seal = self.key.mac(SEAL_PURPOSE, chained) if self.key is not None else None
        con.execute(f"INSERT INTO runs ({', '.join(RUN_FIELDS)}, run_hash, seal) VALUES "
                    f"({', '.join('?' * (len(RUN_FIELDS) + 2))})", (*values, chained, seal))
        return run_id

    def close(self) -> None:
        """Remove the temporary spool (call after :meth:`finish`, or to abandon the run)."""
        self._spool.close()
        self._folder.cleanup()
        if self._seen is not None:
            self._seen.__exit__(None, None, None)
            self._seen = None


def _head(con: sqlite3.Connection) -> str:
    """Hash of the newest run (the chain start for the next), walking older runs if unhashed."""
    row = con.execute("SELECT run_hash FROM runs ORDER BY run_id DESC LIMIT 1").fetchone()
    if row is None:
        return GENESIS
    if row[0] is not None:
        return row[0]
    return chain_head(con)
