"""Work shared between worker processes and the calling process: order, errors, bounds."""

from __future__ import annotations

import os

import pytest

from bandsolve.batch._pool import shared_work, workers_for


def _square_and_pid(k: int) -> tuple[int, int]:
    if k == 7:
        raise ValueError("task 7 fails")
    return k * k, os.getpid()


def test_results_come_in_input_order_from_both_kinds_of_process():
    out = list(shared_work(_square_and_pid, ((k,) for k in range(6)), 2))
    assert [v for v, _ in out] == [k * k for k in range(6)]
    assert {pid for _, pid in out} - {os.getpid()}  # a worker process took part


def test_an_error_is_raised_at_its_place_in_the_order():
    seen = []
    with pytest.raises(ValueError, match="task 7 fails"):
        for value, _ in shared_work(_square_and_pid, ((k,) for k in range(12)), 2):
            seen.append(value)
    assert seen == [k * k for k in range(7)]


def test_one_process_runs_everything_here():
    out = list(shared_work(_square_and_pid, ((k,) for k in range(3)), 1))
    assert {pid for _, pid in out} == {os.getpid()}


def test_job_counts_read_as_joblib_reads_them():
    # joblib's convention: -1 all cores, -2 all but one (joblib documentation of n_jobs).
    assert [workers_for(n, 8) for n in (1, 3, -1, -2, -9)] == [1, 3, 8, 7, 1]
