"""Study-file keys beyond one Gaussian packet and a Cartesian sweep: random and listed packets,
target_stderr, spectrum, zipped sweeps, point lists, and studies of 10^5 points."""

from __future__ import annotations

import re
import shutil

import numpy as np
import pytest

import mottle as mo
from mottle.studies.study import StudyError, parse_study, point_seed, run_arguments

BASE = """\
[system]
points = 512
length = 200.0
absorber = { width = 30.0 }

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
"""

RANDOM = BASE.replace(
    "center = -40.0\nwavenumber = 1.2",
    'kind = "random"\ncenter = { normal = [-40.0, 2.0] }\nwavenumber = { uniform = [1.0, 1.4] }',
)

LISTED = BASE.replace(
    "[packet]\ncenter = -40.0\nwavenumber = 1.2\nwidth = 6.0\n",
    '[packet]\nkind = "list"\n\n'
    "[[packet.members]]\ncenter = -40.0\nwavenumber = 1.0\nwidth = 6.0\n\n"
    "[[packet.members]]\ncenter = -45.0\nwavenumber = 1.3\nwidth = 5.0\n",
)


def problems_of(text: str, root=".") -> list[str]:
    with pytest.raises(StudyError) as caught:
        parse_study(text, "k.toml", root)
    problems = caught.value.problems
    assert all(problem.startswith("k.toml") and "\n" not in problem for problem in problems), problems
    return problems


def one_problem(text: str, pattern: str) -> str:
    problems = problems_of(text)
    assert any(re.search(pattern, problem) for problem in problems), problems
    return next(problem for problem in problems if re.search(pattern, problem))


# --------------------------------------------------------------------------- packets


def test_a_random_packet_draws_its_parameters_from_the_distributions_it_names():
    point = parse_study(RANDOM, "k.toml").points[0]
    assert point.packet() == mo.RandomPacket(mo.Normal(-40.0, 2.0), mo.Uniform(1.0, 1.4), 6.0)
    assert point.resolved["packet"] == {
        "kind": "random",
        "center": {"normal": [-40.0, 2.0]},
        "wavenumber": {"uniform": [1.0, 1.4]},
        "width": 6.0,
    }
    # A packet of realization r is the same as the API's.
    packet = point.packet()
    draws = {packet.packet(point.seed, r).wavenumber for r in range(8)}
    assert len(draws) == 8 and all(1.0 <= k < 1.4 for k in draws)


def test_a_random_packet_is_checked_at_the_extremes_of_its_distributions():
    line = one_problem(
        RANDOM.replace("normal = [-40.0, 2.0]", "normal = [-40.0, 12.0]"),
        r"^k.toml:\d+: packet\.center: packet center -112\.0 lies outside the box",
    )
    assert "at point" not in line
    one_problem(
        RANDOM.replace("uniform = [1.0, 1.4]", "uniform = [1.4, 1.0]"),
        r"^k.toml:\d+: packet\.wavenumber: Uniform needs low < high, got low=1\.4, high=1\.0",
    )
    one_problem(
        RANDOM.replace("uniform = [1.0, 1.4]", "unifrom = [1.0, 1.4]"),
        r"packet\.wavenumber: must be a number, \{ uniform = \[low, high\] \} or "
        r"\{ normal = \[mean, std\] \}, got a table with 'unifrom'; did you mean 'uniform'\?",
    )
    one_problem(
        RANDOM.replace("uniform = [1.0, 1.4]", "uniform = [1.0]"),
        r"packet\.wavenumber: uniform takes a list of two numbers \[low, high\], got a list \[1\.0\]",
    )
    # A distribution belongs to a random packet only.
    one_problem(
        RANDOM.replace('kind = "random"\n', ""),
        r"packet\.center: must be a number, got a table",
    )
    one_problem(RANDOM.replace('"random"', '"randon"'), r"packet\.kind: unknown kind 'randon'.*'random'\?")


def test_sweeping_a_random_packet_sweeps_its_distributions():
    text = (
        RANDOM
        + '\n[sweep]\n"packet.wavenumber" = [{ uniform = [0.8, 1.0] }, { uniform = [1.0, 1.2] }, 1.3]\n'
    )
    study = parse_study(text, "k.toml")
    assert [p.packet().wavenumber for p in study.points] == [mo.Uniform(0.8, 1.0), mo.Uniform(1.0, 1.2), 1.3]
    assert [p.label() for p in study.points] == [
        "wavenumber=uniform(0.8, 1)",
        "wavenumber=uniform(1, 1.2)",
        "wavenumber=1.3",
    ]
    ranged = parse_study(
        RANDOM + '\n[sweep]\n"packet.wavenumber" = { start = 1.0, stop = 1.2, count = 3 }\n', "k.toml"
    )
    assert [p.packet().wavenumber for p in ranged.points] == pytest.approx([1.0, 1.1, 1.2])
    one_problem(
        RANDOM + '\n[sweep]\n"packet.wavenumber.uniform" = [[0.8, 1.0]]\n',
        r"sweep\.packet\.wavenumber\.uniform: names nothing: sweep the whole distribution",
    )


def test_a_packet_list_takes_its_members_in_turn():
    study = parse_study(LISTED + '\n[sweep]\n"packet.members.1.wavenumber" = [1.3, 1.5]\n', "k.toml")
    packets = [point.packet() for point in study.points]
    assert packets[1] == mo.PacketList(
        [mo.GaussianPacket(-40.0, 1.0, 6.0), mo.GaussianPacket(-45.0, 1.5, 5.0)]
    )
    assert packets[0].packets[1].wavenumber == 1.3
    assert study.points[0].label() == "wavenumber=1.3"


def test_bad_packet_lists_name_the_member_and_key():
    one_problem(
        LISTED.replace("center = -45.0\n", ""),
        r"^k.toml:21: packet\.members\.1\.center: is required \(a number\)",
    )
    one_problem(
        LISTED.replace("center = -45.0", "center = -450.0"),
        r"^k.toml:22: packet\.members\.1\.center: packet center -450\.0 lies outside the box",
    )
    one_problem(
        LISTED.replace('kind = "list"', 'kind = "list"\nwavenumber = 1.0'),
        r"packet\.wavenumber: a 'list' packet takes its packets from \[\[packet\.members\]\] tables",
    )
    one_problem(
        LISTED + '\n[sweep]\n"packet.wavenumber" = [1.0, 1.2]\n',
        r"sweep\.packet\.wavenumber: names nothing: a 'list' packet has no key 'wavenumber'; "
        r"sweep a member's, e.g\. packet\.members\.0\.wavenumber",
    )
    one_problem(
        LISTED + '\n[sweep]\n"packet.members.2.wavenumber" = [1.0, 1.2]\n',
        r"packet\.members has members 0\.\.1; '2' names none of them",
    )
    one_problem(BASE.replace("width = 6.0", "width = 6.0\nmembers = []"), r"packet\.members: members belong")
    one_problem(
        LISTED.split("[[packet.members]]")[0] + "members = []\n\n[run]" + LISTED.split("[run]")[1],
        r"packet\.members: holds no packet",
    )


def test_studies_written_before_the_new_keys_keep_their_canonical_form():
    # Stores written before these keys existed must still resume: no new key may appear in the
    # canonical form of a study that does not use it, and writing a default changes nothing.
    study = parse_study(BASE + '\n[sweep]\n"packet.wavenumber" = [1.0, 1.2]\n', "k.toml")
    canonical = study.canonical()
    assert set(canonical) == {"system", "packet", "run", "sweep"}
    assert set(canonical["packet"]) == {"center", "wavenumber", "width"}
    assert set(canonical["run"]) == {
        "duration",
        "step",
        "realizations",
        "seed",
        "seeds",
        "order",
        "snapshots",
        "precision",
    }
    assert canonical["sweep"] == {"packet.wavenumber": [1.0, 1.2]}
    explicit = parse_study(
        BASE.replace("[packet]", '[packet]\nkind = "gaussian"')
        + '\n[sweep]\n"packet.wavenumber" = [1.0, 1.2]\n',
        "k.toml",
    )
    assert study.differences(explicit.canonical()) == []
    assert [p.seed for p in study.points] == [point_seed(7, {"packet.wavenumber": k}) for k in (1.0, 1.2)]


# --------------------------------------------------------------------------- run keys


def test_target_stderr_and_spectrum_reach_the_ensemble():
    text = BASE.replace("realizations = 16", "realizations = 256\ntarget_stderr = 1.0\nspectrum = false")
    point = parse_study(text, "k.toml").points[0]
    system, packet, arguments = point.build()
    assert arguments["target_stderr"] == 1.0 and arguments["spectrum"] is False
    assert arguments["realizations"] == 256  # the cap
    result = mo.ensemble(system, packet, **arguments)
    # A standard error of 1 is met at the first chunk, far below the cap; no spectrum asked.
    assert result.count == mo.CHUNK < 256
    assert result.spectrum is None
    assert "target_stderr" not in run_arguments(parse_study(BASE, "k.toml").points[0].resolved, 1)
    single = parse_study(BASE.replace("seed = 7", 'seed = 7\nprecision = "single"'), "k.toml").points[0]
    assert single.run_arguments()["precision"] == "single"


def test_bad_run_keys_are_one_line_errors():
    line = one_problem(
        BASE.replace("realizations = 16", "target_stderr = 0.01"),
        r"^k.toml:\d+: run\.target_stderr: .*up to run\.realizations, which is missing: add a cap",
    )
    assert "is required" not in line
    assert len(problems_of(BASE.replace("realizations = 16", "target_stderr = 0.01"))) == 1
    one_problem(
        BASE.replace("realizations = 16", "realizations = 16\ntarget_stderr = -0.01"),
        r"^k.toml:22: run\.target_stderr: target_stderr must be > 0, got -0\.01$",
    )
    one_problem(
        BASE.replace("realizations = 16", "realizations = 16\ntarget_stderr = 0"),
        r"run\.target_stderr: target_stderr must be > 0, got 0\.0",
    )
    one_problem(
        BASE.replace("realizations = 16", 'realizations = 16\nspectrum = "yes"'),
        r"^k.toml:22: run\.spectrum: must be true or false, got the string 'yes'",
    )


# --------------------------------------------------------------------------- sweeps

ZIPPED = (
    BASE
    + """
[sweep]
"run.realizations" = [16, 32]

[[sweep.zip]]
"packet.wavenumber" = [1.0, 1.2, 1.4]
"system.disorder.0.stop" = { start = 10.0, stop = 30.0, count = 3 }
"""
)


def test_zipped_keys_vary_together_and_combine_with_lists():
    study = parse_study(ZIPPED, "k.toml")
    assert [tuple(p.parameters.values()) for p in study.points] == [
        (16, 1.0, 10.0),
        (16, 1.2, 20.0),
        (16, 1.4, 30.0),
        (32, 1.0, 10.0),
        (32, 1.2, 20.0),
        (32, 1.4, 30.0),
    ]
    assert study.swept == ("run.realizations", "packet.wavenumber", "system.disorder.0.stop")
    assert study.sweep == {
        "run.realizations": [16, 32],
        "packet.wavenumber": [1.0, 1.2, 1.4],
        "system.disorder.0.stop": [10.0, 20.0, 30.0],
    }
    assert study.grid is False and parse_study(BASE, "k.toml").grid is True
    assert study.realizations == 3 * 16 + 3 * 32
    point = study.points[4]
    assert point.system().disorder.stop == 20.0 and point.packet().wavenumber == 1.2
    # A point's seed depends on its values, not on how the sweep reached them.
    assert point.seed == point_seed(
        7, {"run.realizations": 32, "packet.wavenumber": 1.2, "system.disorder.0.stop": 20.0}
    )
    # The canonical form records the grouping, so the Cartesian study of the same values differs.
    assert study.canonical()["factors"][1] == {
        "packet.wavenumber": [1.0, 1.2, 1.4],
        "system.disorder.0.stop": [10.0, 20.0, 30.0],
    }
    product = ZIPPED.replace("[[sweep.zip]]\n", "")
    assert study.differences(parse_study(product, "k.toml").canonical())
    # One [sweep.zip] table is one group.
    single = parse_study(ZIPPED.replace("[[sweep.zip]]", "[sweep.zip]"), "k.toml")
    assert [p.parameters for p in single.points] == [p.parameters for p in study.points]


def test_zipped_lists_of_different_lengths_are_one_line_naming_keys_and_lengths():
    line = one_problem(
        ZIPPED.replace("count = 3", "count = 4"),
        r"^k.toml:27: sweep\.zip\.0: zipped lists differ in length \(packet\.wavenumber has 3, "
        r"system\.disorder\.0\.stop has 4\)",
    )
    assert "\n" not in line
    one_problem(
        ZIPPED.replace('"run.realizations" = [16, 32]', '"packet.wavenumber" = [0.9, 1.1]'),
        r"sweep\.packet\.wavenumber: is swept twice \(in a list and in the group of packet\.wavenumber, "
        r"system\.disorder\.0\.stop\)",
    )
    one_problem(
        ZIPPED.replace("[1.0, 1.2, 1.4]", "[1.0, 1.0, 1.4]").replace(
            "start = 10.0, stop = 30.0", "start = 10.0, stop = 10.0"
        ),
        r"sweep\.zip\.0: value 1 repeats value 0 "
        r"\(packet\.wavenumber=1\.0, system\.disorder\.0\.stop=10\.0\)",
    )
    one_problem(
        ZIPPED.replace('"packet.wavenumber"', '"packet.wavenumbr"'),
        r"^k.toml:28: sweep\.zip\.0\.packet\.wavenumbr: names nothing.*did you mean 'wavenumber'\?",
    )
    # A zipped key may repeat a value when the rows differ.
    parse_study(ZIPPED.replace("[1.0, 1.2, 1.4]", "[1.0, 1.0, 1.4]"), "k.toml")


POINTS = (
    BASE
    + """
[[sweep.points]]
"packet.wavenumber" = 1.0
"run.detector" = [0.0, 20.0]

[[sweep.points]]
"packet.wavenumber" = 1.3
"run.detector" = [-10.0, 30.0]
"""
)


def test_explicit_points_are_the_points():
    study = parse_study(POINTS, "k.toml")
    assert [p.parameters for p in study.points] == [
        {"packet.wavenumber": 1.0, "run.detector": [0.0, 20.0]},
        {"packet.wavenumber": 1.3, "run.detector": [-10.0, 30.0]},
    ]
    assert study.points[1].run_arguments()["detector"] == (-10.0, 30.0)
    assert study.grid is False and study.swept == ("packet.wavenumber", "run.detector")
    one_problem(
        POINTS.replace('"packet.wavenumber" = 1.3\n', ""),
        r"^k.toml:28: sweep\.points\.1: lacks packet\.wavenumber: every point names the same keys",
    )
    one_problem(
        POINTS.replace("= 1.3", "= 1.0").replace("[-10.0, 30.0]", "[0.0, 20.0]"),
        r"sweep\.points: point 1 repeats point 0",
    )
    one_problem(
        POINTS.replace("= 1.3", '= "fast"'),
        r"^k.toml:29: sweep\.points\.1\.packet\.wavenumber: must be a number, got the string 'fast'",
    )
    one_problem(
        POINTS.replace("[-10.0, 30.0]", "[-10.0, 300.0]"),
        r"run\.detector: at point 2 \(wavenumber=1\.3, detector=\[-10\.0, 300\.0\]\): "
        r"detector .* leaves the box",
    )


def test_a_sweep_of_ten_billion_points_is_refused_before_anything_is_allocated(monkeypatch):
    # With a disk that would hold its store, the point limit refuses it (count and limit named).
    free = shutil.disk_usage(".")
    monkeypatch.setattr(shutil, "disk_usage", lambda path: free._replace(free=2**80))
    text = (
        BASE
        + "\n[sweep]\n"
        + "\n".join(
            f'"{key}" = {{ start = 1.0, stop = 2.0, count = 100 }}'
            for key in (
                "packet.wavenumber",
                "system.disorder.0.rms",
                "system.disorder.0.correlation_length",
                "run.duration",
                "system.absorber.strength",
            )
        )
    )
    line = one_problem(
        text,
        r"^k.toml:\d+: sweep: 100 x 100 x 100 x 100 x 100 = 10,000,000,000 points is more than the "
        r"10,000,000 a study may have",
    )
    assert "\n" not in line
    # One range of 10^10 values is refused before its values are made.
    one_problem(
        BASE + '\n[sweep]\n"packet.wavenumber" = { start = 1.0, stop = 2.0, count = 10_000_000_000 }\n',
        r"sweep\.packet\.wavenumber: range count 10,000,000,000 is more than the 10,000,000 points",
    )


# --------------------------------------------------------------------------- studies of 10^5 points

LARGE = (
    BASE.replace("points = 512", "points = 4096").replace("length = 200.0", "length = 400.0")
    + """
[sweep]
"system.disorder.0.rms" = { start = 0.05, stop = 0.5, count = 300 }
"system.disorder.0.stop" = { start = 10.0, stop = 100.0, count = 334 }
"""
)


def test_a_study_of_a_hundred_thousand_points_makes_its_points_on_demand():
    study = parse_study(LARGE, "k.toml")
    assert len(study.points) == 300 * 334 and study.grid
    rms, stop = study.sweep.values()
    for index in (0, 1, 334, 100_199, 54_321):
        point = study.points[index]
        i, j = np.unravel_index(index, (300, 334))
        assert point.index == index
        assert point.parameters == {"system.disorder.0.rms": rms[i], "system.disorder.0.stop": stop[j]}
        assert point.resolved["system"]["disorder"][0]["stop"] == stop[j]
        assert point.seed == point_seed(7, point.parameters)
    assert study.points[-1].index == 100_199
    assert [p.index for p in study.points[10:13]] == [10, 11, 12]
    with pytest.raises(IndexError):
        study.points[100_200]
    assert study.realizations == 100_200 * 16


def test_a_large_sweep_names_the_point_that_fails():
    # 300 x 334 combinations of the disorder entry's keys are more than are checked one by one:
    # every value of each key, and the extremes together, are; a failure names its point.
    line = one_problem(
        LARGE.replace("stop = 100.0, count = 334", "stop = 300.0, count = 334"),
        r"system\.disorder\.0: at point \d+ \(rms=0\.05, stop=2\d\d\.\d*\): "
        r"GaussianDisorder region .* must lie inside the box "
        r".*\(at \d+ of the \d+ points checked before the run, of 100,200\)",
    )
    assert "\n" not in line
    # A point that fails when it is built says which point it is.
    point = parse_study(BASE + '\n[sweep]\n"packet.wavenumber" = [1.0]\n', "k.toml").points[0]
    broken = mo.StudyPoint(
        0,
        point.parameters,
        dict(point.resolved, packet={"center": -40.0, "wavenumber": 1.0, "width": -1.0}),
        1,
    )
    with pytest.raises(mo.InvalidParameterError, match=r"^packet.width: .* \(at point 1: wavenumber=1\)$"):
        broken.packet()


def test_a_large_zip_is_checked_value_by_value():
    values = ", ".join(f"{10.0 + i * 0.001:.3f}" for i in range(5000))
    text = (
        BASE
        + f'\n[[sweep.zip]]\n"system.disorder.0.stop" = [{values}]\n'
        + '"packet.wavenumber" = { start = 1.0, stop = 1.2, count = 5000 }\n'
    )
    study = parse_study(text, "k.toml")
    assert len(study.points) == 5000 and not study.grid
    assert study.points[4999].parameters["system.disorder.0.stop"] == pytest.approx(14.999)
    # The largest value of a key is always among those checked.
    bad = text.replace("14.999]", "140.0]")
    one_problem(
        bad, r"system\.disorder\.0: at point 5000 \(stop=140, wavenumber=1\.2\): GaussianDisorder region"
    )


def test_the_zipped_sweep_of_the_readme_and_docs_gives_the_points_they_say():
    from pathlib import Path

    root = Path(__file__).resolve().parents[1]
    speckle = BASE.replace(
        'kind = "gaussian"\nrms = 0.1\ncorrelation_length = 1.0',
        'kind = "speckle"\nstrength = 0.2\ncorrelation_length = 1.0',
    )
    speckle = speckle.replace("length = 200.0", "length = 400.0").replace("points = 512", "points = 1024")
    for page in ("README.md", "docs/study-files.md"):
        text = (root / page).read_text(encoding="utf-8")
        block = next(b for b in re.findall(r"```toml\n(.*?)```", text, re.S) if "[[sweep.zip]]" in b)
        study = parse_study(speckle + "\n" + block, "k.toml")
        assert [tuple(p.parameters.values()) for p in study.points][:4] == [
            (0.1, 20.0, 200.0),
            (0.1, 40.0, 300.0),
            (0.1, 80.0, 500.0),
            (0.2, 20.0, 200.0),
        ], page
        assert len(study.points) == 6


def test_lists_groups_and_points_multiply_in_the_order_of_the_file():
    text = (
        BASE
        + """
[[sweep.points]]
"packet.center" = -40.0
"packet.width" = 6.0

[[sweep.points]]
"packet.center" = -45.0
"packet.width" = 5.0

[sweep]
"run.seed" = [1, 2]

[[sweep.zip]]
"system.disorder.0.stop" = [10.0, 20.0]
"run.duration" = [20.0, 25.0]
"""
    )
    study = parse_study(text, "k.toml")
    assert study.swept == (
        "packet.center",
        "packet.width",
        "run.seed",
        "system.disorder.0.stop",
        "run.duration",
    )
    assert len(study.points) == 2 * 2 * 2
    assert list(study.points[5].parameters.values()) == [-45.0, 5.0, 1, 20.0, 25.0]
    # A swept study seed is the seed the point's own seed derives from.
    assert study.points[5].seed == point_seed(1, study.points[5].parameters)


def test_a_zipped_study_runs_resumes_and_refuses_its_cartesian_twin(tmp_path):
    text = BASE + (
        '\n[[sweep.zip]]\n"system.disorder.0.stop" = [10.0, 20.0]\n"packet.wavenumber" = [1.0, 1.3]\n'
    )
    study = parse_study(text, "k.toml")
    store = tmp_path / "zip.mottle"
    stored = mo.run_study(study, store, progress=False, threads=1)
    assert sorted(point.index for point in stored.points) == [0, 1]
    direct = mo.ensemble(*study.points[1].build()[:2], threads=1, **study.points[1].run_arguments())
    by_index = {point.index: point for point in stored.points}
    assert by_index[1].result.transmission.mean == direct.transmission.mean
    mo.run_study(parse_study(text, "k.toml"), store, progress=False, threads=1)  # nothing left to run
    with pytest.raises(mo.StoreError, match="factors"):
        mo.run_study(
            parse_study(text.replace("[[sweep.zip]]\n", "[sweep]\n"), "k.toml"), store, progress=False
        )
