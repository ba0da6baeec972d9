"""Ensembles: equal to single runs, bitwise reproducible, honest statistics."""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import textwrap
import time

import numpy as np
import pytest

import mottle as mo

GRID = mo.Grid(points=512, length=200.0)
DISORDER = mo.GaussianDisorder(rms=0.15, correlation_length=1.0, start=0.0, stop=30.0)
SYSTEM = mo.System(GRID, disorder=DISORDER, absorber=mo.Absorber(width=30.0))
PACKET = mo.GaussianPacket(center=-35.0, wavenumber=1.2, width=6.0)
RUN = {"duration": 50.0, "step": 0.05}


def run_ensemble(realizations=40, **options):
    options = {"seed": 4, "snapshots": (25.0, 50.0), **options}
    return mo.ensemble(SYSTEM, PACKET, RUN["duration"], RUN["step"], realizations, **options)


def assert_bitwise_equal(first: mo.EnsembleResult, second: mo.EnsembleResult):
    one, other = first.to_arrays(), second.to_arrays()
    assert one.keys() == other.keys()
    for name in one:
        assert np.array_equal(one[name], other[name], equal_nan=True), name


def test_each_realization_equals_a_single_run():
    result = run_ensemble()
    for index in (0, 15, 16, 39):
        run = mo.propagate(
            SYSTEM, PACKET, **RUN, seed=4, index=index, detector=(0.0, 30.0), snapshots=(25.0, 50.0)
        )
        for name in ("transmission", "reflection", "norm", "absorbed_left", "absorbed_right"):
            assert result.samples[name][index] == pytest.approx(getattr(run, name), abs=1e-12), name
        np.testing.assert_allclose(result.samples["position"][index], run.position, atol=1e-10)
    assert result.count == 40
    assert len(set(np.round(result.samples["transmission"], 12))) == 40


def test_aggregates_are_bitwise_equal_for_any_thread_count():
    reference = run_ensemble(threads=1)
    assert_bitwise_equal(reference, run_ensemble(threads=2))
    assert_bitwise_equal(reference, run_ensemble(threads=3))


def test_partials_merged_in_order_equal_the_ensemble():
    whole = run_ensemble(realizations=48)
    arguments = (SYSTEM, PACKET, RUN["duration"], RUN["step"])
    options = {"seed": 4, "snapshots": (25.0, 50.0)}
    partials = [
        mo.ensemble_partial(*arguments, start=32, count=16, **options),
        mo.ensemble_partial(*arguments, start=0, count=32, threads=1, **options),
    ]
    assert_bitwise_equal(whole, mo.merge_partials(partials, SYSTEM, seed=4, times=whole.times))


def test_stat_matches_numpy_on_the_samples():
    result = run_ensemble()
    samples = result.samples["transmission"]
    stat = result.transmission
    assert stat.count == samples.size
    assert stat.mean == pytest.approx(np.mean(samples), rel=1e-15)
    assert stat.std == pytest.approx(np.std(samples, ddof=1), rel=1e-14)
    assert stat.stderr == pytest.approx(np.std(samples, ddof=1) / np.sqrt(samples.size), rel=1e-14)
    assert stat.log_mean == pytest.approx(np.mean(np.log(samples)), rel=1e-14)
    assert stat.typical == pytest.approx(np.exp(np.mean(np.log(samples))), rel=1e-14)
    assert stat.typical < stat.mean  # Jensen's inequality for a non-constant sample


def test_profiles_are_means_over_realizations():
    result = run_ensemble(realizations=20)
    runs = [
        mo.propagate(SYSTEM, PACKET, **RUN, seed=4, index=r, snapshots=(25.0, 50.0), classical=False)
        for r in range(20)
    ]
    density = np.mean([np.abs(run.snapshots) ** 2 for run in runs], axis=0)
    np.testing.assert_allclose(result.density, density, rtol=1e-9, atol=1e-14)
    log_density = np.mean([np.log(np.maximum(np.abs(run.snapshots) ** 2, 1e-300)) for run in runs], axis=0)
    np.testing.assert_allclose(result.log_density, log_density, rtol=1e-9, atol=1e-9)
    # The momentum density integrates to the norm in the box (Parseval).
    dk = 2.0 * np.pi / GRID.length
    norms = np.mean([run.norms for run in runs], axis=0)
    np.testing.assert_allclose(result.momentum.sum(axis=1) * dk, norms, rtol=1e-12)
    assert np.all(np.diff(result.k) > 0)
    widths = np.mean([run.width**2 for run in runs], axis=0)
    np.testing.assert_allclose(result.second_moment, widths, rtol=1e-9)


def test_without_disorder_the_ensemble_equals_the_single_run():
    system = mo.System(GRID, potential=mo.Barrier(0.6, 0.0, 1.0), absorber=mo.Absorber(30.0))
    result = mo.ensemble(system, PACKET, **RUN, realizations=20, detector=(0.0, 1.0))
    run = mo.propagate(system, PACKET, **RUN, detector=(0.0, 1.0))
    assert result.transmission.mean == pytest.approx(run.transmission, abs=1e-13)
    assert result.transmission.std == pytest.approx(0.0, abs=1e-13)


def test_stderr_covers_the_true_mean_at_the_stated_rate():
    # With a normal-ish sampling distribution, mean +- 2 stderr covers the true mean ~95% of the
    # time (central limit theorem, common practice). The "true" mean comes from 1024 realizations.
    system = mo.System(
        mo.Grid(256, 120.0),
        disorder=mo.GaussianDisorder(0.3, 1.0, 0.0, 12.0),
        absorber=mo.Absorber(20.0),
    )
    packet = mo.GaussianPacket(-20.0, 1.2, 4.0)
    truth = mo.ensemble(system, packet, 30.0, 0.1, 1024, seed=99).transmission.mean
    covered = 0
    trials = 40
    for seed in range(trials):
        stat = mo.ensemble(system, packet, 30.0, 0.1, 32, seed=seed).transmission
        covered += abs(stat.mean - truth) < 2.0 * stat.stderr
    # Binomial(40, 0.95): P(covered < 33) is about 0.3%.
    assert covered >= 33, covered


def test_target_stderr_stops_early_and_deterministically():
    target = 0.01
    first = run_ensemble(realizations=320, target_stderr=target, threads=1)
    second = run_ensemble(realizations=320, target_stderr=target, threads=2)
    assert_bitwise_equal(first, second)
    assert first.count < 320 and first.count % mo.CHUNK == 0
    assert first.transmission.stderr < target
    shorter = run_ensemble(realizations=first.count - mo.CHUNK)
    assert shorter.transmission.stderr >= target


def test_single_precision_agrees_with_double_to_the_documented_accuracy():
    # Documented: f32 loses about 1e-7 of the probability per step (rounding in single-precision
    # FFTs), so relative errors grow like 2e-7 x steps.
    double = run_ensemble(realizations=16)
    single = run_ensemble(realizations=16, precision="single")
    steps = round(RUN["duration"] / RUN["step"])
    np.testing.assert_allclose(
        single.samples["transmission"], double.samples["transmission"], rtol=2e-7 * steps
    )
    np.testing.assert_allclose(single.samples["norm"], double.samples["norm"], rtol=2e-7 * steps)
    assert not np.array_equal(single.samples["transmission"], double.samples["transmission"])


def test_random_packets_and_packet_lists():
    random_packet = mo.RandomPacket(
        center=mo.Uniform(-40.0, -30.0), wavenumber=mo.Normal(1.2, 0.05), width=6.0
    )
    result = mo.ensemble(SYSTEM, random_packet, **RUN, realizations=8, seed=2)
    for index in (0, 5):
        run = mo.propagate(SYSTEM, random_packet, **RUN, seed=2, index=index, detector=(0.0, 30.0))
        assert result.samples["transmission"][index] == pytest.approx(run.transmission, abs=1e-12)
    drawn = [random_packet.packet(2, r) for r in range(200)]
    centers = np.array([p.center for p in drawn])
    assert centers.min() >= -40.0 and centers.max() < -30.0
    assert len(set(centers)) == 200
    listed = mo.PacketList([PACKET, mo.GaussianPacket(-35.0, 1.5, 6.0)])
    result = mo.ensemble(
        mo.System(GRID, absorber=mo.Absorber(30.0)), listed, **RUN, realizations=4, detector=(0, 30)
    )
    t = result.samples["transmission"]
    assert t[0] == t[2] and t[1] == t[3] and t[0] != t[1]


def test_progress_reports_between_chunks():
    seen = []
    run_ensemble(realizations=40, progress=lambda done, total: seen.append((done, total)))
    assert seen == [(16, 40), (32, 40), (40, 40)]


@pytest.mark.parametrize(
    ("options", "message"),
    [
        ({"realizations": 0}, "realizations must be >= 1"),
        ({"threads": 0}, "threads must be >= 1"),
        ({"target_stderr": -1.0}, "target_stderr must be > 0"),
        ({"precision": "half"}, "precision must be one of"),
        ({"order": 3}, "order must be 2 or 4"),
        ({"detector": (0.0, 900.0)}, r"detector \(0, 900\) leaves the box"),
    ],
)
def test_bad_ensemble_arguments(options, message):
    arguments = {"realizations": 16, **RUN, **options}
    realizations = arguments.pop("realizations")
    with pytest.raises(ValueError, match=message):
        mo.ensemble(SYSTEM, PACKET, realizations=realizations, **arguments)


def test_partial_start_must_be_a_chunk_boundary():
    with pytest.raises(ValueError, match=r"multiple of mottle\.CHUNK"):
        mo.ensemble_partial(SYSTEM, PACKET, **RUN, start=3, count=16)


def test_ctrl_c_stops_a_long_ensemble_quickly():
    script = textwrap.dedent(
        """
        import mottle as mo
        grid = mo.Grid(4096, 800.0)
        system = mo.System(grid, disorder=mo.GaussianDisorder(0.1, 1.0, 0.0, 100.0))
        print("ready", flush=True)
        mo.ensemble(system, mo.GaussianPacket(-100.0, 1.0, 10.0), 2000.0, 0.01, 4096, threads=2)
        """
    )
    process = subprocess.Popen(
        [sys.executable, "-c", script], stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True
    )
    assert process.stdout.readline().strip() == "ready"
    time.sleep(1.0)
    sent = time.monotonic()
    os.kill(process.pid, signal.SIGINT)
    _, stderr = process.communicate(timeout=20)
    assert time.monotonic() - sent < 1.5
    assert "KeyboardInterrupt" in stderr
    assert process.returncode != 0
