"""Loading studies of 10^4 and 10^5 points: ``parse_study`` of a 100 x 100 and a 300 x 334
Cartesian sweep of one disorder entry's two keys, and of a zipped group of 10^4 and 10^5 values
of a packet and a disorder key. Target: a few seconds at 10^5 points on 2 cores (the checks
run once per combination of the values each part of a point reads, sampled beyond
``COMBINATIONS``; the points are made on demand). One round each.
"""

from __future__ import annotations

import pytest

from conftest import figure, record
from mottle.studies.study import parse_study

BASE = """\
[system]
points = 4096
length = 400.0
absorber = { width = 40.0 }

[[system.disorder]]
kind = "speckle"
strength = 0.2
correlation_length = 0.5
start = 0.0
stop = 40.0

[packet]
center = -100.0
wavenumber = 1.3
width = 10.0

[run]
duration = 100.0
step = 0.05
realizations = 16
"""


def grid(rows: int, columns: int) -> str:
    return BASE + (
        f'\n[sweep]\n"system.disorder.0.strength" = {{ start = 0.05, stop = 0.5, count = {rows} }}\n'
        f'"system.disorder.0.stop" = {{ start = 10.0, stop = 100.0, count = {columns} }}\n'
    )


def zipped(count: int) -> str:
    return BASE + (
        f'\n[[sweep.zip]]\n"packet.wavenumber" = {{ start = 1.0, stop = 1.5, count = {count} }}\n'
        f'"system.disorder.0.stop" = {{ start = 10.0, stop = 100.0, count = {count} }}\n'
    )


CASES = {
    "grid 100 x 100": (grid(100, 100), 10_000),
    "grid 300 x 334": (grid(300, 334), 100_200),
    "zip of 10^4": (zipped(10_000), 10_000),
    "zip of 10^5": (zipped(100_000), 100_000),
}


@pytest.mark.parametrize("case", list(CASES))
def test_load_study(benchmark, tmp_path, case):
    text, count = CASES[case]
    study = benchmark.pedantic(parse_study, args=(text, "load.toml", tmp_path), rounds=1, iterations=1)
    assert len(study.points) == count
    record(f"load study: {case}", benchmark)
    figure(f"load study: {case}, seconds", benchmark.stats.stats.min, "a few s at 10^5")
