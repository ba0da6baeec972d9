"""Long transfer-matrix and particle runs release the GIL and stop on Ctrl-C."""

import os
import signal
import threading
import time

import pytest

import mottle as mo


def long_chain():
    grid = mo.Grid(2**20, 2.0**20)
    return mo.System(grid, model=mo.Lattice(), disorder=mo.BoxDisorder(1.0, grid.start + 1, grid.stop - 1))


def interrupt_after(seconds):
    timer = threading.Timer(seconds, lambda: os.kill(os.getpid(), signal.SIGINT))
    timer.start()
    return timer


@pytest.mark.parametrize(
    "call",
    [
        lambda: mo.lyapunov(long_chain(), 0.5, 100_000),
        lambda: mo.transmission_spectrum(long_chain(), [0.5, 1.0], 100_000),
        lambda: mo.classical_ensemble(
            mo.System(mo.Grid(1024, 102.4)), mo.GaussianPacket(0.0, 1.0, 2.0), 1e4, 0.01, 200_000
        ),
    ],
    ids=["lyapunov", "transmission_spectrum", "classical_ensemble"],
)
def test_ctrl_c_stops_a_long_run(call):
    # Each call would run for minutes; SIGINT after 0.3 s must end it within a second or two.
    timer = interrupt_after(0.3)
    start = time.perf_counter()
    try:
        with pytest.raises(KeyboardInterrupt):
            call()
    finally:
        timer.cancel()
    assert time.perf_counter() - start < 3.0


def test_the_gil_is_released_while_the_core_runs():
    ticks = []
    stop = threading.Event()

    def count():
        while not stop.is_set():
            ticks.append(time.perf_counter())
            time.sleep(0.005)

    thread = threading.Thread(target=count)
    thread.start()
    try:
        start = time.perf_counter()
        mo.lyapunov(long_chain(), 0.5, 96, threads=1)
        elapsed = time.perf_counter() - start
    finally:
        stop.set()
        thread.join()
    during = [t for t in ticks if start < t < start + elapsed]
    # the other thread kept ticking every ~5 ms while the chain ran
    assert elapsed > 0.2
    assert len(during) > 0.3 * elapsed / 0.005
