"""Running study points on a Dask cluster: tasks of (point, run of chunks) pieces, in a sliding window.

A piece is realizations ``[start, start + count)`` of one point, computed with
:func:`mottle.ensemble_partial` (``start`` a multiple of :data:`mottle.CHUNK`);
a task is one or more pieces and returns their unfolded chunks. The driver
folds each point's chunks in index order as they arrive (what
:func:`mottle.merge_partials` does), so the numbers do not depend on how many
workers there were, which worker ran what, or how often a task was recomputed
after a worker died. With ``target_stderr`` the driver checks the
transmission's standard error after every chunk, as :func:`mottle.ensemble`
does, and stops the point there: chunks computed beyond it are discarded.

The driver's memory and work stay bounded at any study size: at most
``IN_FLIGHT_PER_SLOT`` tasks per task slot are submitted at a time, only
the points of those tasks are held (their chunks folded and dropped as they
arrive), a finished point leaves the driver at its commit, and each point's
system and run are built and checked on the worker that runs it (the warnings
of its first piece are sent back and shown once).

Threads. Dask runs as many tasks at once on a worker as it has Dask threads,
and does not limit the Rust (rayon) pool inside them, so each task sizes that
pool itself: ``threads`` when given, else the cores the worker process may use
divided by its Dask threads. A local cluster of N workers gets one Dask thread
per worker (one task at a time) and ``threads = cores // N`` Rust threads per
task, so the machine is used fully and never oversubscribed.

Task size. A point is cut into pieces of at least one chunk per thread of a
task, and cut so that the study makes about four pieces per task slot (so a
worker that finishes early finds more work and one that dies loses little).
Small points are grouped, consecutive ones in one task, up to about
``TASK_SECONDS`` of compute as measured on the tasks so far, so that a
study of many small points does not pay Dask's cost per task for each.
"""

from __future__ import annotations

import contextlib
import dataclasses
import math
import signal
import socket
import threading
import time
import warnings
from collections.abc import Iterator, Sequence
from dataclasses import dataclass, field
from typing import TYPE_CHECKING

from .. import _checks
from ..errors import InvalidParameterError, MottleError
from .study import StudyPoint, build_packet, build_system, detector_of, run_arguments

if TYPE_CHECKING:
    from ..dynamics.ensemble import EnsemblePartial, EnsembleResult

# A worker killed while running a task makes every task on it "suspicious"; Dask gives up on
# a task after this many such deaths (its default is 3, low for long runs on preemptible nodes).
ALLOWED_FAILURES = 10
TASKS_PER_WORKER = 4
# Tasks submitted at a time per task slot: enough that no worker waits for the driver.
IN_FLIGHT_PER_SLOT = 3
# Compute per task that small points are grouped up to, and the most pieces in one task.
TASK_SECONDS = 0.5
PIECES_PER_TASK = 256
# Points sampled to estimate a large study's chunks (which only size the pieces).
SAMPLE = 1000
# How often the driver asks the scheduler how many task slots there are (workers come and go).
LAYOUT_SECONDS = 5.0


@dataclass
class TaskOutput:
    """What a piece sends back: its realizations (a partial, or for a whole point its ``result``),
    where and when it ran, and for a point's first piece its warnings."""

    index: int
    partial: EnsemblePartial
    began: float
    ended: float
    elapsed: float
    host: str
    warnings: list = field(default_factory=list)
    count: int = 0
    result: EnsembleResult | None = None


def run_task(
    resolved: dict, tables: dict, seed: int, index: int, start: int, count: int, threads, whole=False
):
    """Realizations ``[start, start + count)`` of the point ``resolved`` (runs on a worker).

    ``whole``: they are all the point's realizations, folded here into its
    result (:func:`mottle.merge_partials`, bitwise what the driver would make).
    The warnings of the point's first piece (``start == 0``) are kept in the
    output as ``(category, message)`` for the driver to show; the others'
    would repeat them and are dropped.
    """
    from ..dynamics.ensemble import ensemble_partial, merge_partials

    began, clock = time.time(), time.perf_counter()
    if threads is None:
        threads = _worker_threads()
    result = None
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always" if start == 0 else "ignore")
        system = build_system(resolved, tables)
        packet = build_packet(resolved)
        arguments = run_arguments(resolved, seed)
        arguments.pop("realizations")
        arguments.pop("target_stderr", None)  # the driver stops the point
        partial = ensemble_partial(system, packet, start=start, count=count, threads=threads, **arguments)
        if whole:
            result = merge_partials([partial], system)
            partial = dataclasses.replace(partial, chunks=[])
    shown = [(item.category, str(item.message)) for item in caught]
    return TaskOutput(
        index,
        partial,
        began,
        time.time(),
        time.perf_counter() - clock,
        socket.gethostname(),
        shown,
        count,
        result,
    )


class Work:
    """A task's pieces ``(resolved, tables, seed, index, start, count, whole)``, in an object of its
    own so that Dask ships it as it is rather than walking every dict in it for futures."""

    __slots__ = ("pieces",)

    def __init__(self, pieces: list[tuple]):
        self.pieces = pieces

    def __getstate__(self):
        return self.pieces

    def __setstate__(self, pieces):
        self.pieces = pieces


def run_pieces(work: Work | list[tuple], threads) -> list[TaskOutput]:
    """:func:`run_task` for each piece of ``work`` (runs on a worker).

    An error is sent back with the index of the point it came from as ``mottle_point``.
    """
    outputs = []
    for piece in work.pieces if isinstance(work, Work) else work:
        try:
            resolved, tables, seed, index, start, count, whole = piece
            outputs.append(run_task(resolved, tables, seed, index, start, count, threads, whole))
        except Exception as error:
            with contextlib.suppress(AttributeError, TypeError):
                error.mottle_point = piece[3]  # type: ignore[attr-defined]
            raise
    return outputs


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


def _piece_size(chunks: int, slots: int, threads_per_task: int) -> int:
    """Realizations per piece: a multiple of CHUNK, at least one chunk per thread of the task."""
    from ..dynamics.ensemble import CHUNK

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


class _Assembly:
    """One point's chunks, folded in index order as they arrive; done at the cap or at target_stderr."""

    def __init__(self, point: StudyPoint, target: float | None):
        from ..dynamics.ensemble import _Fold

        self.point, self.target = point, target
        self.fold = _Fold()
        self.waiting: dict[int, TaskOutput] = {}
        self.first: EnsemblePartial | None = None
        self.began, self.ended, self.elapsed = math.inf, -math.inf, 0.0
        self.hosts: set[str] = set()
        self.done = False

    def add(self, output: TaskOutput) -> int:
        """Fold what is now in order; returns the realizations folded."""
        self.waiting[output.partial.start] = output
        before = self.fold.count
        while not self.done and self.fold.next_start in self.waiting:
            item = self.waiting.pop(self.fold.next_start)
            if self.first is None:
                self.first = item.partial
            self.began, self.ended = min(self.began, item.began), max(self.ended, item.ended)
            self.elapsed += item.elapsed
            self.hosts.add(item.host)
            for chunk in item.partial.chunks:
                self.fold.add(chunk)
                if self.fold.reached(self.target):
                    self.done = True
                    break
            if self.fold.count >= self.point.realizations:
                self.done = True
        if self.done:
            self.waiting.clear()
        return self.fold.count - before

    def result(self):
        from ..dynamics.ensemble import _finish

        first = self.first
        assert first is not None
        result = _finish(
            self.fold,
            first.seed,
            first.times,
            self.point.system(),
            (first.spectrum_wavenumbers, first.spectrum_energies),
            first.step,
            first.duration,
        )
        timing = {
            "wall_time": self.ended - self.began,
            "compute_time": self.elapsed,
            "host": ",".join(sorted(self.hosts)),
        }
        return self.point, result, timing


def _target(point: StudyPoint) -> float | None:
    """The point's ``target_stderr`` (None: run the cap), checked as :func:`mottle.ensemble` checks it."""
    from ..dynamics.propagate import default_detector

    target = point.run_arguments().get("target_stderr")
    if target is None:
        return None
    target = _checks.positive("target_stderr", target)
    if default_detector(point.system(), detector_of(point.resolved)) is None:
        raise InvalidParameterError(
            f"point {point.index + 1} ({point.label()}): target_stderr needs a detector "
            "(or disorder to default it to)"
        )
    return target


class _Pieces:
    """The pieces still to submit, point after point, made as they are asked for."""

    def __init__(self, points: Sequence[StudyPoint], size: int, threads: int):
        from ..dynamics.ensemble import CHUNK

        self.points, self.size, self.threads = points, size, threads
        # The chunks to run only size the pieces: past SAMPLE points, estimated from a sample.
        step = max(1, len(points) // SAMPLE)
        sample = [points[i] for i in range(0, len(points), step)]
        chunks = sum(math.ceil(point.realizations / CHUNK) for point in sample)
        self.chunks_left = round(chunks * len(points) / max(len(sample), 1))
        self.rank = 0  # the point whose pieces come next
        self.start = 0
        self.target: float | None = None
        self.current: StudyPoint | None = None
        self.current_rank = -1

    def _point(self) -> StudyPoint:
        """The point at ``rank``, made once (a study's points are made each time they are asked for)."""
        if self.current is None or self.current_rank != self.rank:
            self.current, self.current_rank = self.points[self.rank], self.rank
        return self.current

    def __bool__(self) -> bool:
        return self.rank < len(self.points)

    def skip(self, index: int) -> None:
        """Point ``index`` stopped early: submit no more of it."""
        from ..dynamics.ensemble import CHUNK

        if self and self.start > 0 and self._point().index == index:
            point = self._point()
            self.chunks_left -= math.ceil((point.realizations - self.start) / CHUNK)
            self.rank += 1
            self.start = 0

    def take(self, runs: float) -> list[tuple[StudyPoint, float | None, int, int]]:
        """Pieces ``(point, target, start, count)`` of about ``runs`` realizations (at least one piece)."""
        from ..dynamics.ensemble import CHUNK

        out: list[tuple[StudyPoint, float | None, int, int]] = []
        total = 0
        while self and len(out) < PIECES_PER_TASK:
            point = self._point()
            if self.start == 0:
                self.target = _target(point)
            # A point that may stop early is cut finer: less is computed past its stopping chunk.
            size = CHUNK * max(self.threads, 1) if self.target is not None else self.size
            count = min(size, point.realizations - self.start)
            if out and total + count > runs:
                break
            out.append((point, self.target, self.start, count))
            total += count
            self.start += count
            self.chunks_left -= math.ceil(count / CHUNK)
            if self.start >= point.realizations:
                self.rank += 1
                self.start = 0
        return out


def run_on_cluster(
    client, points: Sequence[StudyPoint], threads: int | None, advance, skip=None, batch=None
) -> Iterator[list]:
    """Run ``points`` as tasks on ``client``; yields lists of ``(point, result, timing)`` as batches fall due.

    ``advance(realizations)`` is called as realizations are folded,
    ``skip(realizations)`` when a point stops at its target_stderr before its cap.
    ``batch`` (a :class:`mottle.studies.runner.Batch`) collects the finished
    points and says when to yield them; what it holds when the run is stopped
    is not yielded (the caller may save it).
    """
    from distributed import KilledWorker, as_completed

    from .runner import Batch

    batch = Batch() if batch is None else batch
    per_task = threads or 1
    slots = max(1, sum(client.nthreads().values()))
    pieces = _Pieces(points, 0, per_task)
    pieces.size = _piece_size(pieces.chunks_left, slots, per_task)
    asked = time.monotonic()
    in_flight: dict[str, tuple] = {}  # task key -> (future, the points of its pieces)
    assembling: dict[int, _Assembly] = {}
    seconds_per_run: float | None = None
    ran, spent = 0, 0.0
    submitted = 0
    # Results are gathered in the background as tasks finish, not one round trip at a time here.
    pending = as_completed(with_results=True, raise_errors=False)

    def fill():
        nonlocal submitted
        while pieces and len(in_flight) < IN_FLIGHT_PER_SLOT * slots:
            runs = 0.0 if seconds_per_run is None else TASK_SECONDS / max(seconds_per_run, 1e-12)
            taken = pieces.take(min(runs, pieces.size))
            if not taken:
                return
            work = []
            for point, target, start, count in taken:
                whole = start == 0 and count == point.realizations and target is None
                if not whole and point.index not in assembling:
                    assembling[point.index] = _Assembly(point, target)
                tables = dict(point.tables)
                work.append((point.resolved, tables, point.seed, point.index, start, count, whole))
            first = taken[0]
            future = client.submit(
                run_pieces,
                Work(work),
                threads,
                pure=False,
                key=f"mottle-point-{first[0].index}-{first[2]}-{len(taken)}-{time.time_ns()}",
                # Earlier tasks first, so that points finish (and are saved) one after another.
                priority=-submitted,
            )
            submitted += 1
            in_flight[future.key] = (future, {p.index: p for p, _, _, _ in taken})
            pending.add(future)

    def receive(future, outputs):
        nonlocal seconds_per_run, ran, spent
        _, owners = in_flight.pop(future.key)
        if future.status == "error":
            error = outputs[1]
            if isinstance(error, KilledWorker):
                raise error
            point = owners.get(getattr(error, "mottle_point", None), next(iter(owners.values())))
            where = f"point {point.index + 1} ({point.label()})"
            raise MottleError(f"{where} failed on a worker: {type(error).__name__}: {error}") from error
        if future.status != "finished":
            first = next(iter(owners.values()))
            raise MottleError(
                f"the task of point {first.index + 1} ({first.label()}) was {future.status} on the cluster; "
                "the points finished so far are saved: run again to resume"
            )
        for output in outputs:
            ran += output.count
            spent += output.elapsed
            for category, message in output.warnings:
                warnings.warn(message, category, stacklevel=2)
            if output.result is not None:  # a whole point, folded on the worker
                timing = {"wall_time": output.ended - output.began, "compute_time": output.elapsed}
                batch.add((owners[output.index], output.result, {**timing, "host": output.host}))
                advance(output.count)
                continue
            assembly = assembling.get(output.index)
            if assembly is None:  # the point stopped at its target_stderr before this piece
                continue
            advance(assembly.add(output))
            if assembly.done:
                del assembling[output.index]
                pieces.skip(output.index)
                finished = assembly.result()
                if skip is not None and finished[1].count < assembly.point.realizations:
                    skip(assembly.point.realizations - finished[1].count)
                batch.add(finished)
        if ran:
            seconds_per_run = spent / ran

    try:
        fill()
        while in_flight:
            if not pending.has_ready() and batch:
                # Something waits to be saved: wake up to save it in time.
                while not pending.has_ready() and not batch.due():
                    time.sleep(min(0.02, batch.wait_left()))
                if batch.due():
                    yield batch.take()
                    continue
            for future, outputs in pending.next_batch(block=True):
                receive(future, outputs)
            if time.monotonic() - asked >= LAYOUT_SECONDS:
                asked = time.monotonic()
                slots = max(1, sum(client.nthreads().values()))
                pieces.size = _piece_size(pieces.chunks_left, slots, per_task)
            fill()
            if batch.due() or (not in_flight and batch):
                yield batch.take()
    except BaseException:
        with contextlib.suppress(Exception):
            client.cancel([future for future, _ in in_flight.values()])
        raise


__all__ = ["Work", "connect", "run_on_cluster", "run_pieces", "run_task"]
