"""Study files of driven systems: kicked, modulated and switched potentials (nested potentials),
drawn phases and quasimomenta, snapshot ranges, plane-wave and ground-state packets, their sweeps,
and a kicked-rotor study through ``mottle run`` and ``mottle report``."""

from __future__ import annotations

import math
import re
import warnings
from pathlib import Path

import numpy as np
import pytest

import mottle as mo
from mottle.studies import study as study_module
from mottle.studies.study import StudyError, parse_study

ROOT = Path(__file__).resolve().parents[1]

ROTOR = """\
[system]
points = 256
length = 6.283185307179586
hbar = 1.0

[[system.potential]]
kind = "kicked"
period = 1.0
potential = { kind = "cosine", amplitude = 5.0, wavenumber = 1.0 }

[packet]
kind = "plane-wave"

[run]
duration = 10.0
step = 1.0
realizations = 4
"""

TRAP = """\
[system]
points = 1024
length = 80.0
nonlinearity = 5.0

[[system.potential]]
kind = "switched"
off = 1.0
potential = { kind = "harmonic", frequency = 1.0 }

[[system.disorder]]
kind = "speckle"
strength = 0.1
correlation_length = 1.0
start = -20.0
stop = 20.0

[packet]
kind = "ground-state"

[[packet.trap]]
kind = "harmonic"
frequency = 1.0

[run]
duration = 2.0
step = 0.01
realizations = 2
"""


def problems_of(text: str) -> list[str]:
    with pytest.raises(StudyError) as caught:
        parse_study(text, "d.toml")
    problems = caught.value.problems
    assert all(problem.startswith("d.toml") and "\n" not in problem for problem in problems), problems
    return problems


def one_problem(text: str, pattern: str) -> str:
    problems = problems_of(text)
    assert any(re.search(pattern, problem) for problem in problems), problems
    return next(problem for problem in problems if re.search(pattern, problem))


def system_of(text: str, point: int = 0):
    return parse_study(text, "d.toml").points[point].system()


# --------------------------------------------------------------------------- time-dependent kinds


def test_a_kicked_entry_wraps_its_inline_potential():
    system = system_of(ROTOR)
    assert system.potential == mo.Kicked(mo.Cosine(5.0, 1.0), period=1.0)
    assert system.hbar == 1.0


def test_the_nested_potential_may_be_a_sub_table_with_the_same_result_and_its_own_line():
    text = ROTOR.replace(
        'potential = { kind = "cosine", amplitude = 5.0, wavenumber = 1.0 }\n',
        '\n[system.potential.potential]\nkind = "cosine"\namplitude = 5.0\nwavenumber = 1.0\n',
    )
    inline, table = parse_study(ROTOR, "d.toml"), parse_study(text, "d.toml")
    assert table.points[0].system().potential == mo.Kicked(mo.Cosine(5.0, 1.0), period=1.0)
    assert inline.canonical() == table.canonical()
    bad = text.replace("amplitude = 5.0", "amplitud = 5.0")
    problem = one_problem(bad, "amplitud")
    line = bad.splitlines().index("amplitud = 5.0") + 1
    assert problem.startswith(f"d.toml:{line}: system.potential.0.potential.amplitud: unknown key")
    assert "did you mean 'amplitude'" in problem


def test_a_nested_list_of_potentials_is_their_sum():
    text = ROTOR.replace(
        'potential = { kind = "cosine", amplitude = 5.0, wavenumber = 1.0 }',
        'potential = [{ kind = "cosine", amplitude = 5.0, wavenumber = 1.0 },'
        ' { kind = "cosine", amplitude = 1.0, wavenumber = 2.0 }]',
    )
    assert system_of(text).potential == mo.Kicked(mo.Cosine(5.0, 1.0) + mo.Cosine(1.0, 2.0), period=1.0)


def test_modulated_with_a_drawn_phase_and_switched_with_its_default_off():
    text = ROTOR.replace(
        'kind = "kicked"\nperiod = 1.0\npotential = { kind = "cosine", amplitude = 5.0, wavenumber = 1.0 }',
        'kind = "modulated"\ndepth = 0.8\nfrequency = 14.05\nphase = { uniform = [0.0, 6.25] }\n'
        'potential = { kind = "cosine", amplitude = 0.5, wavenumber = 1.0, '
        "phase = { normal = [0.0, 1.0] } }\n\n"
        '[[system.potential]]\nkind = "switched"\non = 2.0\n'
        'potential = { kind = "harmonic", frequency = 0.1 }',
    ).replace("step = 1.0", "step = 0.01")
    study = parse_study(text, "d.toml")
    system = study.points[0].system()
    assert system.potential == mo.Modulated(
        mo.Cosine(0.5, 1.0, phase=mo.Normal(0.0, 1.0)), 0.8, 14.05, phase=mo.Uniform(0.0, 6.25)
    ) + mo.Switched(mo.Harmonic(0.1), on=2.0)
    switched = study.points[0].resolved["system"]["potential"][1]
    assert switched["off"] == math.inf and switched["on"] == 2.0  # defaults are filled in


def test_defaults_written_out_do_not_change_the_canonical_form():
    written = ROTOR.replace("period = 1.0\n", "period = 1.0\nstart = 0.0\n").replace(
        "wavenumber = 1.0 }", "wavenumber = 1.0, phase = 0.0 }"
    )
    assert parse_study(written, "d.toml").canonical() == parse_study(ROTOR, "d.toml").canonical()


def test_bad_time_dependent_entries_are_named_with_their_key_paths():
    assert "system.potential.0.period" in one_problem(
        ROTOR.replace("period = 1.0", "period = -1.0"), "period"
    )
    assert "must be a potential table" in one_problem(
        ROTOR.replace(
            'potential = { kind = "cosine", amplitude = 5.0, wavenumber = 1.0 }', "potential = 3.0"
        ),
        r"system\.potential\.0\.potential:",
    )
    problem = one_problem(ROTOR.replace('kind = "cosine", ', ""), r"system\.potential\.0\.potential")
    assert "needs a kind" in problem
    problem = one_problem(
        ROTOR.replace("wavenumber = 1.0 }", "wavenumber = 1.0, phase = { uniform = [1.0] } }"),
        r"potential\.phase",
    )
    assert "uniform takes a list of two numbers [low, high]" in problem
    # A kick inside a kick is refused by the spec, at the nested term.
    nested = ROTOR.replace(
        'potential = { kind = "cosine", amplitude = 5.0, wavenumber = 1.0 }',
        'potential = { kind = "kicked", period = 1.0, potential = { kind = "cosine", amplitude = 5.0,'
        " wavenumber = 1.0 } }",
    )
    assert "static mottle potential" in one_problem(nested, r"system\.potential\.0")
    # A static cosine cannot take a drawn phase.
    static = ROTOR + '\n[[system.potential]]\nkind = "cosine"\namplitude = 1.0\nwavenumber = 1.0\n'
    static += "phase = { uniform = [0.0, 1.0] }\n"
    assert "drawn per realization" in one_problem(static, r"system\.potential\.1")


def test_a_step_that_misses_the_kicks_is_refused_with_one_that_lands_on_them():
    problem = one_problem(ROTOR.replace("step = 1.0", "step = 0.3"), r"run\.step")
    assert "Kicked period = 1 is not a whole number of steps of 0.294118" in problem  # 10 / 34 steps
    assert "step = 0.25" in problem
    problem = one_problem(TRAP.replace("off = 1.0", "off = 1.005"), r"run\.step")
    assert "Switched off" in problem


# --------------------------------------------------------------------------- quasimomentum, snapshots


def test_quasimomentum_is_fixed_or_drawn_and_checked():
    fixed = ROTOR.replace("hbar = 1.0\n", "hbar = 1.0\nquasimomentum = 0.25\n")
    assert system_of(fixed).grid.quasimomentum == 0.25
    drawn = ROTOR.replace("hbar = 1.0\n", "hbar = 1.0\nquasimomentum = { uniform = [0, 1] }\n")
    assert system_of(drawn).grid.quasimomentum == mo.Uniform(0.0, 1.0)
    problem = one_problem(fixed.replace("0.25", "1.5"), "quasimomentum")
    assert "must lie in [0, 1)" in problem
    assert "mottle.Uniform(0, 1)" in one_problem(fixed.replace("0.25", "{ normal = [0.5, 0.1] }"), "quasim")
    # Left out, it is left out of the canonical form (stores written before it still resume).
    assert "quasimomentum" not in parse_study(ROTOR, "d.toml").canonical()["system"]


def test_snapshots_may_be_a_range_of_times():
    text = ROTOR.replace(
        "realizations = 4\n", "realizations = 4\nsnapshots = { start = 1.0, stop = 10.0, count = 10 }\n"
    )
    point = parse_study(text, "d.toml").points[0]
    assert point.run_arguments()["snapshots"] == tuple(float(t) for t in range(1, 11))
    listed = text.replace("{ start = 1.0, stop = 10.0, count = 10 }", str([float(t) for t in range(1, 11)]))
    assert parse_study(listed, "d.toml").canonical() == parse_study(text, "d.toml").canonical()
    bad = text.replace("count = 10", "cont = 10")
    assert "a range has no key 'cont'; did you mean 'count'?" in one_problem(bad, r"run\.snapshots")


# --------------------------------------------------------------------------- sweeps


def test_sweeps_reach_the_kick_strength_the_modulation_depth_and_hbar():
    text = ROTOR.replace('potential = { kind = "cosine", amplitude = 5.0, wavenumber = 1.0 }\n', "").replace(
        'kind = "kicked"\nperiod = 1.0\n',
        'kind = "kicked"\nperiod = 1.0\n\n[system.potential.potential]\n'
        'kind = "modulated"\ndepth = 0.5\nfrequency = 2.0\npotential = { kind = "cosine", '
        "amplitude = 5.0, wavenumber = 1.0 }\n",
    )
    # A kick of modulated strength (the quasi-periodic kicked rotor's terms), its depth swept.
    nested = parse_study(text + '\n[sweep]\n"system.potential.0.potential.depth" = [0.2, 0.8]\n', "d.toml")
    kick = nested.points[1].system().potential
    assert isinstance(kick, mo.Kicked) and kick.modulation is not None and kick.modulation.depth == 0.8
    assert kick.modulation.potential == mo.Cosine(5.0, 1.0)
    flat = ROTOR.replace(
        'kind = "kicked"\nperiod = 1.0\npotential = { kind = "cosine", amplitude = 5.0, wavenumber = 1.0 }',
        'kind = "kicked"\nperiod = 1.0\npotential = { kind = "cosine", amplitude = 5.0, wavenumber = 1.0 }'
        '\n\n[[system.potential]]\nkind = "modulated"\ndepth = 0.5\nfrequency = 6.283185307179586\n'
        'potential = { kind = "harmonic", frequency = 0.1 }',
    )
    swept = flat + (
        '\n[sweep]\n"system.potential.0.potential.amplitude" = [2.0, 4.0]\n'
        '"system.potential.1.depth" = [0.2, 0.8]\n"system.hbar" = [1.0, 2.0]\n'
    )
    study = parse_study(swept, "d.toml")
    assert len(study.points) == 8
    last = study.points[7]
    assert last.parameters == {
        "system.potential.0.potential.amplitude": 4.0,
        "system.potential.1.depth": 0.8,
        "system.hbar": 2.0,
    }
    system = last.system()
    kicked, modulated = system.potential.terms
    assert kicked.potential.amplitude == 4.0 and modulated.depth == 0.8 and system.hbar == 2.0
    assert last.label() == "amplitude=4, depth=0.8, hbar=2"
    # A whole nested potential, or a key it does not have, names nothing.
    whole = ROTOR + '\n[sweep]\n"system.potential.0.potential" = [1.0]\n'
    assert "is a whole potential; sweep one of its keys" in one_problem(whole, "names nothing")
    wrong = ROTOR + '\n[sweep]\n"system.potential.0.potential.height" = [1.0]\n'
    assert "a 'cosine' entry has no key 'height'" in one_problem(wrong, "names nothing")


def test_a_swept_period_is_checked_against_the_step_at_every_value():
    text = ROTOR + '\n[sweep]\n"system.potential.0.period" = [1.0, 1.5]\n'
    problem = one_problem(text.replace("duration = 10.0", "duration = 3.0"), r"run\.step")
    assert "at point 2" in problem and "Kicked period = 1.5" in problem


# --------------------------------------------------------------------------- packets


def test_a_plane_wave_packet_is_a_mode_of_the_box():
    point = parse_study(ROTOR, "d.toml").points[0]
    packet = point.packet()
    assert isinstance(packet, mo.Wavefunction)
    np.testing.assert_allclose(packet.table, 1 / math.sqrt(2 * math.pi))
    moving = parse_study(
        ROTOR.replace('kind = "plane-wave"', 'kind = "plane-wave"\nwavenumber = 3.0'), "d.toml"
    )
    grid = moving.points[0].system().grid
    phase = np.angle(moving.points[0].packet().table * np.exp(-3j * (grid.x - grid.start)))
    np.testing.assert_allclose(phase, 0.0, atol=1e-12)
    problem = one_problem(
        ROTOR.replace('kind = "plane-wave"', 'kind = "plane-wave"\nwavenumber = 0.5'), "packet"
    )
    assert "not a mode of the periodic box" in problem and "packet.wavenumber" in problem
    assert "belongs to a packet of kind" in one_problem(
        ROTOR.replace('kind = "plane-wave"', 'kind = "plane-wave"\nwidth = 1.0'), r"packet\.width"
    )


def test_a_ground_state_packet_is_the_api_ground_state_of_the_trap_computed_once():
    study_module._GROUND_STATES.clear()
    swept = TRAP + '\n[sweep]\n"system.disorder.0.strength" = [0.1, 0.2]\n'
    study = parse_study(swept, "d.toml")
    first, second = (point.packet() for point in study.points)
    expected = mo.ground_state(
        mo.System(mo.Grid(1024, 80.0), potential=mo.Harmonic(1.0), nonlinearity=5.0), 1e-10
    )
    np.testing.assert_allclose(first.table, expected.table, rtol=0, atol=1e-12)
    assert first.chemical_potential == pytest.approx(expected.chemical_potential, rel=1e-12)
    assert first is second  # one ground state for both points: the trap does not change
    assert len(study_module._GROUND_STATES) == 1
    resolved = study.points[0].resolved["packet"]
    assert resolved == {
        "kind": "ground-state",
        "trap": [{"kind": "harmonic", "frequency": 1.0, "center": 0.0}],
        "tolerance": 1e-10,
    }


def test_a_ground_state_packet_sweeps_its_trap_and_nonlinearity_and_runs():
    study_module._GROUND_STATES.clear()
    swept = TRAP + '\n[sweep]\n"packet.trap.0.frequency" = [0.5, 1.0]\n"packet.nonlinearity" = [0.0, 5.0]\n'
    study = parse_study(swept, "d.toml")
    states = [point.packet() for point in study.points]
    assert len(study_module._GROUND_STATES) == 4
    # g = 0 in a trap of frequency w: E = w / 2 (hbar = m = 1), to the default tolerance.
    assert states[0].energy == pytest.approx(0.25, rel=1e-8)
    assert states[2].energy == pytest.approx(0.5, rel=1e-8)
    assert states[1].chemical_potential > states[0].chemical_potential
    system, packet, arguments = study.points[3].build()
    result = mo.ensemble(system, packet, **{**arguments, "realizations": 2})
    assert result.norm.mean == pytest.approx(1.0, abs=1e-6)


def test_bad_ground_state_packets_are_refused_before_the_run():
    tabulated = TRAP.replace(
        '[[packet.trap]]\nkind = "harmonic"\nfrequency = 1.0',
        '[[packet.trap]]\nkind = "tabulated"\nvalues = [1.0, 2.0]',
    )
    assert "not 'tabulated' values" in one_problem(tabulated, r"packet\.trap\.0")
    assert "is required" in one_problem(
        TRAP.replace('[[packet.trap]]\nkind = "harmonic"\nfrequency = 1.0\n', ""), "trap"
    )
    loose = TRAP.replace("frequency = 1.0\n\n[run]", "frequency = 0.001\n\n[run]")
    problem = one_problem(loose, r"packet: its ground state")
    assert "the periodic box confines it" in problem
    moving = TRAP.replace(
        '[[packet.trap]]\nkind = "harmonic"\nfrequency = 1.0',
        '[[packet.trap]]\nkind = "switched"\npotential = { kind = "harmonic", frequency = 1.0 }',
    )
    assert "static Hamiltonian" in one_problem(moving, "packet")
    assert "belongs to a packet of kind 'ground-state'" in one_problem(
        ROTOR.replace('kind = "plane-wave"', 'kind = "plane-wave"\ntolerance = 1e-8'), "tolerance"
    )


# --------------------------------------------------------------------------- warnings


def test_a_purely_kicked_system_does_not_warn_about_the_kinetic_phase():
    rotor = mo.System(
        mo.Grid(256, 2 * math.pi),
        mo.Continuum(hbar=1.0),
        potential=mo.Kicked(mo.Cosine(5.0, 1.0), period=1.0),
    )
    packet = mo.GaussianPacket(0.0, 0.0, 0.3)  # reaches |k| ~ 8: 35 rad of kinetic phase per unit step
    with warnings.catch_warnings():
        warnings.simplefilter("error", mo.UnderResolvedWarning)
        mo.propagate(rotor, packet, 4.0, 1.0)  # exact between kicks: no splitting error to warn about
        mo.ensemble(rotor, packet, 4.0, 1.0, realizations=2)
    static = mo.System(rotor.grid, rotor.model, potential=rotor.potential + mo.Cosine(1.0, 1.0))
    with pytest.warns(mo.UnderResolvedWarning, match="kinetic phase per step"):
        mo.propagate(static, packet, 4.0, 1.0)


# --------------------------------------------------------------------------- examples and the CLI


def test_the_examples_load():
    rotor = mo.load_study(ROOT / "examples" / "kicked_rotor.toml")
    assert len(rotor.points) == 4
    assert rotor.points[0].run_arguments()["snapshots"] == tuple(float(t) for t in range(1, 201))
    assert rotor.points[0].system().grid.quasimomentum == mo.Uniform(0.0, 1.0)
    released = mo.load_study(ROOT / "examples" / "released_condensate.toml")
    system, packet, _ = released.points[0].build()
    assert isinstance(packet, mo.GroundState)
    assert isinstance(system.potential, mo.Switched) and system.potential.off == 2.0


def test_a_kicked_rotor_study_at_quantum_resonance_through_mottle_run_and_report(tmp_path, capsys):
    from mottle import cli
    from mottle.cli.report_drive import momentum_squared_figure

    kicks = 20
    text = (
        ROTOR.replace("hbar = 1.0", "hbar = 12.566370614359172")  # 4 pi
        .replace("wavenumber = 1.0 }", "wavenumber = 1.0, phase = { uniform = [0.0, 6.283185307179586] } }")
        .replace("duration = 10.0", f"duration = {kicks}.0")
        .replace(
            "realizations = 4\n",
            f"realizations = 4\nsnapshots = {{ start = 1.0, stop = {kicks}.0, count = {kicks} }}\n",
        )
        + '\n[sweep]\n"system.potential.0.potential.amplitude" = [1.0, 2.5]\n'
    )
    (tmp_path / "rotor.toml").write_text(text)
    store = tmp_path / "rotor.mottle"
    assert cli.main(["run", str(tmp_path / "rotor.toml"), "--store", str(store), "--threads", "1"]) == 0
    # No detector: each point's line gives <p^2> at the last snapshot, not T = nan.
    printed = [line for line in capsys.readouterr().out.splitlines() if line.startswith("point ")]
    assert len(printed) == 2 and all("<p^2> = " in line and "T = " not in line for line in printed)
    assert "<p^2> = 1250 ± " in printed[1] and f"at t = {kicks}," in printed[1]  # 2.5^2 20^2 / 2
    assert cli.main(["report", str(store), "--out", str(tmp_path / "report")]) == 0
    assert not list((tmp_path / "report").glob("transmission_vs_*.png"))  # no T to draw
    opened = mo.open_store(store)
    t = np.arange(1, kicks + 1, dtype=float)
    for point in opened.points:
        kick = point.parameters["system.potential.0.potential.amplitude"]
        stored = point.result.samples["momentum_squared"]
        assert stored.shape == (4, kicks)
        # Quantum resonance, hbar_eff = 4 pi, beta = 0, from p = 0: <p^2> = K^2 t^2 / 2 after t kicks,
        # whatever the kick's phase (Izrailev & Shepelyansky, Theor. Math. Phys. 43, 553 (1980)).
        np.testing.assert_allclose(stored, np.broadcast_to(kick**2 * t**2 / 2, stored.shape), rtol=1e-9)
        assert point.result.momentum.shape == (kicks, 256)
    assert (tmp_path / "report" / "momentum_squared.png").stat().st_size > 0
    assert (tmp_path / "report" / "momentum_distribution.png").stat().st_size > 0
    summary = (tmp_path / "report" / "summary.txt").read_text()
    assert "<p^2>" in summary and f"t = {kicks}: 1250 ±" in summary  # 2.5^2 20^2 / 2
    lines = momentum_squared_figure(opened).axes[0].get_lines()
    assert len(lines) == 2
    np.testing.assert_array_equal(lines[1].get_xdata(), t)
    np.testing.assert_array_equal(
        lines[1].get_ydata(), [s.mean for s in opened.points[1].result.momentum_squared]
    )
    assert opened.points[0].resolved["system"]["potential"][0]["kind"] == "kicked"
