"""One BLAS thread for loops of small matrix products.

With several BLAS threads, many small products stall on thread hand-over (measured for
this package: a small solve took 16 ms instead of 1.9 ms on two cores). Loops over
cross-validation folds and prediction blocks therefore run with one BLAS thread; the
parallelism lives a level up (joblib workers over files and chunks).
"""

from __future__ import annotations

import functools
from contextlib import AbstractContextManager

from threadpoolctl import ThreadpoolController

__all__ = ["single_blas_thread"]


@functools.lru_cache(maxsize=1)
def _controller() -> ThreadpoolController:
    """Built once: scanning the loaded libraries costs 1-10 ms."""
    return ThreadpoolController()


def single_blas_thread() -> AbstractContextManager:
    """Context manager limiting BLAS to one thread inside the block."""
    return _controller().limit(limits=1, user_api="blas")
