"""Ctrl-C stops a long mo.propagate promptly with KeyboardInterrupt."""

import signal
import subprocess
import sys
import textwrap
import time

SCRIPT = textwrap.dedent(
    """
    import signal
    import mottle as mo

    # A child started from a non-interactive shell may inherit SIGINT as ignored, and
    # Python then installs no handler; restore the default so the test sees what a user sees.
    signal.signal(signal.SIGINT, signal.default_int_handler)
    grid = mo.Grid(8192, 2000.0)
    system = mo.System(grid, potential=mo.Barrier(0.5, 0.0, 10.0), absorber=mo.Absorber(200.0))
    print("ready", flush=True)
    try:
        mo.propagate(system, mo.GaussianPacket(-300.0, 1.0, 20.0), 200000.0, 0.05)
    except KeyboardInterrupt:
        print("interrupted", flush=True)
        raise
    print("finished", flush=True)
    """
)


def test_ctrl_c_interrupts_a_long_propagation_within_a_second():
    process = subprocess.Popen(
        [sys.executable, "-c", SCRIPT], stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True
    )
    try:
        assert process.stdout.readline().strip() == "ready"
        time.sleep(1.0)  # well inside the run (4 million steps: minutes)
        assert process.poll() is None
        sent = time.monotonic()
        process.send_signal(signal.SIGINT)
        out, err = process.communicate(timeout=10.0)
        elapsed = time.monotonic() - sent
    finally:
        if process.poll() is None:
            process.kill()
            process.communicate()
    assert "interrupted" in out, err
    assert "KeyboardInterrupt" in err
    assert process.returncode != 0
    assert elapsed < 1.5, f"took {elapsed:.2f} s to stop"
