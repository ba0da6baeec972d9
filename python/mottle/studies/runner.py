"""Running a study: every point not yet in the store, in-process or on Dask, saved as it finishes."""

from __future__ import annotations

import contextlib
import math
import os
import socket
import sys
import time
from collections.abc import Sequence

from ..errors import MottleError
from .store import Finished, Store, StoreWriter, open_store
from .study import Study, StudyPoint, load_study, short_names


class StudyInterrupted(KeyboardInterrupt):
    """Ctrl-C during :func:`run_study`: the points finished before it are in the store."""

    def __init__(self, store: str | os.PathLike, done: int, total: int):
        self.store, self.done, self.total = store, done, total
        super().__init__(
            f"interrupted: {done} of {total} points are saved in {store}; "
            f"run the study again with the same store to compute the rest"
        )


# Finished points are committed in batches: a batch is saved once its first point has waited
# this long (or would have, by the time the next point finishes), or when it holds COMMIT_POINTS.
COMMIT_SECONDS = 1.0
COMMIT_POINTS = 5000
# The plain-text progress (without tqdm) prints a status line at most this often.
STATUS_SECONDS = 10.0
# Runs per second are measured over this much of the recent past.
RATE_SECONDS = 60.0


class Batch:
    """Finished points waiting for one commit; :meth:`due` says when to commit them."""

    def __init__(self, seconds: float | None = None, limit: int | None = None, clock=time.monotonic):
        self.seconds = COMMIT_SECONDS if seconds is None else seconds
        self.limit = COMMIT_POINTS if limit is None else limit
        self.clock = clock
        self.items: list = []
        self.since = 0.0

    def __len__(self) -> int:
        return len(self.items)

    def add(self, item) -> None:
        if not self.items:
            self.since = self.clock()
        self.items.append(item)

    def due(self, ahead: float = 0.0) -> bool:
        """Commit now: the oldest point has waited ``seconds``, or will have ``ahead`` seconds from now."""
        if not self.items:
            return False
        return len(self.items) >= self.limit or self.clock() - self.since + ahead >= self.seconds

    def wait_left(self) -> float:
        """Seconds until :meth:`due` (inf when empty)."""
        return math.inf if not self.items else max(0.0, self.since + self.seconds - self.clock())

    def take(self) -> list:
        items, self.items = self.items, []
        return items


def _duration(seconds: float) -> str:
    """``42 s``, ``3 min 05 s``, ``2 h 07 min``, ``3 d 4 h``."""
    if not math.isfinite(seconds):
        return "?"
    seconds = max(0, round(seconds))
    if seconds < 60:
        return f"{seconds} s"
    minutes, seconds = divmod(seconds, 60)
    if minutes < 60:
        return f"{minutes} min {seconds:02d} s"
    hours, minutes = divmod(minutes, 60)
    if hours < 48:
        return f"{hours} h {minutes:02d} min"
    days, hours = divmod(hours, 24)
    return f"{days} d {hours} h"


def _rate(value: float) -> str:
    """``0.52``, ``37.4``, ``812``, ``1.52k``, ``23.1k``, ``1.2M``."""
    for scale, suffix in ((1e6, "M"), (1e3, "k")):
        if value >= scale:
            return f"{value / scale:.3g}{suffix}"
    return f"{value:.3g}"


class Progress:
    """Points done of all, runs per second over the recent past, and the time left at that rate.

    ``clock`` is a monotonic clock in seconds (a test passes a fake one).
    """

    def __init__(self, points: int, done: int, runs: int, clock=time.monotonic):
        self.points, self.done, self.runs, self.clock = points, done, runs, clock
        self.ran = 0
        # (time, runs so far): the recent past over which the rate is measured.
        self.history = [(clock(), 0)]

    def advance(self, runs: int) -> None:
        self.ran += runs
        now = self.clock()
        self.history.append((now, self.ran))
        while len(self.history) > 2 and self.history[1][0] <= now - RATE_SECONDS:
            del self.history[0]

    def skip(self, runs: int) -> None:
        """A point stopped early (its target_stderr reached): ``runs`` of its cap will not run."""
        self.runs = max(self.ran, self.runs - runs)

    def finished(self, points: int = 1) -> None:
        self.done += points

    def rate(self) -> float:
        """Runs per second since the oldest remembered moment (0 before any run)."""
        began, ran = self.history[0]
        elapsed = self.clock() - began
        return (self.ran - ran) / elapsed if elapsed > 0 and self.ran > ran else 0.0

    def left(self) -> float:
        """Seconds left at the present rate (inf before any run)."""
        rate = self.rate()
        return (self.runs - self.ran) / rate if rate > 0 else math.inf

    def status(self) -> str:
        """``1.52k runs/s, 3 min 05 s left``."""
        rate = self.rate()
        if rate == 0:
            return "starting"
        return f"{_rate(rate)} runs/s, {_duration(self.left())} left"

    def line(self) -> str:
        """``points 120/10000, 4096/160000 runs, 1.52k runs/s, 1 min 43 s left``."""
        return f"points {self.done}/{self.points}, {self.ran}/{self.runs} runs, {self.status()}"


class _Silent:
    def start(self, points, done, realizations):
        pass

    def advance(self, realizations):
        pass

    def skip(self, realizations):
        pass

    def finished(self, lines):
        pass

    def close(self):
        pass


class _Display(_Silent):
    """A tqdm bar over realizations (points done, runs per second, time left) and one printed line per
    finished point; without tqdm, a status line on stderr every ``STATUS_SECONDS``."""

    def __init__(self, stream=None, clock=time.monotonic, out=None):
        self.stream = stream or sys.stderr
        self.out = out
        self.clock = clock
        self.bar = None
        self.progress = Progress(0, 0, 0, clock)
        self.closed = False

    def start(self, points, done, realizations):
        self.progress = Progress(points, done, realizations, self.clock)
        self.shown = self.clock()
        try:
            from tqdm import tqdm
        except ImportError:
            self.bar = None
            return
        self.bar = tqdm(
            total=realizations,
            unit="run",
            file=self.stream,
            dynamic_ncols=True,
            bar_format="{desc} {percentage:3.0f}%|{bar}| {n_fmt}/{total_fmt} runs [{elapsed}, {postfix}]",
        )
        self._describe()

    def _describe(self):
        if self.bar is not None:
            self.bar.set_description_str(f"points {self.progress.done}/{self.progress.points}", refresh=False)
            self.bar.set_postfix_str(self.progress.status(), refresh=False)

    def advance(self, realizations):
        self.progress.advance(realizations)
        if self.bar is not None:
            now = self.clock()
            if now - self.shown >= 0.5:
                self.shown = now
                self._describe()
            self.bar.update(realizations)
        elif self.clock() - self.shown >= STATUS_SECONDS:
            self.shown = self.clock()
            print(self.progress.line(), file=self.stream, flush=True)

    def skip(self, realizations):
        self.progress.skip(realizations)
        if self.bar is not None:
            self.bar.total = self.progress.runs
            self.bar.refresh()

    def finished(self, lines):
        self.progress.finished(len(lines))
        out = self.out or sys.stdout
        if self.bar is not None:
            self.bar.write("\n".join(lines), file=out)
            self._describe()
            self.bar.refresh()
        else:
            print("\n".join(lines), file=out, flush=True)

    def close(self):
        if self.closed:
            return
        self.closed = True
        if self.bar is not None:
            self._describe()
            self.bar.close()
        elif self.progress.ran:
            print(self.progress.line(), file=self.stream, flush=True)


def summary_line(point: StudyPoint, total: int, result, wall_time: float, names=None) -> str:
    """``point 3/6 [stop=50, wavenumber=1]: T = 0.12 ± 0.004, <ln T> = -2.3 ± 0.05 (256 runs, 12 s)``.

    A point without a detector (no disorder, none given: a kicked rotor, a released condensate) has no
    T or R; its line gives ``<p^2>`` at the last snapshot (when there is one) and the norm instead."""
    transmission = result.transmission
    head = f"point {point.index + 1}/{total} [{point.label(names)}]: "
    tail = f"({result.count} runs, {wall_time:.3g} s)"
    if math.isnan(transmission.mean):
        parts = []
        if len(result.times):
            last = result.momentum_squared[-1]
            parts.append(f"<p^2> = {last.mean:.4g} ± {last.stderr:.2g} at t = {result.times[-1]:.4g}")
        parts.append(f"norm = {result.norm.mean:.6g}")
        return head + ", ".join(parts) + " " + tail
    log = (
        ""
        if math.isnan(transmission.log_mean)
        else f", <ln T> = {transmission.log_mean:.4g} ± {transmission.log_stderr:.2g}"
    )
    return (
        f"{head}T = {transmission.mean:.4g} ± "
        f"{transmission.stderr:.2g}{log}, R = {result.reflection.mean:.4g} {tail}"
    )


def _in_process(points: Sequence[StudyPoint], threads, advance, skip, batch: Batch):
    """Run ``points`` one after another; yields lists of ``(point, result, timing)`` as batches fall due."""
    from ..dynamics.ensemble import ensemble

    host = socket.gethostname()
    for point in points:
        system, packet, arguments = point.build()
        seen = [0]

        def progress(done, total, seen=seen):
            advance(done - seen[0])
            seen[0] = done

        began = time.perf_counter()
        try:
            result = ensemble(system, packet, threads=threads, progress=progress, **arguments)
        except MottleError as error:
            raise MottleError(f"point {point.index + 1} ({point.label()}) failed: {error}") from error
        elapsed = time.perf_counter() - began
        if result.count < point.realizations:  # target_stderr reached before the cap
            skip(point.realizations - result.count)
        batch.add((point, result, {"wall_time": elapsed, "compute_time": elapsed, "host": host}))
        # Commit unless the batch can wait for one more point like this one.
        if batch.due(ahead=elapsed):
            yield batch.take()
    if batch:
        yield batch.take()


class _Todo(Sequence):
    """The points of a study not in the store yet, made as they are asked for (a study's points
    are made on demand, so the driver never holds them all)."""

    def __init__(self, points: Sequence[StudyPoint], indices: list[int]):
        self.points, self.indices = points, indices

    def __len__(self) -> int:
        return len(self.indices)

    def __getitem__(self, item):
        if isinstance(item, slice):
            return [self.points[index] for index in self.indices[item]]
        return self.points[self.indices[item]]

    def __iter__(self):
        for index in self.indices:
            yield self.points[index]


def _cap(study: Study, todo: _Todo) -> int:
    """The realizations of the points to run, at most (without making each point when unswept)."""
    if "run.realizations" not in study.sweep:
        return len(todo) * int(study.document["run"]["realizations"])
    return sum(point.realizations for point in todo)


def run_study(
    study: Study | str | os.PathLike,
    store: str | os.PathLike,
    workers: int | None = None,
    scheduler=None,
    progress: bool = True,
    threads: int | None = None,
) -> Store:
    """Run every point of ``study`` that ``store`` does not hold yet, saving the points as they finish.

    In-process by default (``threads`` Rust threads, all cores if None);
    ``workers=N`` starts a local Dask cluster of N processes on 127.0.0.1,
    ``scheduler`` joins an existing one (an address, a ``Client`` or a cluster
    object). With Dask, ``threads`` is the Rust threads per task (default: the
    cores divided among the local workers, or on an existing cluster a worker's
    cores divided by its Dask threads). The results are bitwise the same
    either way. Points that finish together are saved in one commit, at least
    every ``COMMIT_SECONDS`` (1 s). A second call with the same store resumes;
    a store of another study is refused. Ctrl-C raises
    :class:`StudyInterrupted` after keeping every saved point. The progress
    display shows the points done, runs per second and the time left. Returns
    the store, opened for reading.
    """
    if not isinstance(study, Study):
        study = load_study(study, store)
    display = _Display() if progress else _Silent()
    total = len(study.points)
    names = short_names(study.points[0].parameters)
    with StoreWriter(store, study) as writer:
        todo = _Todo(study.points, [i for i in range(total) if i not in writer.done])
        if not todo:
            return open_store(store)
        display.start(total, total - len(todo), _cap(study, todo))
        try:
            pending = Batch()
            if workers is None and scheduler is None:
                batches = _in_process(todo, threads, display.advance, display.skip, pending)
                _consume(batches, writer, display, total, names, pending)
            else:
                from .cluster import connect, run_on_cluster

                with connect(workers, scheduler, threads) as (client, task_threads):
                    batches = run_on_cluster(
                        client, todo, task_threads, display.advance, skip=display.skip, batch=pending
                    )
                    _consume(batches, writer, display, total, names, pending)
        except KeyboardInterrupt:
            display.close()
            raise StudyInterrupted(store, len(writer.done), total) from None
        finally:
            display.close()
    return open_store(store)


def _consume(batches, writer: StoreWriter, display, total: int, names, pending: Batch) -> None:
    """Commit each yielded batch; on Ctrl-C or an error also the finished points still ``pending``."""
    try:
        from distributed import KilledWorker
    except ImportError:
        KilledWorker = ()  # type: ignore[misc,assignment]

    def save(batch):
        writer.commit(
            Finished(point, result, timing["wall_time"], timing["compute_time"], timing["host"])
            for point, result, timing in batch
        )
        lines = []
        for point, result, timing in batch:
            lines.append(summary_line(point, total, result, timing["wall_time"], names))
        display.finished(lines)

    try:
        for batch in batches:
            save(batch)
    except BaseException as error:
        # Ctrl-C, or a point that failed: the finished points still waiting are saved first.
        if pending:
            with contextlib.suppress(Exception):  # the first error is the one to report
                save(pending.take())
        if isinstance(error, KilledWorker):
            raise MottleError(
                f"Dask gave up on a task after workers died running it too often ({error}); "
                f"the points finished so far are saved: run again to resume"
            ) from None
        raise
    finally:
        close = getattr(batches, "close", None)
        if close is not None:
            close()


__all__ = ["COMMIT_SECONDS", "Batch", "Progress", "StudyInterrupted", "run_study"]
