"""One outcome for every run: the results file and its ledger record both exist, or neither.

A run with a ledger and a results file proceeds in this order:

1. an *intent* note ``.LEDGER.XXXX.intent`` is written beside the ledger, naming the results
   file, and kept locked while the run lives;
2. the results go to a temporary ``.RESULTS.XXXX.part`` file, which is synced to disk;
3. the run is committed to the ledger with the SHA-256 of that complete file;
4. the file is renamed into place, and the intent removed.

A kill before step 3 leaves no record (the ``.part`` file is removed later); a kill between
steps 3 and 4 leaves a record whose results are in the ``.part`` file. The next run with the
same ledger calls :func:`recover_results` before it starts: for every intent whose run is
gone (its lock is free), and for the results file of the newest run, it renames the
``.part`` file whose SHA-256 the ledger recorded into place (the record decides), and
removes every other stray ``.part`` file and the intent.
"""

from __future__ import annotations

import contextlib
import json
import os
import sqlite3
import tempfile
from pathlib import Path

from bandsolve.batch.ledger_read import open_ro
from bandsolve.calibration.modelfile import sha256_file
from bandsolve.io.atomic import lock_nowait, remove_stray_parts, stray_parts, unlocked_files

__all__ = ["RunIntent", "recover_results"]


class RunIntent:
    """A note beside the ledger, locked while the run lives, naming its results file."""

    def __init__(self, ledger: str | os.PathLike[str],
                 results_path: str | os.PathLike[str]) -> None:
        ledger = Path(ledger)
        self._fd, name = tempfile.mkstemp(prefix=f".{ledger.name}.", suffix=".intent",
                                          dir=ledger.parent)
        self.path = Path(name)
        lock_nowait(self._fd)
        os.write(self._fd, json.dumps({"results_path": os.path.abspath(results_path)}).encode())
        os.fsync(self._fd)

    def close(self) -> None:
        """Remove the note (the run ended, recorded or not)."""
        if self._fd is not None:
            with contextlib.suppress(FileNotFoundError):
                self.path.unlink()
            os.close(self._fd)
            self._fd = None


def _intents(ledger: Path) -> dict[Path, str]:
    found = {}
    for note in unlocked_files(ledger.parent, f".{ledger.name}.*.intent"):
        with contextlib.suppress(OSError, ValueError, KeyError, TypeError):
            found[note] = os.path.abspath(json.loads(note.read_text())["results_path"])
    return found


def recover_results(ledger: str | os.PathLike[str],
                    out: str | os.PathLike[str] | None = None) -> list[str]:
    """Complete runs killed between their ledger commit and the rename of their results file.

    Parameters
    ----------
    ledger : path-like
        The ledger.
    out : path-like, optional
        The results file the coming run will write (its stray ``.part`` files go too).

    Returns
    -------
    list of str
        One sentence per results file completed.
    """
    path = Path(ledger)
    if not path.is_file() or not path.stat().st_size:
        return []
    intents = _intents(path)
    con = open_ro(path)
    try:
        done = _recover(con, [out, *intents.values()])
    except sqlite3.DatabaseError:
        return []  # a damaged ledger: refused, with its reason, by the recorder
    finally:
        con.close()
    for note in intents:
        with contextlib.suppress(FileNotFoundError):
            note.unlink()
    return done


def _recover(con: sqlite3.Connection, targets: list) -> list[str]:
    if "results_sha256" not in {r[1] for r in con.execute("PRAGMA table_info(runs)")}:
        return []
    newest = con.execute("SELECT results_path FROM runs ORDER BY run_id DESC LIMIT 1"
                         ).fetchone()
    done = []
    for target in sorted({os.path.abspath(p) for p in (newest and newest[0], *targets) if p}):
        record = con.execute("SELECT run_id, results_sha256 FROM runs WHERE results_path = ? "
                             "ORDER BY run_id DESC LIMIT 1", (target,)).fetchone()
        done += _complete(Path(target), record)
    return done


def _complete(target: Path, record: tuple | None) -> list[str]:
    if not target.parent.is_dir():
        return []
    parts = stray_parts(target)
    done = []
    if record is not None and parts and not (target.is_file()
                                             and sha256_file(target) == record[1]):
        for part in parts:
            if sha256_file(part) == record[1]:
                os.replace(part, target)
                done.append(f"completed {target}: run {record[0]} was recorded but stopped "
                            "before its results file was put in place")
                break
    remove_stray_parts(target)
    return done
