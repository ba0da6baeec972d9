"""Study files: parsing, the sweep, seeds, and every kind of bad input reported with its key path."""

from __future__ import annotations

import math

import numpy as np
import pytest

import mottle as mo
from mottle.studies.study import StudyError, differences, parse_study, point_seed

BASE = """\
[study]
title = "test study"

[system]
points = 512
length = 200.0
absorber = { width = 30.0 }

[[system.potential]]
kind = "barrier"
height = 0.2
left = -5.0
right = -4.0

[[system.disorder]]
kind = "gaussian"
rms = 0.1
correlation_length = 1.0
start = 0.0
stop = 20.0

[packet]
center = -40.0
wavenumber = 1.2
width = 6.0

[run]
duration = 20.0
step = 0.05
realizations = 16
seed = 7
snapshots = [10.0, 20.0]

[sweep]
"system.disorder.0.stop" = [10.0, 20.0, 30.0]
"packet.wavenumber" = { start = 1.0, stop = 1.4, count = 2 }
"""


def problems_of(text: str) -> list[str]:
    with pytest.raises(StudyError) as caught:
        parse_study(text, "s.toml")
    assert isinstance(caught.value, mo.InvalidParameterError)
    assert str(caught.value) == "\n".join(caught.value.problems)
    return caught.value.problems


def test_points_are_the_cartesian_product_first_key_slowest():
    study = parse_study(BASE, "s.toml")
    assert [tuple(p.parameters.values()) for p in study.points] == [
        (10.0, 1.0),
        (10.0, 1.4),
        (20.0, 1.0),
        (20.0, 1.4),
        (30.0, 1.0),
        (30.0, 1.4),
    ]
    assert [p.index for p in study.points] == list(range(6))
    assert study.realizations == 6 * 16
    assert study.title == "test study"


def test_a_point_builds_the_system_packet_and_arguments_it_names():
    point = parse_study(BASE, "s.toml").points[3]
    system, packet, arguments = point.build()
    assert system.grid == mo.Grid(512, 200.0)
    assert system.disorder == mo.GaussianDisorder(0.1, 1.0, 0.0, 20.0)
    assert system.potential == mo.Barrier(0.2, -5.0, -4.0)
    assert system.absorber == mo.Absorber(30.0)
    assert isinstance(system.model, mo.Continuum)
    assert packet == mo.GaussianPacket(-40.0, 1.4, 6.0)
    assert arguments == {
        "duration": 20.0,
        "step": 0.05,
        "realizations": 16,
        "seed": point.seed,
        "order": 2,
        "splitting": None,
        "detector": None,
        "snapshots": (10.0, 20.0),
        "precision": "double",
        "spectrum": None,
    }


def test_log_ranges_and_integer_keys():
    text = BASE.replace(
        '"packet.wavenumber" = { start = 1.0, stop = 1.4, count = 2 }',
        '"system.disorder.0.rms" = { start = 0.01, stop = 1.0, count = 3, scale = "log" }\n'
        '"run.realizations" = [16, 32]',
    )
    study = parse_study(text, "s.toml")
    rms = sorted({p.parameters["system.disorder.0.rms"] for p in study.points})
    assert np.allclose(rms, [0.01, 0.1, 1.0], rtol=1e-12)
    counts = {p.realizations for p in study.points}
    assert counts == {16, 32}
    assert all(isinstance(p.resolved["run"]["realizations"], int) for p in study.points)


def test_per_point_seeds_depend_on_the_swept_values_only():
    study = parse_study(BASE, "s.toml")
    seeds = [p.seed for p in study.points]
    assert len(set(seeds)) == 6
    assert all(0 <= seed < 2**63 for seed in seeds)
    # Adding a value to a sweep keeps the seeds of the points that were already there.
    grown = parse_study(BASE.replace("[10.0, 20.0, 30.0]", "[5.0, 10.0, 20.0, 30.0]"), "s.toml")
    by_values = {tuple(p.parameters.values()): p.seed for p in grown.points}
    for point in study.points:
        assert by_values[tuple(point.parameters.values())] == point.seed
        assert point.seed == point_seed(7, point.parameters)
    other_seed = parse_study(BASE.replace("seed = 7", "seed = 8"), "s.toml")
    assert not set(seeds) & {p.seed for p in other_seed.points}


def test_shared_seeds_give_every_point_the_study_seed():
    study = parse_study(BASE.replace("seed = 7", 'seed = 7\nseeds = "shared"'), "s.toml")
    assert {p.seed for p in study.points} == {7}


def test_a_study_without_a_sweep_is_one_point():
    text = BASE.split("[sweep]")[0]
    study = parse_study(text, "s.toml")
    assert len(study.points) == 1
    assert study.points[0].parameters == {}
    assert study.points[0].label() == "single point"


def test_lattice_model_and_tabulated_potential_from_a_npy_file(tmp_path):
    values = np.linspace(0.0, 0.1, 512)
    np.save(tmp_path / "ramp.npy", values)
    text = (
        BASE.replace("length = 200.0", 'length = 200.0\nmodel = "lattice"\nhopping = 2.0')
        .replace(
            'kind = "barrier"\nheight = 0.2\nleft = -5.0\nright = -4.0',
            'kind = "tabulated"\nvalues = "ramp.npy"',
        )
        .replace("correlation_length = 1.0", "correlation_length = 2.0")
    )
    path = tmp_path / "lattice.toml"
    path.write_text(text)
    study = mo.load_study(path)
    system = study.points[0].system()
    assert system.model == mo.Lattice(hopping=2.0)
    assert np.array_equal(system.static_potential(), values)
    # The resolved parameters name the table by content, so a changed file is a changed study.
    entry = study.points[0].resolved["system"]["potential"][0]
    assert entry["values"]["source"] == "ramp.npy" and len(entry["values"]["sha256"]) == 64
    np.save(tmp_path / "ramp.npy", values * 2)
    assert differences(study.canonical(), mo.load_study(path).canonical())


def test_differences_name_the_keys_that_changed():
    first = parse_study(BASE, "s.toml")
    second = parse_study(
        BASE.replace("rms = 0.1", "rms = 0.2").replace("[10.0, 20.0, 30.0]", "[10.0, 20.0]"), "s.toml"
    )
    changed = first.differences(second.canonical())
    assert [item.split(":")[0] for item in changed] == [
        "sweep.system.disorder.0.stop",
        "system.disorder.0.rms",
    ]
    # Labels and comments do not change results, so they are not differences.
    relabelled = parse_study(
        BASE.replace('title = "test study"', 'title = "renamed"') + "\n# comment\n", "s.toml"
    )
    assert first.differences(relabelled.canonical()) == []
    # An integer written where a number is expected is the same number.
    assert (
        first.differences(parse_study(BASE.replace("length = 200.0", "length = 200"), "s.toml").canonical())
        == []
    )


def test_study_files_are_data_not_code(tmp_path):
    marker = tmp_path / "executed"
    text = BASE.replace('title = "test study"', f"title = \"__import__('os').mkdir('{marker}')\"")
    study = parse_study(text, "s.toml")
    study.points[0].build()
    assert not marker.exists()
    problems = problems_of(BASE.replace("length = 200.0", f"length = \"__import__('os').mkdir('{marker}')\""))
    assert not marker.exists()
    assert "system.length: must be a number, got the string" in problems[0]


# --------------------------------------------------------------------------- bad input

BAD = {
    "malformed TOML": (
        ("points = 512", "points = = 512"),
        r"s.toml:5: malformed TOML: .*line 5",
    ),
    "unterminated table header": (
        ("[packet]", "[packet"),
        r"s.toml:\d+: malformed TOML",
    ),
    "unknown key with a suggestion": (
        ("width = 6.0", "widht = 6.0"),
        r"s.toml:\d+: packet.widht: unknown key; did you mean 'width'\?",
    ),
    "unknown section": (
        ("[run]", "[runn]"),
        r"s.toml:\d+: runn: unknown section; did you mean 'run'\?",
    ),
    "wrong type": (
        ("length = 200.0", 'length = "long"'),
        r"s.toml:6: system.length: must be a number, got the string 'long'",
    ),
    "boolean for an integer": (
        ("realizations = 16", "realizations = true"),
        r"s.toml:\d+: run.realizations: must be an integer, got the boolean true",
    ),
    "impossible value from the spec class": (
        ("rms = 0.1", "rms = -0.1"),
        r"s.toml:17: system.disorder.0.rms: GaussianDisorder rms must be > 0, got -0.1",
    ),
    "unknown disorder kind": (
        ('kind = "gaussian"', 'kind = "gausian"'),
        r"system.disorder.0.kind: unknown kind 'gausian'.*did you mean 'gaussian'\?",
    ),
    "missing required key": (
        ("step = 0.05\n", ""),
        r"s.toml:\d+: run.step: is required \(a number\)",
    ),
    "detector outside the box": (
        ("step = 0.05", "step = 0.05\ndetector = [0.0, 900.0]"),
        r"run.detector: detector \(0, 900\) leaves the box \[-100, 100\]",
    ),
    "snapshot beyond the run": (
        ("snapshots = [10.0, 20.0]", "snapshots = [10.0, 25.0]"),
        r"run.snapshots: snapshot time 25.0 must lie in \(0, duration = 20\]",
    ),
    "key of the other model": (
        ("length = 200.0", 'length = 200.0\nmodel = "lattice"\nmass = 2.0'),
        r"system.mass: applies to the continuum model, but model is 'lattice'",
    ),
    "sweep path with a typo": (
        ('"packet.wavenumber"', '"packet.wavenumbr"'),
        r"sweep.packet.wavenumbr: names nothing: \[packet\] has no key 'wavenumbr'; "
        r"did you mean 'wavenumber'\?",
    ),
    "sweep path past the entries": (
        ('"system.disorder.0.stop"', '"system.disorder.3.stop"'),
        r"sweep.system.disorder.3.stop: names nothing: system.disorder has entries 0..0",
    ),
    "sweep of a kind": (
        ('"system.disorder.0.stop" = [10.0, 20.0, 30.0]', '"system.disorder.0.kind" = ["box"]'),
        r"names nothing: the kind of an entry cannot be swept",
    ),
    "sweep of a scalar": (
        ("[10.0, 20.0, 30.0]", "10.0"),
        r"sweep.system.disorder.0.stop: must be a list of values or a range",
    ),
    "range with a misspelt key": (
        ("count = 2", "cuont = 2"),
        r"sweep.packet.wavenumber: a range has no key 'cuont'; did you mean 'count'\?",
    ),
    "log range through zero": (
        ("count = 2 }", 'count = 2, scale = "log" }'),
        None,  # valid: 1.0 .. 1.4 is positive; the next entry checks the refusal
    ),
    "swept value that breaks one point": (
        ("[10.0, 20.0, 30.0]", "[10.0, 20.0, 300.0]"),
        r"s.toml:15: system.disorder.0: at point 5 \(stop=300, wavenumber=1\): "
        r"GaussianDisorder region \[0.0, 300.0\) must lie inside the box"
        r".*\(also at 1 more point\)",
    ),
    "packet outside the box": (
        ("center = -40.0", "center = -400.0"),
        r"packet.center: packet center -400.0 lies outside the box",
    ),
    "sweep value of the wrong type": (
        ("[10.0, 20.0, 30.0]", '[10.0, "far"]'),
        r"sweep.system.disorder.0.stop: value 1: must be a number, got the string 'far'",
    ),
    "duplicate sweep value": (
        ("[10.0, 20.0, 30.0]", "[10.0, 20.0, 10.0]"),
        r"the value 10.0 appears twice",
    ),
}


@pytest.mark.parametrize("name", list(BAD))
def test_bad_study_files_are_reported_with_file_line_and_key(name):
    import re

    (old, new), expected = BAD[name]
    assert old in BASE
    text = BASE.replace(old, new)
    if expected is None:
        parse_study(text, "s.toml")
        with pytest.raises(StudyError, match="a log range needs start > 0"):
            parse_study(text.replace("start = 1.0", "start = 0.0"), "s.toml")
        return
    problems = problems_of(text)
    assert any(re.search(expected, problem) for problem in problems), problems
    assert all(problem.startswith("s.toml") and "\n" not in problem for problem in problems)


def test_every_problem_is_reported_not_only_the_first():
    text = BASE.replace("width = 6.0", "widht = 6.0").replace("length = 200.0", 'length = "x"')
    problems = problems_of(text)
    assert len(problems) == 2
    assert {p.split(": ")[1] for p in problems} == {"packet.widht", "system.length"}


def test_missing_file_and_unreadable_text(tmp_path):
    with pytest.raises(StudyError, match="no such study file"):
        mo.load_study(tmp_path / "absent.toml")
    path = tmp_path / "binary.toml"
    path.write_bytes(b"\xff\xfe\x00garbage")
    with pytest.raises(StudyError, match="cannot read the study file"):
        mo.load_study(path)


def test_point_errors_outside_validation_name_the_key():
    point = parse_study(BASE, "s.toml").points[0]
    broken = dict(point.resolved, packet={"center": -40.0, "wavenumber": 1.0, "width": -1.0})
    bad = mo.StudyPoint(0, {}, broken, 1)
    with pytest.raises(mo.InvalidParameterError, match=r"^packet.width: packet width must be > 0"):
        bad.packet()
    assert math.isfinite(point.packet().width)


def test_the_splitting_reaches_the_run():
    # A study names the splitting; the point's run arguments carry it, and a bad name is refused.
    text = BASE.replace(
        "snapshots = [10.0, 20.0]", 'snapshots = [10.0, 20.0]\norder = 4\nsplitting = "yoshida"'
    )
    point = parse_study(text, "s.toml").points[0]
    from mottle.studies.study import run_arguments

    assert run_arguments(point.resolved, point.seed)["splitting"] == "yoshida"
    with pytest.raises(StudyError, match=r"run\.splitting"):
        parse_study(text.replace('"yoshida"', '"leapfrog"'), "s.toml")
