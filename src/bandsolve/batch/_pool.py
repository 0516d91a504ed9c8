"""Tasks run by worker processes *and* the calling process, results in input order.

With ``--jobs N`` on this machine, N processes work: N − 1 worker processes, and the calling
process, which reads the inputs, writes the results and, whenever every worker already has
two tasks, predicts the next task itself instead of waiting. On a 2-core machine a pool of
N workers beside a main process that also reads and writes would run three processes on two
cores, and each worker holds its own copy of the numerical libraries (about 175 MB resident,
100 MB of it private; measured with ``tests/benchmarks/bench_read.py``), so ``--jobs 2``
starts one worker, not two.
"""

from __future__ import annotations

from collections import deque
from collections.abc import Callable, Iterable, Iterator
from concurrent.futures import Future
from typing import Any

__all__ = ["workers_for", "shared_work"]

#: Tasks queued per worker: one running and one waiting, so a worker never waits for the
#: calling process to finish a task of its own.
PER_WORKER = 2


def workers_for(n_jobs: int, cpu_count: int) -> int:
    """Processes that ``n_jobs`` asks for, joblib's way (-1: all cores, -2: all but one)."""
    return n_jobs if n_jobs > 0 else max(1, cpu_count + 1 + n_jobs)


def shared_work(task: Callable[..., Any], calls: Iterable[tuple], n_processes: int,
                for_worker: Callable[[tuple], tuple] | None = None) -> Iterator[Any]:
    """``task(*args)`` for each ``args`` of ``calls``, in order, on ``n_processes`` processes
    (this one included); ``for_worker(args)`` is what a worker is sent instead of ``args``
    (for example the same rows without their text).

    At most ``PER_WORKER`` tasks per worker and ``2 * n_processes`` finished results wait in
    memory, so memory is bounded whatever the number of tasks. An exception raised by a task
    is raised here, at its place in the order.
    """
    if n_processes <= 1:
        yield from (task(*args) for args in calls)
        return
    from joblib.externals.loky import get_reusable_executor

    workers = n_processes - 1
    executor = get_reusable_executor(max_workers=workers)
    waiting: deque[Future] = deque()
    try:
        for args in calls:
            if sum(not f.done() for f in waiting) < PER_WORKER * workers:
                waiting.append(executor.submit(task, *(for_worker or tuple)(args)))
            else:
                waiting.append(_done(task, args))
            while waiting and (waiting[0].done() or len(waiting) > 2 * n_processes):
                yield waiting.popleft().result()
        while waiting:
            yield waiting.popleft().result()
    finally:
        for future in waiting:
            future.cancel()


def _done(task: Callable[..., Any], args: tuple) -> Future:
    """A task run here, as a finished future (so it queues with the workers' ones)."""
    future: Future = Future()
    try:
        future.set_result(task(*args))
    except Exception as exc:  # raised in order, as a worker's exception would be
        future.set_exception(exc)
    return future
