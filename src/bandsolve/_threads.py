"""One BLAS thread for loops of small matrix products.

With several BLAS threads, many small products stall on thread hand-over (measured for
this package: a small solve took 16 ms instead of 1.9 ms on two cores). Loops over
cross-validation folds and prediction blocks therefore run with one BLAS thread; the
parallelism lives a level up (joblib workers over files and chunks).
"""

from __future__ import annotations

import functools
from collections.abc import Callable
from contextlib import AbstractContextManager
from typing import TypeVar

from threadpoolctl import ThreadpoolController

__all__ = ["one_blas_thread", "single_blas_thread"]

F = TypeVar("F", bound=Callable)


@functools.lru_cache(maxsize=1)
def _controller() -> ThreadpoolController:
    """Built once: scanning the loaded libraries costs 1-10 ms."""
    return ThreadpoolController()


def single_blas_thread() -> AbstractContextManager:
    """Context manager limiting BLAS to one thread inside the block."""
    return _controller().limit(limits=1, user_api="blas")


def one_blas_thread(func: F) -> F:
    """Decorator: run the whole function with one BLAS thread.

    For builders, whose work is a sequence of mid-sized products (cross-products, scores,
    residuals, least squares) between plain numpy steps: extra BLAS threads that wait
    between products compete with the main thread (measured for this package on two shared
    cores: a 2000 × 300 PLS build took 0.65 s of compute with them and 0.25 s without).
    """

    @functools.wraps(func)
    def wrapper(*args, **kwargs):
        with single_blas_thread():
            return func(*args, **kwargs)

    return wrapper  # type: ignore[return-value]
