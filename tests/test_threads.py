"""BLAS thread limits: inside the limited block every BLAS library runs one thread."""

from __future__ import annotations

import numpy as np
from threadpoolctl import threadpool_info

from bandsolve._threads import one_blas_thread


def _blas_threads() -> list[int]:
    return [lib["num_threads"] for lib in threadpool_info() if lib["user_api"] == "blas"]


def test_one_blas_thread_limits_the_call_and_restores_the_setting():
    before = _blas_threads()

    @one_blas_thread
    def product(a: np.ndarray) -> tuple[np.ndarray, list[int]]:
        """Docstring kept by the decorator."""
        return a @ a.T, _blas_threads()

    a = np.arange(12.0).reshape(3, 4)
    result, inside = product(a)
    np.testing.assert_array_equal(result, a @ a.T)  # same numbers (numpy is the reference)
    assert inside and all(n == 1 for n in inside)
    assert _blas_threads() == before  # threadpoolctl restores the previous limits
    assert product.__doc__ == "Docstring kept by the decorator."
