"""Running study points on a Dask cluster: one task per (point, chunk of realizations).

A task computes realizations ``[start, start + count)`` of one point with
:func:`mottle.ensemble_partial` (``start`` a multiple of :data:`mottle.CHUNK`)
and returns the unfolded chunks; the driver folds a point's partials in index
order with :func:`mottle.merge_partials`, so the numbers do not depend on how
many workers there were, which worker ran what, or how often a task was
recomputed after a worker died.

Threads. Dask runs as many tasks at once on a worker as it has Dask threads,
and does not limit the Rust (rayon) pool inside them, so each task sizes that
pool itself: ``threads`` when given, else the cores the worker process may use
divided by its Dask threads. A local cluster of N workers gets one Dask thread
per worker (one task at a time) and ``threads = cores // N`` Rust threads per
task, so the machine is used fully and never oversubscribed.

Task size: enough chunks that every thread of a task has one, cut so that the
study makes about four tasks per task slot (so a worker that finishes early
finds more work and one that dies loses little).
"""

from __future__ import annotations

import contextlib
import math
import signal
import socket
import threading
import time
import warnings
from collections.abc import Iterator
from dataclasses import dataclass
from typing import TYPE_CHECKING

from .. import _checks
from ..errors import InvalidParameterError, MottleError
from .study import StudyPoint, build_packet, build_system, run_arguments

if TYPE_CHECKING:
    from ..dynamics.ensemble import EnsemblePartial

# A worker killed while running a task makes every task on it "suspicious"; Dask gives up on
# a task after this many such deaths (its default is 3, low for long runs on preemptible nodes).
ALLOWED_FAILURES = 10
TASKS_PER_WORKER = 4


@dataclass
class TaskOutput:
    """What a task sends back: the partial and where and when it ran."""

    index: int
    partial: EnsemblePartial
    began: float
    ended: float
    elapsed: float
    host: str


def run_task(resolved: dict, tables: dict, seed: int, index: int, start: int, count: int, threads):
    """Realizations ``[start, start + count)`` of the point ``resolved`` (runs on a worker)."""
    from ..dynamics.ensemble import ensemble_partial

    began, clock = time.time(), time.perf_counter()
    if threads is None:
        threads = _worker_threads()
    system = build_system(resolved, tables)
    packet = build_packet(resolved)
    arguments = run_arguments(resolved, seed)
    arguments.pop("realizations")
    with warnings.catch_warnings():
        # The driver already showed the point's warnings once; workers would repeat them per task.
        warnings.simplefilter("ignore")
        partial = ensemble_partial(system, packet, start=start, count=count, threads=threads, **arguments)
    return TaskOutput(index, partial, began, time.time(), time.perf_counter() - clock, socket.gethostname())


def _worker_threads() -> int:
    """This worker's cores shared among the tasks it runs at once (its Dask threads)."""
    try:
        from distributed import get_worker

        worker = get_worker()
        state = getattr(worker, "state", None)
        concurrent = int(getattr(state, "nthreads", None) or worker.nthreads)  # type: ignore[attr-defined]
    except (ImportError, ValueError, AttributeError):
        concurrent = 1
    return max(1, _checks.default_threads() // max(concurrent, 1))


def _distributed():
    try:
        import dask
        import distributed
    except ImportError:
        raise MottleError("running on a cluster needs Dask: pip install 'mottle[cluster]'") from None
    return dask, distributed


def task_size(points: list[StudyPoint], slots: int, threads_per_task: int) -> int:
    """Realizations per task: a multiple of CHUNK, at least one chunk per thread of the task."""
    from ..dynamics.ensemble import CHUNK

    chunks = sum(math.ceil(point.realizations / CHUNK) for point in points)
    per_task = max(threads_per_task, math.ceil(chunks / (TASKS_PER_WORKER * max(slots, 1))))
    return CHUNK * per_task


@contextlib.contextmanager
def connect(workers: int | None = None, scheduler=None, threads: int | None = None):
    """``(client, threads per task)``: a fresh local cluster of ``workers`` processes, or one joined.

    ``scheduler`` is an address (``tcp://host:8786``), a ``distributed.Client``
    (used as it is, left open) or a cluster object (``dask_jobqueue.SLURMCluster``).
    The threads per task are ``threads``, else for a local cluster the cores
    divided among its workers, else None (each task decides on its worker).
    """
    dask, distributed = _distributed()
    if workers is not None and scheduler is not None:
        raise InvalidParameterError("give workers (a local cluster) or scheduler (an existing one), not both")
    if isinstance(scheduler, distributed.Client):
        yield scheduler, threads
        return
    with dask.config.set({"distributed.scheduler.allowed-failures": ALLOWED_FAILURES}):
        if scheduler is not None:
            try:
                client = distributed.Client(scheduler, timeout="30s")
            except (OSError, TimeoutError) as error:
                raise MottleError(f"cannot reach the Dask scheduler at {scheduler}: {error}") from None
            with client:
                yield client, threads
            return
        if isinstance(workers, bool) or not isinstance(workers, int) or workers < 1:
            raise InvalidParameterError(f"workers must be an integer >= 1, got {workers!r}")
        per_task = threads or max(1, _checks.default_threads() // workers)
        import logging

        with _workers_ignore_ctrl_c():
            cluster = distributed.LocalCluster(
                n_workers=workers,
                threads_per_worker=1,
                processes=True,
                host="127.0.0.1",
                scheduler_port=0,
                dashboard_address=None,
                silence_logs=logging.CRITICAL,
            )
        with cluster, distributed.Client(cluster) as client:
            yield client, per_task


@contextlib.contextmanager
def _workers_ignore_ctrl_c():
    """Start worker processes with SIGINT ignored (inherited across exec): Ctrl-C in a terminal
    reaches the whole process group, and the driver, not each worker, should answer it by
    closing the cluster."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    previous = signal.signal(signal.SIGINT, signal.SIG_IGN)
    try:
        yield
    finally:
        signal.signal(signal.SIGINT, previous)


def run_on_cluster(client, points: list[StudyPoint], threads: int | None, advance) -> Iterator[list]:
    """Run ``points`` as tasks on ``client``; yields lists of ``(point, result, timing)`` as points complete.

    ``advance(realizations)`` is called as each task finishes.
    """
    from distributed import KilledWorker, as_completed

    from ..dynamics.ensemble import merge_partials, plan

    layout = client.nthreads()
    # Task slots: a worker runs as many tasks at once as it has Dask threads.
    slots = max(1, sum(layout.values()))
    size = task_size(points, slots, threads or 1)
    futures = []
    owner = {}
    expected = {}
    by_index = {point.index: point for point in points}
    times = {}
    for rank, point in enumerate(points):
        expected[point.index] = point.realizations
        # Validates and warns once per point, here at the driver, before any task runs.
        system, packet, arguments = point.build()
        arguments.pop("realizations")
        times[point.index] = plan(system, packet, **arguments).times
        for start in range(0, point.realizations, size):
            count = min(size, point.realizations - start)
            future = client.submit(
                run_task,
                point.resolved,
                dict(point.tables),
                point.seed,
                point.index,
                start,
                count,
                threads,
                pure=False,
                key=f"mottle-point-{point.index}-{start}-{time.time_ns()}",
                # Earlier points first, so that points finish (and are saved) one after another.
                priority=len(points) - rank,
            )
            futures.append(future)
            owner[future.key] = point
    partials: dict[int, list[TaskOutput]] = {index: [] for index in expected}
    pending = as_completed(futures)
    try:
        for batch in pending.batches():
            ready = []
            for future in batch:
                try:
                    output = future.result()
                except KilledWorker:
                    raise
                except Exception as error:
                    point = owner[future.key]
                    raise MottleError(
                        f"point {point.index + 1} ({point.label()}) failed on a worker: "
                        f"{type(error).__name__}: {error}"
                    ) from error
                partials[output.index].append(output)
                advance(output.partial.count)
                if sum(item.partial.count for item in partials[output.index]) == expected[output.index]:
                    ready.append(output.index)
            finished = []
            for index in sorted(ready):
                point = by_index[index]
                outputs = sorted(partials.pop(index), key=lambda item: item.partial.start)
                result = merge_partials(
                    [item.partial for item in outputs], point.system(), point.seed, times[index]
                )
                timing = {
                    "wall_time": max(item.ended for item in outputs) - min(item.began for item in outputs),
                    "compute_time": sum(item.elapsed for item in outputs),
                    "host": ",".join(sorted({item.host for item in outputs})),
                }
                finished.append((point, result, timing))
            if finished:
                yield finished
    except (Exception, KeyboardInterrupt):
        with contextlib.suppress(Exception):
            client.cancel(futures)
        raise


__all__ = ["connect", "run_on_cluster", "run_task", "task_size"]
