"""Output files: written atomically, and never onto an input, a link or a special file.

Every output goes to a temporary ``.NAME.XXXX.part`` file beside its destination, which is
flushed, synced to disk and renamed over the destination only when complete: a reader never
sees a half-written file, and a failure leaves the old file (or none). The temporary file is
locked while it is being written; a ``.part`` file left by a killed process is unlocked, and
the next write of the same destination removes it.

Before anything is computed, :func:`check_output` refuses a destination that would destroy
data: one of the command's own inputs (the same file by device and inode, so hard links and
symbolic links to an input are caught too), a symbolic link, a FIFO, a device, a socket or
a folder, and a destination whose folder does not exist (no folder is created silently;
:func:`output_folder` creates one where a command's output *is* a folder).
"""

from __future__ import annotations

import contextlib
import os
import shutil
import stat
import tempfile
import time
from collections.abc import Callable, Iterable, Iterator
from pathlib import Path
from typing import IO

from bandsolve.errors import DataError

try:
    import fcntl
except ImportError:  # pragma: no cover - not POSIX: no locks, no clean-up of stray files
    fcntl = None  # type: ignore[assignment]

__all__ = ["atomic_write", "check_output", "output_folder", "stray_parts", "remove_stray_parts",
           "SpoolFolder", "remove_stray_spools", "lock_nowait", "unlocked_files"]

_GUARDED = {b"SQLite format 3\x00": ("ledger", "a SQLite database (a results ledger?)"),
            b"PK\x03\x04": ("model", "a zip archive (a model file?)")}
_KINDS = {stat.S_ISFIFO: "a FIFO (named pipe)", stat.S_ISCHR: "a character device",
          stat.S_ISBLK: "a block device", stat.S_ISSOCK: "a socket"}


def check_output(path: str | os.PathLike[str], inputs: Iterable[str | os.PathLike[str]] = (),
                 *, option: str = "output", kind: str = "file") -> Path:
    """Refuse an output destination that would destroy data or create folders silently.

    Parameters
    ----------
    path : path-like
        The destination.
    inputs : iterable of path-like
        Files the command reads (spectra, model, ledger, concentrations); ``-`` and absent
        paths are ignored.
    option : str
        How the destination was given (``--out``), used in messages.
    kind : str
        What is written: ``"model"`` may replace an older model file; nothing else replaces
        a model file (zip archive) or a results ledger (SQLite database).

    Raises
    ------
    DataError
        One line naming the destination, what is wrong and what to do instead.
    """
    final = Path(path)
    if not final.parent.is_dir():
        raise DataError(f"{option} {path}: the folder {final.parent} does not exist; create it "
                        "first or correct the path (bandsolve does not create folders)")
    try:
        info = os.lstat(final)
    except FileNotFoundError:
        return final
    if stat.S_ISLNK(info.st_mode):
        raise DataError(f"{option} {path} is a symbolic link; bandsolve does not write through "
                        "links (the link would be replaced): give the real file name, or - "
                        "for standard output")
    if stat.S_ISDIR(info.st_mode):
        raise DataError(f"{option} {path} is a folder; give a file name")
    for test, special in _KINDS.items():
        if test(info.st_mode):
            raise DataError(f"{option} {path} is {special}, not a regular file; bandsolve writes "
                            "only regular files (use - for standard output)")
    for item in inputs:
        if os.fspath(item) == "-" or not os.path.exists(item):
            continue
        if os.path.samefile(final, item):
            raise DataError(f"{option} {path} is the input {item} (the same file); writing it "
                            "would destroy that input: choose another output name")
    with open(final, "rb") as handle:
        head = handle.read(16)
    for magic, (guarded, what) in _GUARDED.items():
        if head.startswith(magic) and guarded != kind:
            raise DataError(f"{option} {path} is {what}; bandsolve never writes other output "
                            "over it: choose another output name")
    return final


def output_folder(path: str | os.PathLike[str], *, option: str = "output") -> Path:
    """Create the folder ``path`` (its parent must exist) or accept it when it already is one."""
    folder = Path(path)
    if folder.is_dir() and not folder.is_symlink():
        return folder
    check_output(folder, option=option)
    folder.mkdir()
    return folder


def lock_nowait(fd: int) -> bool:
    """Lock ``fd`` exclusively without waiting; False when another process holds it."""
    if fcntl is None:  # pragma: no cover
        return False
    try:
        fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
    except OSError:
        return False
    return True


def unlocked_files(folder: str | os.PathLike[str], pattern: str) -> list[Path]:
    """Files of ``folder`` matching ``pattern`` whose writer is gone (nobody holds the lock)."""
    found = []
    for path in sorted(Path(folder).glob(pattern)):
        try:
            fd = os.open(path, os.O_RDONLY)
        except OSError:
            continue
        try:
            if lock_nowait(fd):
                found.append(path)
        finally:
            os.close(fd)  # releases the lock
    return found


def stray_parts(path: str | os.PathLike[str]) -> list[Path]:
    """Temporary files of ``path`` left by killed writers (unlocked ``.NAME.*.part`` files)."""
    final = Path(path)
    return unlocked_files(final.parent, f".{final.name}.*.part")


def remove_stray_parts(path: str | os.PathLike[str]) -> list[Path]:
    """Delete :func:`stray_parts` of ``path``; returns what was removed."""
    removed = []
    for part in stray_parts(path):
        with contextlib.suppress(FileNotFoundError):
            part.unlink()
            removed.append(part)
    return removed


def _new_part(final: Path) -> tuple[int, str]:
    """A locked temporary file beside ``final`` (made again if a clean-up removed it)."""
    while True:
        fd, tmp = tempfile.mkstemp(prefix=f".{final.name}.", suffix=".part", dir=final.parent)
        lock_nowait(fd)
        if os.fstat(fd).st_nlink:  # still linked: no clean-up took it before the lock
            return fd, tmp
        os.close(fd)  # pragma: no cover - a race with a clean-up, lost: try a new name


@contextlib.contextmanager
def atomic_write(path: str | os.PathLike[str], mode: str = "w", *, kind: str = "file",
                 before_replace: Callable[[Path], None] | None = None,
                 **open_kwargs) -> Iterator[IO]:
    """Open a temporary file beside ``path``; on success flush, fsync and rename it over ``path``.

    If the block raises (or the process dies), ``path`` keeps its old content (or stays
    absent) and the temporary file is removed where possible (else by the next write).

    Parameters
    ----------
    path : path-like
        Final destination (checked with :func:`check_output`).
    kind : str
        What is written (see :func:`check_output`).
    mode : {"w", "wb"}
        Text or binary mode.
    before_replace : callable, optional
        Called with the complete, synced temporary file just before it is renamed into
        place (for example to commit a ledger record of it); if it raises, nothing is
        renamed and the temporary file is removed.
    **open_kwargs
        Passed to :func:`open` (for example ``encoding="utf-8"``, ``newline=""``).
    """
    final = check_output(path, kind=kind)
    remove_stray_parts(final)
    if "b" not in mode:
        open_kwargs.setdefault("encoding", "utf-8")
    fd, tmp = _new_part(final)
    umask = os.umask(0)
    os.umask(umask)
    try:
        os.chmod(tmp, 0o666 & ~umask)  # mkstemp makes 0600; give the usual permissions
        lock = os.dup(fd)  # keeps the lock until the rename, after the handle is closed
        try:
            with os.fdopen(fd, mode, **open_kwargs) as handle:
                yield handle
                handle.flush()
                os.fsync(handle.fileno())
            if before_replace is not None:
                before_replace(Path(tmp))
            os.replace(tmp, final)
        finally:
            os.close(lock)
    except BaseException:
        with contextlib.suppress(OSError):
            os.unlink(tmp)
        raise


class SpoolFolder:
    """A private temporary folder for one run's spool, locked while the run lives.

    A run killed before :meth:`cleanup` leaves the folder unlocked, and
    :func:`remove_stray_spools` (called when the next run starts) removes it.
    """

    def __init__(self, kind: str) -> None:
        self.path = Path(tempfile.mkdtemp(prefix=f"bandsolve-{kind}-"))
        self._fd = os.open(self.path / ".lock", os.O_CREAT | os.O_RDWR, 0o600)
        lock_nowait(self._fd)

    def cleanup(self) -> None:
        """Remove the folder and release its lock."""
        if self._fd is not None:
            shutil.rmtree(self.path, ignore_errors=True)
            os.close(self._fd)
            self._fd = None


def remove_stray_spools(kind: str, *, grace_seconds: float = 60.0) -> list[Path]:
    """Remove spool folders of ``kind`` left by killed runs; returns what was removed.

    A folder whose lock is held belongs to a live run and is kept; one without a lock file is
    removed only when older than ``grace_seconds`` (it may be being created).
    """
    removed = []
    for folder in Path(tempfile.gettempdir()).glob(f"bandsolve-{kind}-*"):
        lock = folder / ".lock"
        try:
            fd = os.open(lock, os.O_RDONLY)
        except FileNotFoundError:
            with contextlib.suppress(OSError):
                if time.time() - folder.stat().st_mtime > grace_seconds:
                    shutil.rmtree(folder, ignore_errors=True)
                    removed.append(folder)
            continue
        except OSError:
            continue
        try:
            if lock_nowait(fd):
                shutil.rmtree(folder, ignore_errors=True)
                removed.append(folder)
        finally:
            os.close(fd)
    return removed
