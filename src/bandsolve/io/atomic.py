"""Atomic file writing: a reader never sees a half-written output file."""

from __future__ import annotations

import contextlib
import os
import tempfile
from collections.abc import Iterator
from pathlib import Path
from typing import IO

__all__ = ["atomic_write"]


@contextlib.contextmanager
def atomic_write(path: str | os.PathLike[str], mode: str = "w", **open_kwargs) -> Iterator[IO]:
    """Open a temporary file beside ``path``; on success flush, fsync and rename it over ``path``.

    If the block raises (or the process dies), ``path`` keeps its old content (or stays
    absent) and the temporary file is removed where possible.

    Parameters
    ----------
    path : path-like
        Final destination.
    mode : {"w", "wb"}
        Text or binary mode.
    **open_kwargs
        Passed to :func:`open` (for example ``encoding="utf-8"``, ``newline=""``).
    """
    final = Path(path)
    final.parent.mkdir(parents=True, exist_ok=True)
    if "b" not in mode:
        open_kwargs.setdefault("encoding", "utf-8")
    fd, tmp = tempfile.mkstemp(prefix=f".{final.name}.", suffix=".part", dir=final.parent)
    umask = os.umask(0)
    os.umask(umask)
    try:
        os.chmod(tmp, 0o666 & ~umask)  # mkstemp makes 0600; give the usual permissions
        with os.fdopen(fd, mode, **open_kwargs) as handle:
            yield handle
            handle.flush()
            os.fsync(handle.fileno())
        os.replace(tmp, final)
    except BaseException:
        with contextlib.suppress(OSError):
            os.unlink(tmp)
        raise
