"""Running a study: every point not yet in the store, in-process or on Dask, saved as it finishes."""

from __future__ import annotations

import math
import os
import socket
import sys
import time

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


class _Silent:
    def start(self, points, done, realizations):
        pass

    def advance(self, realizations):
        pass

    def finished(self, line):
        pass

    def close(self):
        pass


class _Display(_Silent):
    """A tqdm bar over realizations (points, rate, ETA) and one printed line per finished point."""

    def __init__(self, stream=None):
        self.stream = stream or sys.stderr
        self.bar = None

    def start(self, points, done, realizations):
        self.points, self.done = points, done
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
            smoothing=0.1,
            bar_format="{desc} {percentage:3.0f}%|{bar}| {n_fmt}/{total_fmt} runs "
            "[{elapsed}<{remaining}, {rate_fmt}]",
        )
        self._describe()

    def _describe(self):
        if self.bar is not None:
            self.bar.set_description_str(f"points {self.done}/{self.points}")

    def advance(self, realizations):
        if self.bar is not None:
            self.bar.update(realizations)

    def finished(self, line):
        self.done += 1
        if self.bar is not None:
            self.bar.write(line, file=sys.stdout)
            self._describe()
        else:
            print(line, flush=True)

    def close(self):
        if self.bar is not None:
            self.bar.close()


def summary_line(point: StudyPoint, total: int, result, wall_time: float, names=None) -> str:
    """``point 3/6 [stop=50, wavenumber=1]: T = 0.12 ± 0.004, <ln T> = -2.3 ± 0.05 (256 runs, 12 s)``."""
    transmission = result.transmission
    log = (
        ""
        if math.isnan(transmission.log_mean)
        else f", <ln T> = {transmission.log_mean:.4g} ± {transmission.log_stderr:.2g}"
    )
    return (
        f"point {point.index + 1}/{total} [{point.label(names)}]: T = {transmission.mean:.4g} ± "
        f"{transmission.stderr:.2g}{log}, R = {result.reflection.mean:.4g} "
        f"({result.count} runs, {wall_time:.3g} s)"
    )


def _in_process(points: list[StudyPoint], threads, advance):
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
        yield [(point, result, {"wall_time": elapsed, "compute_time": elapsed, "host": host})]


def run_study(
    study: Study | str | os.PathLike,
    store: str | os.PathLike,
    workers: int | None = None,
    scheduler=None,
    progress: bool = True,
    threads: int | None = None,
) -> Store:
    """Run every point of ``study`` that ``store`` does not hold yet, saving each as it finishes.

    In-process by default (``threads`` Rust threads, all cores if None);
    ``workers=N`` starts a local Dask cluster of N processes on 127.0.0.1,
    ``scheduler`` joins an existing one (an address, a ``Client`` or a cluster
    object). With Dask, ``threads`` is the Rust threads per task (default: the
    cores divided among the local workers, or on an existing cluster a worker's
    cores divided by its Dask threads). The results are bitwise the same
    either way. A second call with
    the same store resumes; a store of another study is refused. Ctrl-C raises
    :class:`StudyInterrupted` after keeping every finished point. Returns the
    store, opened for reading.
    """
    if not isinstance(study, Study):
        study = load_study(study, store)
    display = _Display() if progress else _Silent()
    total = len(study.points)
    names = short_names(study.points[0].parameters)
    with StoreWriter(store, study) as writer:
        todo = [point for point in study.points if point.index not in writer.done]
        if not todo:
            return open_store(store)
        display.start(total, total - len(todo), sum(point.realizations for point in todo))
        try:
            if workers is None and scheduler is None:
                batches = _in_process(todo, threads, display.advance)
                _consume(batches, writer, display, total, names)
            else:
                from .cluster import connect, run_on_cluster

                with connect(workers, scheduler, threads) as (client, task_threads):
                    batches = run_on_cluster(client, todo, task_threads, display.advance)
                    _consume(batches, writer, display, total, names)
        except KeyboardInterrupt:
            display.close()
            raise StudyInterrupted(store, len(writer.done), total) from None
        finally:
            display.close()
    return open_store(store)


def _consume(batches, writer: StoreWriter, display, total: int, names) -> None:
    try:
        from distributed import KilledWorker
    except ImportError:
        KilledWorker = ()  # type: ignore[misc,assignment]
    try:
        for batch in batches:
            writer.commit(
                Finished(point, result, timing["wall_time"], timing["compute_time"], timing["host"])
                for point, result, timing in batch
            )
            for point, result, timing in batch:
                display.finished(summary_line(point, total, result, timing["wall_time"], names))
    except KilledWorker as error:
        raise MottleError(
            f"Dask gave up on a task after workers died running it too often ({error}); "
            f"the points finished so far are saved: run again to resume"
        ) from None


__all__ = ["StudyInterrupted", "run_study"]
