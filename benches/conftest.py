"""Benchmark helpers: collect timings by name and print the ratios the README quotes.

Run with ``python -m pytest benches`` (see DEVELOPERS.md). Figures are ratios
measured in one run, so they hold on a noisy machine better than seconds do.
"""

from __future__ import annotations

import os
import platform

import pytest

TIMINGS: dict[str, float] = {}
FIGURES: list[tuple[str, float, str]] = []


def record(name: str, benchmark, per: float = 1.0) -> None:
    """Keep the best (minimum) time of a finished benchmark, divided by ``per`` units of work."""
    TIMINGS[name] = benchmark.stats.stats.min / per


def figure(label: str, value: float, target: str) -> None:
    FIGURES.append((label, value, target))


def peak_bytes(script: str, realizations: int) -> int:
    """Peak resident memory of a fresh interpreter running ``script`` (which prints its own
    ``ru_maxrss`` in bytes as JSON) with ``realizations`` as its argument."""
    import json
    import subprocess
    import sys

    out = subprocess.run([sys.executable, "-c", script, str(realizations)], capture_output=True, text=True)
    out.check_returncode()
    return json.loads(out.stdout)


def machine() -> str:
    try:
        with open("/proc/cpuinfo") as info:
            model = next(line.split(":", 1)[1].strip() for line in info if line.startswith("model name"))
    except (OSError, StopIteration):
        model = platform.processor() or "unknown CPU"
    return f"{model}, {os.cpu_count()} logical cores, {platform.system()} {platform.release()}"


@pytest.fixture
def timings():
    return TIMINGS


def pytest_terminal_summary(terminalreporter):
    if not TIMINGS:
        return
    write = terminalreporter.write_line
    write("")
    write(f"mottle benchmark figures on {machine()}")
    for name, seconds in sorted(TIMINGS.items()):
        write(f"  {name:<48} {seconds * 1e6:12.3f} us")
    for label, value, target in FIGURES:
        write(f"  {label:<48} {value:12.3f}   (target {target})")
