"""The Rust core against the pure-numpy reference (mottle.reference), field by field, to 1e-10.

The reference is checked against closed forms and SciPy elsewhere; here the
fast path is held to it over systems that exercise every code path: barriers
and absorbers, detectors, snapshots, the harmonic well, the cubic term, the
lattice, random potentials and initial states (fixed seeds), and the three
splittings.
"""

import numpy as np
import pytest

import mottle as mo

TOLERANCE = 1e-10


def smooth_random_state(grid, rng, center, width, wavenumber):
    """A Gaussian envelope times a random, band-limited complex modulation."""
    x = np.asarray(grid.x)
    modulation = np.zeros(grid.points, dtype=complex)
    for q in range(1, 6):
        modulation += rng.normal() * np.exp(
            1j * (q * 2 * np.pi * x / grid.length + rng.uniform(0, 2 * np.pi))
        )
    envelope = np.exp(-((x - center) ** 2) / (4 * width**2) + 1j * wavenumber * x)
    return mo.Wavefunction(envelope * (2.0 + 0.3 * modulation))


def smooth_random_potential(grid, rng, amplitude, start, stop):
    """Random Fourier modes tapered to zero outside [start, stop)."""
    x = np.asarray(grid.x)
    values = np.zeros(grid.points)
    for q in range(1, 12):
        values += rng.normal() * np.cos(q * 2 * np.pi * x / (stop - start) + rng.uniform(0, 2 * np.pi))
    taper = np.clip(np.minimum(x - start, stop - x) / 2.0, 0.0, 1.0)
    return mo.Tabulated(amplitude * values * taper / 11**0.5)


def case_barrier_with_absorbers():
    grid = mo.Grid(1024, 200.0)
    system = mo.System(grid, potential=mo.Barrier(1.0, 0.0, 1.0), absorber=mo.Absorber(20.0))
    packet = mo.GaussianPacket(-50.0, 1.2, 5.0)
    return system, packet, dict(duration=120.0, step=0.05, detector=(0.0, 1.0), snapshots=(20.0, 41.0, 90.0))


def case_harmonic_scaled_units():
    grid = mo.Grid(256, 12.0)
    system = mo.System(grid, model=mo.Continuum(hbar=0.5, mass=2.0), potential=mo.Harmonic(1.5, center=0.3))
    packet = mo.GaussianPacket(2.0, 1.0, (0.5 / (2 * 2.0 * 1.5)) ** 0.5)
    return system, packet, dict(duration=6.0, step=0.01, snapshots=(1.0, 2.5, 6.0))


def case_nonlinear_with_absorbers(order=2, splitting=None):
    grid = mo.Grid(512, 160.0)
    system = mo.System(
        grid,
        potential=mo.Barrier(0.4, 5.0, 8.0) + mo.Harmonic(0.01),
        absorber=mo.Absorber(25.0),
        nonlinearity=1.5,
    )
    packet = mo.GaussianPacket(-20.0, 1.5, 4.0)
    options = dict(duration=60.0, step=0.04, detector=(5.0, 8.0), snapshots=(10.0, 40.0), order=order)
    if splitting is not None:
        options["splitting"] = splitting
    return system, packet, options


def case_lattice_random(seed=11):
    rng = np.random.default_rng(seed)
    grid = mo.Grid(256, 128.0)
    potential = smooth_random_potential(grid, rng, 0.3, -20.0, 20.0)
    system = mo.System(grid, model=mo.Lattice(hopping=0.8, hbar=1.2), potential=potential, nonlinearity=0.7)
    packet = smooth_random_state(grid, rng, -30.0, 5.0, 2.2)
    return system, packet, dict(duration=40.0, step=0.1, snapshots=(8.0, 16.0, 39.9))


def case_order_four_everything(splitting, seed=5):
    rng = np.random.default_rng(seed)
    grid = mo.Grid(512, 128.0)
    potential = smooth_random_potential(grid, rng, 0.2, -20.0, 20.0) + mo.Barrier(0.6, 22.0, 23.5)
    system = mo.System(grid, potential=potential, absorber=mo.Absorber(20.0, strength=0.4), nonlinearity=-0.5)
    packet = smooth_random_state(grid, rng, -25.0, 4.0, 1.3)
    return (
        system,
        packet,
        dict(duration=60.0, step=0.04, detector=(22.0, 23.5), snapshots=(6.0, 30.0), splitting=splitting),
    )


CASES = {
    "barrier+absorber": case_barrier_with_absorbers,
    "harmonic-hbar-mass": case_harmonic_scaled_units,
    "nonlinear+absorber": case_nonlinear_with_absorbers,
    "nonlinear+absorber-order4": lambda: case_nonlinear_with_absorbers(order=4),
    "nonlinear+absorber-yoshida": lambda: case_nonlinear_with_absorbers(splitting="yoshida"),
    "lattice-random": case_lattice_random,
    "lattice-random-other-seed": lambda: case_lattice_random(seed=12),
    "order4-blanes-moan": lambda: case_order_four_everything("blanes-moan"),
    "order4-yoshida": lambda: case_order_four_everything("yoshida"),
}


def assert_close(name, core, reference):
    core = np.asarray(core, dtype=complex)
    reference = np.asarray(reference, dtype=complex)
    assert core.shape == reference.shape, name
    gap = float(np.max(np.abs(core - reference))) if core.size else 0.0
    assert gap <= TOLERANCE, f"{name}: core and reference differ by {gap:.3g}"


@pytest.mark.parametrize("case", CASES.values(), ids=CASES.keys())
def test_core_equals_reference(case):
    system, packet, options = case()
    core = mo.propagate(system, packet, **options)
    reference = mo.reference.propagate(system, packet, **options)
    # Something must happen, or agreement would mean little: the state moved and, with
    # absorbers, probability left the box.
    assert np.max(np.abs(core.psi - packet.values(system.grid))) > 0.1
    if system.absorber is not None:
        assert core.absorbed_left + core.absorbed_right > 1e-4
    np.testing.assert_array_equal(core.times, reference.times)
    for name in ("psi", "snapshots", "position", "position_squared", "momentum", "norms"):
        assert_close(name, getattr(core, name), getattr(reference, name))
    for name in ("norm", "absorbed_left", "absorbed_right"):
        assert_close(name, getattr(core, name), getattr(reference, name))
    if options.get("detector") is not None:
        assert_close("reflection", core.reflection, reference.reflection)
        assert_close("transmission", core.transmission, reference.transmission)
    else:
        assert core.reflection is None and reference.reflection is None
    # The same leapfrog in both: the classical particle agrees (NaN once absorbed, in both).
    np.testing.assert_array_equal(np.isnan(core.classical_position), np.isnan(reference.classical_position))
    assert_close(
        "classical_position",
        np.nan_to_num(core.classical_position),
        np.nan_to_num(reference.classical_position),
    )
    assert_close(
        "classical_momentum",
        np.nan_to_num(core.classical_momentum),
        np.nan_to_num(reference.classical_momentum),
    )
    if system.nonlinearity == 0.0:
        assert_close("energy", core.energy, reference.energy)


@pytest.mark.parametrize(
    "case", [case_nonlinear_with_absorbers, case_lattice_random], ids=["continuum", "lattice"]
)
def test_core_energy_of_nonlinear_runs_equals_reference(case):
    system, packet, options = case()
    core = mo.propagate(system, packet, **options)
    reference = mo.reference.propagate(system, packet, **options)
    assert_close("energy", core.energy, reference.energy)


def test_reference_accepts_the_same_seed_and_index_as_the_core():
    # Deterministic systems do not depend on them; both return the same run for any (seed, index).
    system, packet, options = case_harmonic_scaled_units()
    first = mo.reference.propagate(system, packet, seed=3, index=7, **options)
    second = mo.propagate(system, packet, seed=3, index=7, **options)
    assert_close("psi", first.psi, second.psi)


def test_probabilities_at_each_snapshot_add_up_and_match_the_reference():
    # Exact bookkeeping at every snapshot, not only at the end: norm + absorbed = 1 to rounding.
    system = mo.System(mo.Grid(1024, 200.0), potential=mo.Barrier(0.5, 0.0, 1.0), absorber=mo.Absorber(30.0))
    packet = mo.GaussianPacket(-40.0, 1.2, 5.0)
    options = {"detector": (0.0, 1.0), "snapshots": (20.0, 40.0, 80.0)}
    core = mo.propagate(system, packet, 80.0, 0.05, **options)
    reference = mo.reference.propagate(system, packet, 80.0, 0.05, **options)
    np.testing.assert_allclose(core.norms + core.absorbed_lefts + core.absorbed_rights, 1.0, atol=1e-12)
    assert core.transmissions[-1] == core.transmission and np.all(np.diff(core.absorbed_rights) >= 0.0)
    for name in ("transmissions", "reflections", "absorbed_lefts", "absorbed_rights"):
        np.testing.assert_allclose(getattr(core, name), getattr(reference, name), atol=1e-12, err_msg=name)
    plain = mo.propagate(system, packet, 80.0, 0.05, snapshots=(20.0,))
    assert plain.transmissions is None and plain.reflections is None
