"""Time-dependent Hamiltonians: kicks, modulation, quenches, twisted boundaries; the kicked rotor.

Each check against the outside world names its source beside it (docs/validation.md lists them).
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pytest
from scipy.integrate import solve_ivp

import mottle as mo
from mottle.analysis.exact import free_gaussian_width
from mottle.studies.study import parse_study

TWO_PI = 2.0 * math.pi


def rotor(points: int, hbar: float, kick: float, quasimomentum=0.0, phase=0.0) -> mo.System:
    """The kicked rotor H = p**2/2 + K cos(theta + phase) sum_n delta(t - n): a grid of length 2 pi."""
    return mo.System(
        mo.Grid(points, TWO_PI, quasimomentum=quasimomentum),
        mo.Continuum(hbar=hbar),
        potential=mo.Kicked(mo.Cosine(kick, 1.0, phase), period=1.0),
    )


def zero_momentum(points: int) -> mo.Wavefunction:
    return mo.Wavefunction(np.full(points, 1.0 / math.sqrt(TWO_PI), dtype=complex))


def quiet_propagate(*args, propagate=mo.propagate, **kwargs):
    # The kicked rotor's plane waves fill the box; the packet-tail warnings do not apply to them.
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", mo.UnderResolvedWarning)
        return propagate(*args, **kwargs)


@pytest.mark.parametrize("splitting", ["strang", "yoshida", "blanes-moan"])
@pytest.mark.parametrize("quasimomentum", [0.0, 0.5])
def test_quantum_resonance_grows_ballistically(splitting, quasimomentum):
    # Izrailev & Shepelyansky, Theor. Math. Phys. 43, 553 (1980): at hbar_eff = 4 pi (beta = 0)
    # the free period is the identity and <p**2> = K**2 t**2 / 2 exactly after t kicks from p = 0.
    # At hbar_eff = 2 pi, beta = 1/2 is a resonance too: exp(-i pi (n + 1/2)**2) is one phase for
    # every n, so <p**2> = K**2 t**2 / 2 + hbar**2 / 4 (from p = hbar / 2). Exact for every splitting.
    hbar = 4 * math.pi if quasimomentum == 0.0 else 2 * math.pi
    kick, kicks = 1.7, np.arange(1, 9)
    system = rotor(128, hbar, kick, quasimomentum)
    run = quiet_propagate(system, zero_momentum(128), 8.0, 1.0, snapshots=kicks, splitting=splitting)
    expected = kick**2 * kicks**2 / 2 + (hbar * quasimomentum) ** 2
    np.testing.assert_allclose(run.momentum_squared, expected, rtol=1e-10)
    assert abs(run.norm - 1.0) < 1e-12


def test_antiresonance_returns_any_state_after_two_kicks():
    # Izrailev & Shepelyansky (1980): at hbar_eff = 2 pi, beta = 0, the free period multiplies
    # momentum state n by (-1)**n, i.e. shifts theta by pi, and cos(theta + pi) undoes the kick:
    # (F K)**2 = 1 up to a global phase (here exactly 1).
    rng = np.random.default_rng(3)
    values = rng.normal(size=64) + 1j * rng.normal(size=64)
    values /= math.sqrt(np.sum(np.abs(values) ** 2) * TWO_PI / 64)
    system = rotor(64, TWO_PI, 2.3)
    run = quiet_propagate(system, mo.Wavefunction(values), 4.0, 1.0, snapshots=[1.0, 2.0, 3.0, 4.0])
    np.testing.assert_allclose(run.snapshots[1], values, atol=1e-12)
    np.testing.assert_allclose(run.psi, values, atol=1e-12)
    assert np.max(np.abs(run.snapshots[0] - values)) > 0.1  # one kick alone does change it


def test_kicks_modulation_and_switches_match_the_reference_for_every_splitting():
    # The core against the pure-numpy reference (mottle.reference), every term at once, with the
    # nonlinearity, a twist, a kick start and snapshots between step boundaries.
    grid = mo.Grid(128, TWO_PI, quasimomentum=0.3)
    potential = (
        mo.Kicked(mo.Cosine(1.3, 1.0, 0.4), 0.5, start=0.25)
        + mo.Modulated(mo.Cosine(0.7, 2.0), 0.4, 3.0, 0.2)
        + mo.Switched(mo.Cosine(0.5, 1.0), 0.5, 1.25)
        + mo.Cosine(0.2, 3.0)
    )
    system = mo.System(grid, mo.Continuum(hbar=0.8), potential=potential, nonlinearity=0.7)
    packet = mo.GaussianPacket(0.0, 1.0, 0.6)
    times = [0.25, 0.6, 1.0, 1.33, 2.0]
    for splitting in ("strang", "yoshida", "blanes-moan"):
        core = quiet_propagate(system, packet, 2.0, 0.05, splitting=splitting, snapshots=times)
        numpy = quiet_propagate(
            system, packet, 2.0, 0.05, splitting=splitting, snapshots=times, propagate=mo.reference.propagate
        )
        assert np.max(np.abs(core.snapshots - numpy.snapshots)) < 1e-10
        assert np.max(np.abs(core.psi - numpy.psi)) < 1e-10
        np.testing.assert_allclose(core.momentum_squared, numpy.momentum_squared, rtol=1e-10)
        np.testing.assert_allclose(core.k, numpy.k, rtol=1e-14)


def quasi_periodic_rotor(points, hbar, kick, epsilon, omegas, phases, quasimomentum=0.0) -> mo.System:
    """K (1 + eps cos(w2 t + p2) cos(w3 t + p3)) cos(theta) sum_n delta(t - n) as three kicks (Kicked)."""
    (w2, w3), (p2, p3) = omegas, phases
    half = mo.Cosine(kick * epsilon / 2.0, 1.0)
    potential = (
        mo.Kicked(mo.Cosine(kick * (1.0 - epsilon), 1.0), 1.0)
        + mo.Kicked(mo.Modulated(half, 1.0, w2 + w3, p2 + p3), 1.0)
        + mo.Kicked(mo.Modulated(half, 1.0, w2 - w3, p2 - p3), 1.0)
    )
    return mo.System(
        mo.Grid(points, TWO_PI, quasimomentum=quasimomentum), mo.Continuum(hbar=hbar), potential=potential
    )


def test_modulated_kicks_match_the_reference_and_the_map_applied_by_hand():
    # The quasi-periodic kicked rotor (Casati, Guarneri & Shepelyansky, Phys. Rev. Lett. 62, 345
    # (1989)): kick n has strength K (1 + eps cos(w2 n + p2) cos(w3 n + p3)). The core against the
    # numpy reference, and against the map psi -> F K_n psi written out with numpy FFTs.
    points, hbar, kick, epsilon = 256, 2.89, 5.0, 0.8
    omegas, phases = (TWO_PI * math.sqrt(5.0), TWO_PI * math.sqrt(13.0)), (0.3, 1.1)
    system = quasi_periodic_rotor(points, hbar, kick, epsilon, omegas, phases, quasimomentum=0.2)
    packet = zero_momentum(points)
    core = quiet_propagate(system, packet, 12.0, 0.5, snapshots=[4.0, 12.0])
    numpy = quiet_propagate(
        system, packet, 12.0, 0.5, snapshots=[4.0, 12.0], propagate=mo.reference.propagate
    )
    assert np.max(np.abs(core.snapshots - numpy.snapshots)) < 1e-10
    theta = system.grid.x
    momenta = np.asarray(system.grid.k) + 0.2  # the periodic part's momenta, m + beta
    psi = packet.values(system.grid).astype(complex)
    for n in range(12):
        strength = kick * (
            1.0 + epsilon * math.cos(omegas[0] * n + phases[0]) * math.cos(omegas[1] * n + phases[1])
        )
        psi = psi * np.exp(-1j * strength * np.cos(theta) / hbar)
        psi = np.fft.ifft(np.exp(-1j * hbar * momenta**2 / 2.0) * np.fft.fft(psi))
    assert np.max(np.abs(core.psi - psi)) < 1e-9
    # Without the modulation the state differs: the check can fail.
    plain = quiet_propagate(rotor(points, hbar, kick, quasimomentum=0.2), packet, 12.0, 0.5)
    assert np.max(np.abs(plain.psi - psi)) > 1e-2


def test_drawn_modulation_phases_of_kicks_are_per_realization():
    phase = mo.Uniform(0.0, TWO_PI)
    system = mo.System(
        mo.Grid(128, TWO_PI),
        mo.Continuum(hbar=2.89),
        potential=mo.Kicked(mo.Cosine(5.0, 1.0), 1.0)
        + mo.Kicked(mo.Modulated(mo.Cosine(2.0, 1.0), 1.0, 3.7, phase), 1.0),
    )
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", mo.UnderResolvedWarning)
        one, two = (
            mo.ensemble(system, zero_momentum(128), 10.0, 1.0, 6, snapshots=[10.0], seed=3, threads=threads)
            for threads in (1, 2)
        )
    p2 = one.samples["momentum_squared"][:, -1]
    assert np.array_equal(p2, two.samples["momentum_squared"][:, -1])
    assert np.unique(p2).size == 6


def test_kicks_with_absorbers_keep_the_exact_per_side_accounting():
    # norm + absorbed_left + absorbed_right = 1 to rounding, with kicks pushing the wave into both layers.
    system = mo.System(
        mo.Grid(512, 80.0),
        potential=mo.Kicked(mo.Cosine(3.0, 0.5), period=0.5) + mo.Modulated(mo.Harmonic(0.05), 0.5, 2.0),
        absorber=mo.Absorber(15.0),
    )
    packet = mo.GaussianPacket(0.0, 0.0, 1.0)
    run = quiet_propagate(system, packet, 20.0, 0.05, snapshots=[5.0, 10.0, 20.0])
    reference = quiet_propagate(
        system, packet, 20.0, 0.05, snapshots=[5.0, 10.0, 20.0], propagate=mo.reference.propagate
    )
    assert run.absorbed_left > 1e-3 and run.absorbed_right > 1e-3
    assert abs(run.norm + run.absorbed_left + run.absorbed_right - 1.0) < 1e-12
    assert abs(run.absorbed_left - reference.absorbed_left) < 1e-10
    assert abs(run.absorbed_right - reference.absorbed_right) < 1e-10


def test_a_trap_switched_off_releases_the_free_expansion():
    # Cohen-Tannoudji, Diu & Laloe, Quantum Mechanics vol. 1 (1977), complement G_I: a Gaussian of
    # rms width s0 spreads freely as s0 sqrt(1 + (hbar t / 2 m s0**2)**2). The harmonic ground state
    # (s0**2 = hbar / (2 m omega)) is held by the trap until t0 and then released.
    omega, t0, hbar, mass = 0.5, 2.0, 1.0, 1.0
    width = math.sqrt(hbar / (2 * mass * omega))
    system = mo.System(mo.Grid(1024, 120.0), potential=mo.Switched(mo.Harmonic(omega), on=0.0, off=t0))
    times = np.array([1.0, 2.0, 3.0, 5.0, 8.0, 12.0])
    run = mo.propagate(system, mo.GaussianPacket(0.0, 0.0, width), 12.0, 0.01, snapshots=times)
    expected = np.where(
        times <= t0, width, free_gaussian_width(np.maximum(times - t0, 0.0), width, hbar, mass)
    )
    np.testing.assert_allclose(run.width, expected, rtol=1e-5)
    # Switched a step later, the width after release differs: the switch is really at t0.
    later = mo.System(system.grid, potential=mo.Switched(mo.Harmonic(omega), on=0.0, off=t0 + 0.5))
    late = mo.propagate(later, mo.GaussianPacket(0.0, 0.0, width), 12.0, 0.01, snapshots=[12.0])
    assert abs(late.width[-1] - run.width[-1]) > 0.05


def _width_equation(omega0, depth, frequency, width0, duration, hbar=1.0, mass=1.0):
    # The rms width of a Gaussian in a harmonic trap of omega(t)**2 = omega0**2 (1 + eps cos Omega t):
    # sigma'' = hbar**2 / (4 m**2 sigma**3) - omega(t)**2 sigma, sigma'(0) = 0 for a real Gaussian
    # (the Ermakov equation; Pitaevskii & Stringari, Bose-Einstein Condensation (2003), ch. 5 for the
    # scaling form, from memory). Integrated by SciPy to 1e-13.
    def rhs(t, y):
        sigma, velocity = y
        w2 = omega0**2 * (1 + depth * math.cos(frequency * t))
        return [velocity, hbar**2 / (4 * mass**2 * sigma**3) - w2 * sigma]

    solution = solve_ivp(rhs, (0.0, duration), [width0, 0.0], method="DOP853", rtol=1e-13, atol=1e-14)
    return solution.y[0, -1]


@pytest.mark.parametrize(
    ("splitting", "order", "steps"),
    [("strang", 2, (0.02, 0.01)), ("yoshida", 4, (0.1, 0.05)), ("blanes-moan", 4, (0.2, 0.1))],
)
@pytest.mark.filterwarnings("ignore::mottle.UnderResolvedWarning")  # the trap's far walls, never reached
def test_a_modulated_trap_follows_the_width_equation_at_the_splittings_order(splitting, order, steps):
    # Each potential factor is evaluated at its own time, so the splitting keeps its order for the
    # time-dependent Hamiltonian (measured slope), and order 4 reaches 1e-6.
    omega0, depth, frequency, width0, duration = 0.6, 0.4, 1.3, 0.8, 6.0
    system = mo.System(mo.Grid(512, 40.0), potential=mo.Modulated(mo.Harmonic(omega0), depth, frequency))
    exact = _width_equation(omega0, depth, frequency, width0, duration)
    packet = mo.GaussianPacket(0.0, 0.0, width0)
    errors = [
        abs(
            mo.propagate(system, packet, duration, h, splitting=splitting, snapshots=[duration]).width[0]
            - exact
        )
        for h in steps
    ]
    slope = math.log(errors[0] / errors[1]) / math.log(steps[0] / steps[1])
    assert abs(slope - order) < 0.3, (errors, slope)
    if order == 4:
        assert errors[1] < 1e-6, errors


def test_the_kicked_rotor_localizes_dynamically():
    # Casati, Chirikov, Ford & Izrailev, Lect. Notes Phys. 93, 334 (1979); Fishman, Grempel & Prange,
    # Phys. Rev. Lett. 49, 509 (1982): <p**2> first grows like the classical diffusion D t with
    # D ~ K**2 / 2 (Chirikov's quasilinear value; the Bessel corrections are -10 % at K = 5), then
    # saturates. Shepelyansky, Physica D 28, 103 (1987): the Floquet states' localization length is
    # about D / (2 hbar**2); the tails of the mean distribution, fitted as exp(-2 |n| / l_s), about
    # twice that, l_s ~ D / hbar**2 (held within a factor 2.5). Averaged over the quasimomentum.
    kick, hbar, points = 5.0, 1.0, 1024
    kicks = [1, 2, 3, 5, 200, 400]
    system = rotor(points, hbar, kick, quasimomentum=mo.Uniform(0.0, 1.0))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", mo.UnderResolvedWarning)
        result = mo.ensemble(
            system, zero_momentum(points), 400.0, 1.0, 64, seed=1, snapshots=kicks, threads=2
        )
    spread = np.array([stat.mean for stat in result.momentum_squared])
    diffusion = kick**2 / 2
    # After one kick exactly K**2/2 + hbar**2 <beta**2>: 1/3 over a uniform beta (to sampling error).
    assert abs(spread[0] - (diffusion + hbar**2 * np.mean(result.samples["quasimomentum"] ** 2))) < 1e-9
    early = spread[:4] / (diffusion * np.array(kicks[:4]))
    assert np.all((early > 0.6) & (early < 1.2)), early
    assert spread[-1] < 0.1 * diffusion * kicks[-1]  # far below diffusion: localized
    assert spread[-1] / spread[-2] < 1.2  # and saturated
    fit = mo.momentum_tails(result, (30.0, 90.0))
    ratio = fit.localization_length / (diffusion / hbar**2)
    assert 1 / 2.5 < ratio < 2.5, fit


def test_momentum_tails_fit_the_decay_and_warn_where_the_tails_are_rounding_noise():
    # A mean distribution exp(-2|n|/l) on the rotor's grid (n = k, length 2 pi), l = 3 states.
    from types import SimpleNamespace

    points = 256
    x = np.arange(points) * TWO_PI / points
    k = np.fft.fftshift(2 * np.pi * np.fft.fftfreq(points, TWO_PI / points))
    tails = SimpleNamespace(x=x, k=k, momentum=np.exp(-2 * np.abs(k) / 3.0)[None, :])
    with warnings.catch_warnings():
        warnings.simplefilter("error", mo.UnderResolvedWarning)
        fit = mo.momentum_tails(tails, (5.0, 60.0))  # down to exp(-40) of the peak: no warning
    assert abs(fit.localization_length - 3.0) < 1e-9
    with pytest.warns(mo.UnderResolvedWarning, match="rounding noise"):
        mo.momentum_tails(tails, (5.0, 120.0))  # down to exp(-80), past double precision's exp(-64)


def test_random_phases_and_quasimomenta_are_per_realization_and_thread_independent():
    # Realization r of the ensemble is propagate(seed, index=r); threads change no bit.
    system = rotor(128, 1.0, 3.0, quasimomentum=mo.Uniform(0.0, 1.0), phase=mo.Uniform(0.0, TWO_PI))
    system = mo.System(
        system.grid,
        system.model,
        potential=system.potential + mo.Modulated(mo.Cosine(0.5, 2.0), 0.3, 1.1, phase=mo.Normal(0.0, 1.0)),
    )
    packet = zero_momentum(128)
    arguments = dict(duration=20.0, step=0.5, snapshots=[5.0, 20.0], seed=4)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", mo.UnderResolvedWarning)
        one = mo.ensemble(system, packet, realizations=40, threads=1, **arguments)
        two = mo.ensemble(system, packet, realizations=40, threads=2, **arguments)
        runs = [mo.propagate(system, packet, index=r, **arguments) for r in (0, 17, 39)]
    for name in ("momentum_squared", "mean_momentum", "quasimomentum"):
        assert np.array_equal(one.samples[name], two.samples[name]), name
    assert np.array_equal(one.momentum, two.momentum)
    betas = one.samples["quasimomentum"]
    assert np.unique(betas).size == 40 and np.all((betas >= 0.0) & (betas < 1.0))
    for r, run in zip((0, 17, 39), runs, strict=True):
        assert run.quasimomentum == betas[r]
        np.testing.assert_allclose(run.momentum_squared, one.samples["momentum_squared"][r], rtol=1e-12)
    assert runs[0].momentum_squared[-1] != runs[1].momentum_squared[-1]


def test_the_ensemble_resonance_is_exact_in_every_realization():
    # Izrailev & Shepelyansky (1980), as above, through the ensemble's <p**2> Stat.
    kicks = np.arange(1, 6)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", mo.UnderResolvedWarning)
        result = mo.ensemble(rotor(64, 4 * math.pi, 1.2), zero_momentum(64), 5.0, 1.0, 16, snapshots=kicks)
    stats = result.momentum_squared
    np.testing.assert_allclose([s.mean for s in stats], 1.2**2 * kicks**2 / 2, rtol=1e-10)
    assert all(s.std < 1e-9 for s in stats)


@pytest.mark.parametrize(
    ("make", "message"),
    [
        (lambda: mo.Kicked(mo.Cosine(1.0, 1.0), period=0.0), r"period must be > 0, got 0\.0"),
        (lambda: mo.Kicked(mo.Cosine(1.0, 1.0), period=-1.0), r"period must be > 0, got -1\.0"),
        (lambda: mo.Switched(mo.Harmonic(1.0), on=2.0, off=1.0), r"off=1\.0 is before on=2\.0"),
        (lambda: mo.Grid(64, 1.0, quasimomentum=1.0), r"quasimomentum 1\.0 must lie in \[0, 1\)"),
        (lambda: mo.Grid(64, 1.0, quasimomentum=-0.1), r"quasimomentum -0\.1 must lie in \[0, 1\)"),
        (lambda: mo.Grid(64, 1.0, quasimomentum=mo.Uniform(0.5, 1.5)), r"inside \[0, 1\]"),
        (lambda: mo.Kicked(mo.Kicked(mo.Cosine(1.0, 1.0), 1.0), 1.0), r"needs a static mottle potential"),
        (
            lambda: mo.System(mo.Grid(64, 1.0), potential=mo.Cosine(1.0, 1.0, mo.Uniform(0, 1))),
            r"drawn per realization",
        ),
    ],
)
def test_bad_time_dependent_input_is_refused_in_one_line(make, message):
    with pytest.raises(
        mo.InvalidParameterError if "static" not in message else mo.InvalidTypeError, match=message
    ):
        make()


def test_steps_that_miss_a_kick_or_a_switch_are_refused_with_one_that_lands():
    packet = zero_momentum(64)
    with pytest.raises(
        mo.InvalidParameterError,
        match=r"Kicked period = 1 is not a whole number of steps of 0\.3.*step = 0\.25",
    ):
        mo.propagate(rotor(64, 1.0, 1.0), packet, 3.0, 0.3)
    switched = mo.System(mo.Grid(256, 40.0), potential=mo.Switched(mo.Harmonic(1.0), off=1.05))
    with pytest.raises(
        mo.InvalidParameterError, match=r"Switched off = 1\.05 is not a whole number of steps of 0\.1"
    ):
        mo.propagate(switched, mo.GaussianPacket(0.0, 0.0, 1.0), 2.0, 0.1)
    with pytest.raises(mo.InvalidParameterError, match=r"Kicked period"):
        mo.ensemble(rotor(64, 1.0, 1.0), packet, 3.0, 0.3, 4)


def test_a_kick_at_the_end_of_the_run_is_not_applied():
    # Kicks fall in [0, duration): two periods are two kicks, F K F K.
    system = rotor(64, 1.0, 2.0)
    run = quiet_propagate(system, zero_momentum(64), 2.0, 0.5, snapshots=[1.0, 2.0])
    one_kick_more = quiet_propagate(system, zero_momentum(64), 2.5, 0.5)
    assert np.array_equal(run.snapshots[1], run.psi)
    assert np.max(np.abs(one_kick_more.psi - run.psi)) > 0.1


def test_a_study_file_with_a_cosine_potential_loads_and_runs_a_point():
    # The new static kind reaches study files through the registry alone.
    text = """\
[study]
title = "standing wave"

[system]
points = 256
length = 62.83185307179586

[[system.potential]]
kind = "cosine"
amplitude = 0.5
wavenumber = 1.0

[packet]
center = 0.0
wavenumber = 1.0
width = 3.0

[run]
duration = 2.0
step = 0.05
realizations = 2
seed = 1
snapshots = [2.0]
"""
    point = parse_study(text, "s.toml").points[0]
    system, packet, arguments = point.build()
    assert system.potential == mo.Cosine(0.5, 1.0)
    result = mo.ensemble(system, packet, **{k: v for k, v in arguments.items()})
    assert result.count == 2 and abs(result.norm.mean - 1.0) < 1e-12


def test_the_quantum_rotor_follows_the_standard_map_until_it_localizes():
    # Chirikov's standard map is the classical kicked rotor. After one kick <p**2> = K**2 <sin**2> =
    # K**2 / 2 (exact in expectation); Casati, Chirikov, Ford & Izrailev (1979): the quantum <p**2>
    # follows the classical diffusion over the first kicks and stops while the classical one goes on.
    kick = 5.0
    classical = mo.standard_map(kick, 400, 100_000, seed=2)
    first = classical.momentum_squared[0]
    assert abs(first.mean - kick**2 / 2) < 4 * first.stderr
    system = rotor(1024, 1.0, kick, quasimomentum=mo.Uniform(0.0, 1.0))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", mo.UnderResolvedWarning)
        quantum = mo.ensemble(system, zero_momentum(1024), 400.0, 1.0, 32, snapshots=[5.0, 400.0], threads=2)
        single = mo.propagate(system, zero_momentum(1024), 2.0, 1.0)
    assert single.classical_position is None  # no classical trajectory beside a driven run
    spread = [stat.mean for stat in quantum.momentum_squared]
    early = spread[0] / classical.momentum_squared[4].mean
    assert 0.75 < early < 1.25, early
    assert spread[1] < 0.2 * classical.momentum_squared[399].mean
    with pytest.raises(mo.InvalidParameterError, match="standard_map"):
        mo.classical_ensemble(system, mo.GaussianPacket(0.0, 0.0, 0.5), 2.0, 1.0, 10)
