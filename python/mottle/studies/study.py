"""Study files: a TOML description of a sweep of ensemble runs, validated before anything runs.

A study file is data. Its keys are the Python names of the specs (every key,
with its type, default and an example: docs/study-files.md): ``[system]``
(grid, model, ``absorber``, ``[[system.potential]]`` and
``[[system.disorder]]`` entries with a ``kind``), ``[packet]``, ``[run]``
and ``[sweep]``, plus an optional ``[study]`` table (``title``, ``notes``)
that labels reports and does not change results. ``[sweep]`` maps dotted
paths such as ``"system.disorder.0.stop"`` to lists of values or to ranges
``{ start, stop, count }`` (``scale = "log"`` for geometric spacing); its
``[[sweep.zip]]`` groups hold lists of one length that vary together, and its
``[[sweep.points]]`` tables name points one by one. The points are the
Cartesian product of the lists, groups and point list (each a
:class:`~mottle.studies.schema.Factor`), the first varying slowest.

Keys (defaults in brackets): ``[system]`` points, length, center [0], model
["continuum" or "lattice"], hbar [1], mass [1] (continuum), hopping [1]
(lattice), nonlinearity [0], quasimomentum [none: untwisted; a number or
``{ uniform = [low, high] }``], absorber {width, strength}; one potential or
disorder entry per registered spec class (:mod:`mottle.specs.kinds`), its
``kind`` and its fields as keys (tabulated values: a list or a .npy file, read
without pickles; a time-dependent kind's ``potential``: a nested entry, or a
list of them, swept as ``"system.potential.0.potential.amplitude"``); the kinds
and their keys are listed at the end. ``[packet]`` kind ["gaussian"; "random":
:class:`~mottle.RandomPacket`, "list": :class:`~mottle.PacketList`,
"plane-wave": a mode of the box, "ground-state": :func:`mottle.ground_state` of
the ``[[packet.trap]]`` potentials, see :func:`ground_state_of`], center,
wavenumber, width (numbers; for a random packet also ``{ uniform = [low, high] }``
or ``{ normal = [mean, std] }``), members (``[[packet.members]]`` tables of a
list), trap, nonlinearity, tolerance [1e-10] (a ground state). ``[run]`` duration, step,
realizations (the cap with target_stderr), seed [0], seeds ["per-point"], order
[2], splitting ["strang" or "blanes-moan" by order; "yoshida" on request],
detector [the disorder region, as in :func:`mottle.ensemble`], snapshots
[none; a list or a range ``{ start, stop, count }``], precision ["double"], target_stderr [none], spectrum [as
:func:`mottle.ensemble` decides].

Seeds: with ``[run] seeds = "per-point"`` (the default) each point draws its
own disorder, from a seed derived from the study's ``seed`` and the point's
swept values (SHA-256, 63 bits): adding values to a sweep leaves the seeds of
the existing points unchanged, and the same values reached through a list, a
zipped group or a point list give the same seed. ``seeds = "shared"`` gives
every point the study's ``seed`` itself (common random numbers: differences
between points are less noisy, but the points are no longer independent
samples).

Scale: the points are made on demand and each part of a point (system, packet,
run) is checked once per combination of the swept values it reads, sampled
beyond :data:`COMBINATIONS`; a study of 10^5 points loads in about a second.

Validation reports every problem it finds, each with the file, the line
where one is known and the key path, as a :class:`StudyError`.
"""

from __future__ import annotations

import collections
import hashlib
import itertools
import json
import math
import operator
import os
import re
import shutil
import warnings
from collections.abc import Iterator, Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ..errors import InvalidParameterError, InvalidTypeError
from ..specs.kinds import distribution
from .schema import (
    ARRAYS,
    METADATA_SECTIONS,
    Factor,
    StudyError,
    _check_document,
    _fill_defaults,
    _Problems,
    _required,
    _sweep_factors,
    _token,
)


def _kinds_summary() -> str:
    from ..specs.kinds import kinds, spec_fields

    lines = ["", "", "Kinds (derived from the registered spec classes):", ""]
    for family in ("potential", "disorder"):
        for kind, cls in kinds(family).items():
            keys = ", ".join(
                entry.key if entry.required else f"{entry.key} [{entry.default}]"
                for entry in spec_fields(cls)
            )
            lines.append(f"- {family} ``{kind}`` (:class:`mottle.{cls.__name__}`): {keys}")
    return "\n".join(lines) + "\n"


__doc__ = (__doc__ or "") + _kinds_summary()


# --------------------------------------------------------------------------- points


def _apply(document: dict, parameters: Mapping[str, object]) -> dict:
    resolved = json.loads(json.dumps(document))
    for dotted, value in parameters.items():
        path = dotted.split(".")
        target = resolved
        for part in path[:-1]:
            target = target[int(part)] if isinstance(target, list) else target.setdefault(part, {})
        target[path[-1]] = value
    return resolved


def point_seed(seed: int, parameters: Mapping[str, object]) -> int:
    """The seed of a point with these swept values under ``seeds = "per-point"`` (63 bits of SHA-256)."""
    token = json.dumps({"seed": int(seed), "parameters": dict(parameters)}, sort_keys=True)
    return int.from_bytes(hashlib.sha256(token.encode()).digest()[:8], "little") >> 1


def build_system(resolved: Mapping, tables: Mapping[str, np.ndarray]):
    """The :class:`~mottle.System` of a resolved parameter set (raises the spec classes' own errors)."""
    from ..specs.absorber import Absorber
    from ..specs.grid import Grid
    from ..specs.kinds import kinds
    from ..specs.system import System

    system = resolved["system"]
    twist = {}
    if system.get("quasimomentum") is not None:
        twist["quasimomentum"] = _in(
            ("system", "quasimomentum"), lambda: distribution(system["quasimomentum"])
        )
    grid = _in(
        ("system",), lambda: Grid(system["points"], system["length"], system.get("center", 0.0), **twist)
    )
    model_class = kinds("model")[system.get("model", "continuum")]
    model = _in(("system",), lambda: model_class.from_entry(system, tables))
    parts = {}
    for name in ARRAYS:
        parts[name] = _entries(system.get(name, []), ("system", name), name, tables, grid)
    absorber = None
    if "absorber" in system:
        spec = system["absorber"]
        axes = None if spec.get("axes") is None else tuple(int(a) if a == int(a) else a for a in spec["axes"])
        absorber = _in(
            ("system", "absorber"), lambda: Absorber(spec["width"], spec.get("strength"), axes), spec
        )
    return _in(
        ("system",),
        lambda: System(
            grid,
            model=model,
            potential=parts["potential"],
            disorder=parts["disorder"],
            absorber=absorber,
            nonlinearity=system.get("nonlinearity", 0.0),
        ),
        system,
    )


def _entries(entries, path: tuple[str, ...], family: str, tables, grid):
    """The sum of an array of entries (None when empty), each built and checked on the grid."""
    total = None
    for index, entry in enumerate(entries):
        where = (*path, str(index))
        term = _entry(entry, where, family, tables)
        _in(where, lambda term=term: term.validate(grid), entry)
        total = term if total is None else total + term
    return total


def _entry(entry: Mapping, where: tuple[str, ...], family: str, tables):
    """One entry's spec; the potentials nested in it first, each under its own key path."""
    from ..specs.kinds import kinds, spec_fields

    maker = kinds(family)[entry["kind"]]
    built = dict(entry)
    for declared in spec_fields(maker):
        nested = entry.get(declared.key)
        if declared.type != "potential" or nested is None:
            continue
        if isinstance(nested, Mapping):
            built[declared.key] = _entry(nested, (*where, declared.key), "potential", tables)
            continue
        total = None
        for index, item in enumerate(nested):
            term = _entry(item, (*where, declared.key, str(index)), "potential", tables)
            total = term if total is None else total + term
        built[declared.key] = total
    return _in(where, lambda: maker.from_entry(built, tables), entry)


def build_packet(resolved: Mapping, system=None):
    """The packet of a resolved parameter set, checked against the grid (or the system's) if given:
    a :class:`~mottle.GaussianPacket`, a :class:`~mottle.RandomPacket` (``kind = "random"``) or a
    :class:`~mottle.PacketList` (``kind = "list"``)."""
    from ..specs.kinds import kinds
    from ..specs.packets import PacketList, RandomPacket
    from .schema import PACKET_KIND

    spec = resolved["packet"]
    kind = spec.get("kind", PACKET_KIND)
    gaussian = kinds("packet")[PACKET_KIND]
    if kind == "random":
        drawn = {
            name: _in(("packet", name), lambda name=name: distribution(spec[name]))
            for name in ("center", "wavenumber", "width")
        }
        packet = _in(("packet",), lambda: RandomPacket(**drawn), spec)
    elif kind == "plane-wave":
        packet = _in(("packet", "wavenumber"), lambda: _plane_wave(resolved))
    elif kind == "ground-state":
        packet = ground_state_of(resolved)
    elif kind == "list":
        members = [
            _in(("packet", "members", str(index)), lambda m=member: gaussian.from_entry(m, {}), member)
            for index, member in enumerate(spec["members"])
        ]
        packet = _in(("packet", "members"), lambda: PacketList(members))
    else:
        packet = _in(("packet",), lambda: gaussian.from_entry(spec, {}), spec)
    if system is not None and kind not in ("plane-wave", "ground-state"):  # built on the grid already
        grid = getattr(system, "grid", system)
        if kind == "list":
            for index, member in enumerate(packet.packets):
                where = ("packet", "members", str(index))
                _in(where, lambda m=member: m.validate(grid), spec["members"][index])
        else:
            _in(("packet",), lambda: packet.validate(grid), spec)
    return packet


def _plane_wave(resolved: Mapping):
    """``exp(i k (x - start)) / sqrt(length)`` on the study's grid; ``k`` a multiple of 2 pi / length."""
    from ..errors import InvalidParameterError as Invalid
    from ..specs.packets import Wavefunction

    system, wavenumber = resolved["system"], float(resolved["packet"].get("wavenumber", 0.0))
    points, length = int(system["points"]), float(system["length"])
    mode = wavenumber * length / (2.0 * math.pi)
    if abs(mode - round(mode)) > 1e-9 * max(1.0, abs(mode)) or abs(round(mode)) >= points // 2:
        raise Invalid(
            f"plane-wave wavenumber {wavenumber:g} is not a mode of the periodic box: use a multiple of "
            f"2 pi / length = {2 * math.pi / length:.6g} below pi points / length in size "
            f"(e.g. wavenumber = {round(mode) * 2 * math.pi / length:.6g})"
        )
    x = np.arange(points) * (length / points)
    return Wavefunction(np.exp(2j * math.pi * round(mode) * x / length) / math.sqrt(length))


# Ground states by the canonical form of their inputs (grid, model, trap, nonlinearity, tolerance):
# each is computed once per process, and shared by every point and task that asks for the same one.
_GROUND_STATES: collections.OrderedDict = collections.OrderedDict()
GROUND_STATE_CACHE = 64
"""Most ground states :func:`ground_state_of` keeps (least recently used dropped first)."""


def ground_state_inputs(resolved: Mapping) -> dict:
    """What the ground state of a ``kind = "ground-state"`` packet depends on: the grid and model
    (no quasimomentum: the trap's box is untwisted), the trap, the nonlinearity and the tolerance."""
    system, packet = resolved["system"], resolved["packet"]
    from .schema import MODEL_KEYS

    model = system.get("model", "continuum")
    return {
        "grid": [system["points"], system["length"], system.get("center", 0.0)],
        "model": {"kind": model, **{k: system[k] for k in MODEL_KEYS[model] if k in system}},
        "trap": packet["trap"],
        "nonlinearity": packet.get("nonlinearity", system.get("nonlinearity", 0.0)),
        "tolerance": packet.get("tolerance", 1e-10),
    }


def ground_state_of(resolved: Mapping):
    """The :class:`~mottle.GroundState` a ``kind = "ground-state"`` packet names: ``mottle.ground_state``
    of the study's grid and model with the ``[[packet.trap]]`` potentials (summed) and the
    nonlinearity (``packet.nonlinearity``, by default the system's), cached by
    :func:`ground_state_inputs`; its warnings are given again on each use."""
    from ..dynamics.ground import ground_state
    from ..errors import MottleError
    from ..specs.grid import Grid
    from ..specs.kinds import kinds
    from ..specs.system import System

    inputs = ground_state_inputs(resolved)
    token = json.dumps(inputs, sort_keys=True)
    if token not in _GROUND_STATES:
        points, length, center = inputs["grid"]
        grid = _in(("system",), lambda: Grid(points, length, center))
        model_class = kinds("model")[inputs["model"]["kind"]]
        model = _in(("system",), lambda: model_class.from_entry(inputs["model"], {}))
        trap = _entries(inputs["trap"], ("packet", "trap"), "potential", {}, grid)
        where = ("packet",)
        trap_system = _in(
            where, lambda: System(grid, model, potential=trap, nonlinearity=inputs["nonlinearity"])
        )
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            try:
                state = ground_state(trap_system, inputs["tolerance"])
            except MottleError as error:
                raise _KeyedError(where, f"its ground state: {error}") from None
        _GROUND_STATES[token] = (state, [(item.category, str(item.message)) for item in caught])
        while len(_GROUND_STATES) > GROUND_STATE_CACHE:
            _GROUND_STATES.popitem(last=False)
    _GROUND_STATES.move_to_end(token)
    state, shown = _GROUND_STATES[token]
    for category, message in shown:
        warnings.warn(message, category, stacklevel=2)
    return state


def run_arguments(resolved: Mapping, seed: int) -> dict:
    """Keyword arguments of :func:`mottle.ensemble` (but system and packet) for a resolved parameter set."""
    run = resolved["run"]
    arguments = {
        "duration": run["duration"],
        "step": run["step"],
        "realizations": run["realizations"],
        "seed": seed,
        "order": run.get("order", 2),
        "splitting": run.get("splitting"),
        "detector": detector_of(resolved),
        "snapshots": tuple(run.get("snapshots", ())),
        "precision": run.get("precision", "double"),
        "spectrum": run.get("spectrum"),
    }
    if run.get("target_stderr") is not None:
        # Stop once the transmission's standard error is below it; ``realizations`` is the cap.
        arguments["target_stderr"] = run["target_stderr"]
    return arguments


def detector_of(resolved: Mapping) -> tuple[float, float] | None:
    """``run.detector`` as a pair (None: :func:`mottle.ensemble` defaults it to the disorder region)."""
    detector = resolved["run"].get("detector")
    return None if detector is None else (float(detector[0]), float(detector[1]))


def _check_run(resolved: Mapping, system) -> None:
    from .. import _checks
    from ..dynamics.drive import drive_steps
    from ..dynamics.propagate import (
        default_detector,
        detector_bounds,
        pauses_for,
        resolve_splitting,
        steps_for,
    )

    run = resolved["run"]
    duration = _in(("run", "duration"), lambda: _checks.positive("duration", run["duration"]))
    step = _in(("run", "step"), lambda: _checks.positive("step", run["step"]))
    steps, used = steps_for(duration, step)
    _in(("run", "snapshots"), lambda: pauses_for(run.get("snapshots", []), used, steps))
    _in(("run", "step"), lambda: drive_steps(system, used, steps))
    detector = default_detector(system, detector_of(resolved))
    _in(("run", "detector"), lambda: detector_bounds(system, detector))
    _in(("run", "order"), lambda: resolve_splitting(run.get("order", 2), run.get("splitting")))
    _in(("run", "realizations"), lambda: _checks.integer("realizations", run["realizations"], minimum=1))
    _in(("run", "seed"), lambda: _checks.integer("seed", run.get("seed", 0), minimum=0))
    if run.get("target_stderr") is not None:
        _in(("run", "target_stderr"), lambda: _checks.positive("target_stderr", run["target_stderr"]))


class _KeyedError(Exception):
    """A spec error with the key path it belongs to (internal to validation)."""

    def __init__(self, path: tuple[str, ...], message: str):
        self.path, self.message = path, message
        super().__init__(message)


def _in(path: tuple[str, ...], make, table: Mapping | None = None):
    """Run a spec constructor; re-raise its error with the key path (refined to a key the message names)."""
    try:
        return make()
    except (InvalidParameterError, InvalidTypeError) as error:
        message = str(error)
        if table is not None:
            named = [k for k in table if k != "kind" and re.search(rf"\b{re.escape(k)}\b", message)]
            if len(named) == 1:
                path = (*path, named[0])
        raise _KeyedError(path, message) from None


class StudyPoint:
    """One parameter set of a study: its ``index``, the swept ``parameters``, the full ``resolved``
    set and its ``seed``.

    A study's points are made when asked for (``study.points[i]``); ``resolved`` (the base tables
    with the swept values and every default filled in) and ``seed`` are worked out on first use."""

    __slots__ = ("_base", "_resolved", "_seed", "index", "parameters", "tables")

    def __init__(
        self,
        index: int,
        parameters: dict,
        resolved: dict | None = None,
        seed: int | None = None,
        tables: Mapping[str, np.ndarray] | None = None,
        base: dict | None = None,
    ):
        if resolved is None and base is None:
            raise InvalidTypeError("StudyPoint needs its resolved parameters (or the study's base tables)")
        self.index, self.parameters = index, parameters
        self._resolved, self._seed, self._base = resolved, seed, base
        self.tables = {} if tables is None else tables

    @property
    def resolved(self) -> dict:
        if self._resolved is None:
            assert self._base is not None  # one of the two is given (__init__)
            self._resolved = _fill_defaults(_apply(self._base, self.parameters))
        return self._resolved

    @property
    def seed(self) -> int:
        if self._seed is None:
            run = self.resolved["run"] if self._base is None else self._base["run"]
            seed = int(self.parameters.get("run.seed", run.get("seed", 0)))
            mode = self.parameters.get("run.seeds", run.get("seeds", "per-point"))
            self._seed = point_seed(seed, self.parameters) if mode == "per-point" else seed
        return self._seed

    def __repr__(self) -> str:
        return f"StudyPoint(index={self.index}, parameters={self.parameters!r}, seed={self.seed})"

    @property
    def realizations(self) -> int:
        """Realizations of the point (with ``run.target_stderr``: at most this many)."""
        return int(self.resolved["run"]["realizations"])

    def system(self):
        return self._plain(lambda: build_system(self.resolved, self.tables))

    def packet(self):
        return self._plain(lambda: build_packet(self.resolved))

    def run_arguments(self) -> dict:
        """Keyword arguments of :func:`mottle.ensemble`: duration, step, realizations, seed, order..."""
        return self._plain(lambda: run_arguments(self.resolved, self.seed))

    def build(self):
        """``(system, packet, arguments)``: ``mo.ensemble(system, packet, **arguments)`` runs the point."""
        system = self.system()
        return system, self.packet(), self.run_arguments()

    def label(self, names: Mapping[str, str] | None = None) -> str:
        """``stop=25, wavenumber=0.8``: the swept values, by short names."""
        return point_label(self.parameters, names)

    def _plain(self, make):
        # A large study checks every value of each key but not every combination before it runs
        # (see parse_study), so a point can still fail here: say which.
        try:
            return make()
        except _KeyedError as error:
            at = f" (at point {self.index + 1}: {self.label()})" if self.parameters else ""
            raise InvalidParameterError(f"{'.'.join(error.path)}: {error.message}{at}") from None


class _Points(Sequence):
    """The points of a study, made on demand: point ``i`` is the ``i``-th of the Cartesian product
    of the factors (first varying slowest), numbered in mixed radix."""

    def __init__(self, base: dict, factors: list[Factor], tables: Mapping[str, np.ndarray]):
        self._base, self._factors, self._tables = base, factors, tables
        self._sizes = [len(factor.rows) for factor in factors]
        self._count = math.prod(self._sizes)

    def __len__(self) -> int:
        return self._count

    def digits(self, index: int) -> list[int]:
        """The row of each factor that point ``index`` takes."""
        out = []
        for size in reversed(self._sizes):
            index, digit = divmod(index, size)
            out.append(digit)
        return out[::-1]

    def index_of(self, digits) -> int:
        index = 0
        for size, digit in zip(self._sizes, digits, strict=True):
            index = index * size + digit
        return index

    def parameters(self, index: int) -> dict:
        parameters: dict = {}
        for factor, row in zip(self._factors, self.digits(index), strict=True):
            parameters.update(zip(factor.keys, factor.rows[row], strict=True))
        return parameters

    def __getitem__(self, item):
        if isinstance(item, slice):
            return [self[index] for index in range(*item.indices(self._count))]
        index = operator.index(item)
        if index < 0:
            index += self._count
        if not 0 <= index < self._count:
            raise IndexError(f"point {item} of a study of {self._count} points")
        return StudyPoint(index, self.parameters(index), tables=self._tables, base=self._base)

    def __iter__(self):
        for index in range(self._count):
            yield self[index]


def format_value(value: object) -> str:
    """A swept value as labels and tables show it (floats to 6 significant digits, a distribution
    as ``uniform(0.8, 1.2)``)."""
    if isinstance(value, Mapping) and len(value) == 1:
        ((law, pair),) = value.items()
        if isinstance(pair, list):
            return f"{law}({', '.join(format_value(v) for v in pair)})"
    return f"{value:.6g}" if isinstance(value, float) else str(value)


def point_label(
    parameters: Mapping[str, object], names: Mapping[str, str] | None = None, empty: str = "single point"
) -> str:
    """``stop=25, wavenumber=0.8``: swept values by short names (the one point label of mottle)."""
    names = names or short_names(parameters)
    return ", ".join(f"{names[path]}={format_value(value)}" for path, value in parameters.items()) or empty


def short_names(parameters) -> dict[str, str]:
    """The last component of each dotted path, or more of it where that is ambiguous."""
    paths = list(parameters)
    names = {}
    for path in paths:
        parts = path.split(".")
        for depth in range(1, len(parts) + 1):
            name = ".".join(parts[-depth:])
            if sum(1 for other in paths if other == name or other.endswith("." + name)) == 1:
                break
        names[path] = name
    return names


@dataclass(frozen=True, eq=False)
class Study:
    """A validated study: its text, the base parameters, the sweep and its points.

    ``points`` is a sequence of :class:`StudyPoint`, made when indexed or iterated (a study of
    10^5 points holds its factors, not 10^5 resolved parameter sets). ``sweep`` maps each swept
    key, in order, to its distinct values in the order the points first take them; ``swept`` is
    its keys. ``grid`` is True when the points are the full Cartesian product of ``sweep``'s
    values, first key varying slowest (every key a list or a range: point ``i`` is then at
    ``numpy.unravel_index(i, [len(v) for v in sweep.values()])``); zipped groups and point lists
    make it False, and each point's ``parameters`` then say where it lies.
    """

    text: str
    source: str
    document: dict
    sweep: dict
    points: Sequence[StudyPoint]
    tables: Mapping[str, np.ndarray] = field(repr=False, default_factory=dict)
    grid: bool = True
    factors: tuple[Factor, ...] = field(repr=False, default=())

    @property
    def swept(self) -> tuple[str, ...]:
        """The swept keys, in order (a point's ``parameters`` have them in this order)."""
        return tuple(self.sweep)

    @property
    def title(self) -> str:
        return self.document.get("study", {}).get("title", "") or Path(self.source).stem

    @property
    def realizations(self) -> int:
        """Realizations over all points (with ``run.target_stderr``: at most this many)."""
        if "run.realizations" not in self.sweep:
            return len(self.points) * int(self.document["run"]["realizations"])
        return sum(point.realizations for point in self.points)

    def canonical(self) -> dict:
        """What the results depend on: the base parameters and the sweep (metadata left out).

        A study whose sweep is not a full grid adds ``factors``: each zipped group, point list or
        list, as its keys and the values they take point by point."""
        body = _fill_defaults(json.loads(json.dumps(self.document)))
        for section in METADATA_SECTIONS:
            body.pop(section, None)
        out = {**body, "sweep": self.sweep}
        if not self.grid:
            out["factors"] = [
                {key: [row[column] for row in factor.rows] for column, key in enumerate(factor.keys)}
                for factor in self.factors
            ]
        return json.loads(json.dumps(out))

    def differences(self, other: Mapping) -> list[str]:
        """Dotted keys whose values differ between this study's :meth:`canonical` form and ``other``."""
        return differences(self.canonical(), other)


def differences(first: Mapping, second: Mapping) -> list[str]:
    """The dotted keys at which two canonical studies differ, each as ``key: a != b``."""
    one, two = _flatten(first), _flatten(second)
    out = []
    for key in sorted(set(one) | set(two)):
        a, b = one.get(key, "(unset)"), two.get(key, "(unset)")
        if a != b:
            out.append(f"{key}: {_short(a)} != {_short(b)}")
    return out


def _short(value: object) -> str:
    text = json.dumps(value) if not isinstance(value, str) else value
    return text if len(text) <= 40 else text[:37] + "..."


def _flatten(value, prefix: str = "") -> dict:
    if isinstance(value, Mapping):
        out = {}
        for key, item in value.items():
            out.update(_flatten(item, f"{prefix}.{key}" if prefix else str(key)))
        return out if out or not prefix else {prefix: {}}
    if isinstance(value, list) and value and all(isinstance(v, Mapping) for v in value):
        out = {}
        for index, item in enumerate(value):
            out.update(_flatten(item, f"{prefix}.{index}"))
        return out
    return {prefix: value}


# --------------------------------------------------------------------------- loading


def _parse(text: str, source: str) -> dict:
    try:
        import tomllib
    except ImportError:  # Python 3.10
        try:
            import tomli as tomllib  # type: ignore[no-redef]
        except ImportError:
            raise StudyError(
                [f"{source}: reading study files needs Python >= 3.11 or the tomli package"]
            ) from None
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as error:
        message = str(error)
        match = re.search(r"line (\d+)", message)
        place = f"{source}:{match.group(1)}" if match else source
        raise StudyError([f"{place}: malformed TOML: {message}"]) from None


def _load_tables(document: dict, root: Path, problems: _Problems) -> dict[str, np.ndarray]:
    """Replace each tabulated potential's values (a list, or a .npy file, no pickles) by their SHA-256."""
    from .schema import POTENTIAL_KINDS, nested_entries

    tables = {}
    entries = document.get("system", {}).get("potential", [])
    for path, entry, _ in nested_entries(entries, ("system", "potential"), POTENTIAL_KINDS):
        if entry.get("kind") != "tabulated" or "values" not in entry:
            continue
        values = entry["values"]
        where = (*path, "values")
        if isinstance(values, str):
            path = (root / values).resolve()
            try:
                array = np.load(path, allow_pickle=False)
            except (OSError, ValueError) as error:
                problems.add(where, f"cannot read {values!r} as a .npy array of numbers ({path}): {error}")
                entry.pop("values")
                continue
        else:
            array = np.asarray(values)
        try:
            array = np.asarray(array, dtype=np.float64)
        except (TypeError, ValueError):
            problems.add(where, f"must hold real numbers, got an array of {array.dtype}")
            entry.pop("values")
            continue
        digest = hashlib.sha256(np.ascontiguousarray(array).tobytes() + str(array.shape).encode()).hexdigest()
        tables[digest] = array
        entry["values"] = {"sha256": digest, "source": values if isinstance(values, str) else "inline"}
    return tables


def point_bytes(resolved: Mapping, system) -> int:
    """About how many bytes one point's result takes in a store: the profiles (density, log-density,
    their standard errors and the momentum density at each snapshot), ``x`` and ``k``, and the
    per-realization samples (five scalars, three per snapshot, at most 256 spectrum modes)."""
    from ..limits import SPECTRUM_MODES

    run = resolved["run"]
    points = system.grid.points
    snapshots = len(run.get("snapshots", []) or [])
    realizations = int(run["realizations"])
    return 8 * (points * (2 + 5 * snapshots) + realizations * (5 + 3 * snapshots + SPECTRUM_MODES))


def _check_store_fits(base: dict, first: dict, count: int, tables, store_dir: Path, problems) -> None:
    """Refuse, before enumerating the points, a sweep whose store would not fit in ``store_dir``."""
    first = _fill_defaults(_apply(base, first))
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            each = point_bytes(first, build_system(first, tables))
    except (_KeyedError, KeyError, TypeError, ValueError):
        return  # the point-by-point validation names what is wrong with it
    where = store_dir if store_dir.is_dir() else Path(".")
    free = shutil.disk_usage(where).free
    if count * each > free:
        problems.add(
            ("sweep",),
            f"{count:,} points of about {each / 2**20:.3g} MiB each need about "
            f"{count * each / 2**30:.4g} GiB "
            f"for the store, more than the {free / 2**30:.4g} GiB free in {where.resolve()}: sweep at most "
            f"{free // each:,} points (fewer values, or fewer keys)",
        )
        problems.raise_if_any()


# --------------------------------------------------------------------------- validating the points

COMBINATIONS = 1024
"""Most combinations of swept values each part of a point (its system, its packet on the grid, its
run) is checked at before a study runs. A part that a sweep gives more combinations is checked at
every value of each factor (a list, a zipped group, the point list; at most this many values of
one, evenly spread, with its first, last, smallest and largest), the others at the first point's,
and at the factors' extreme values taken together; a combination left out is checked when its
point runs, and a failure there names the point."""

_GRID = ("system.points", "system.length", "system.center")
# What a ground-state packet reads beyond the grid: the model and the nonlinearity.
_TRAP = ("system.model", "system.hbar", "system.mass", "system.hopping", "system.nonlinearity")
_REGION = re.compile(r"^system\.disorder\.\d+\.(start|stop)$")

# Each part: which swept keys it reads, and its check (of the resolved point, with the system's cache).
# The run reads the potentials too: kicks and switches must land on its steps.
_PARTS = (
    ("system", lambda key: key.startswith("system.")),
    ("packet", lambda key: key.startswith("packet.") or key in _GRID or key in _TRAP),
    (
        "run",
        lambda key: key.startswith(("run.", "system.potential.")) or key in _GRID or bool(_REGION.match(key)),
    ),
)


def _keyed(factor: Factor, columns: list[int]) -> list:
    """Each row's values in ``columns``, hashable (lists and tables as JSON)."""
    getter = operator.itemgetter(*columns)
    keyed = list(map(getter, factor.rows))
    try:
        hash(tuple(keyed))
    except TypeError:
        keyed = [tuple(_token(row[column]) for column in columns) for row in factor.rows]
    return keyed


def _groups(factor: Factor, columns: list[int]) -> list[tuple[int, int]]:
    """``(first row, rows)`` of each distinct value of ``columns`` in a factor, in order."""
    keyed = _keyed(factor, columns)
    counts = collections.Counter(keyed)
    if len(counts) == len(keyed):
        return [(row, 1) for row in range(len(keyed))]
    last = len(keyed) - 1
    first = {token: last - position for position, token in enumerate(reversed(keyed))}
    return sorted((row, counts[token]) for token, row in first.items())


def _extremes(factor: Factor, columns: list[int], groups: list[tuple[int, int]]) -> list[int]:
    """The groups holding the first, the last, and each numeric key's smallest and largest value."""
    chosen = {0, len(groups) - 1}
    for column in columns:
        values = [factor.rows[first][column] for first, _ in groups]
        if all(isinstance(value, (int, float)) and not isinstance(value, bool) for value in values[:1]):
            try:
                array = np.asarray(values, dtype=float)
            except (TypeError, ValueError):
                continue
            chosen |= {int(np.argmin(array)), int(np.argmax(array))}
    return sorted(chosen)


def _combinations(points: _Points, reads) -> tuple[list[tuple[int, int]], bool]:
    """Points that stand for each combination of the swept values a part reads, with how many
    points share it; and whether that is every combination (False: a sample, see COMBINATIONS)."""
    factors = points._factors
    relevant = []
    others = 1
    for position, factor in enumerate(factors):
        columns = [column for column, key in enumerate(factor.keys) if reads(key)]
        if columns:
            relevant.append((position, _groups(factor, columns), columns))
        else:
            others *= len(factor.rows)
    total = math.prod(len(groups) for _, groups, _ in relevant)
    if total <= COMBINATIONS:
        chosen: Iterator[tuple[int, ...]] = itertools.product(
            *(range(len(groups)) for _, groups, _ in relevant)
        )
    else:
        picks: set[tuple[int, ...]] = set()
        reference = [0] * len(relevant)
        corners = [_extremes(factors[position], columns, groups) for position, groups, columns in relevant]
        for slot, (_, groups, _) in enumerate(relevant):
            values = range(len(groups))
            if len(groups) > COMBINATIONS:
                spread = np.linspace(0, len(groups) - 1, COMBINATIONS).round().astype(int).tolist()
                values = sorted({*spread, *corners[slot]})  # type: ignore[assignment]
            for group in values:
                picks.add((*reference[:slot], group, *reference[slot + 1 :]))
        picks.update(itertools.islice(itertools.product(*corners), COMBINATIONS))
        chosen = iter(sorted(picks))
    out = []
    for combination in chosen:
        digits = [0] * len(factors)
        shared = others
        for (position, groups, _), group in zip(relevant, combination, strict=True):
            digits[position], rows = groups[group]
            shared *= rows
        out.append((points.index_of(digits), shared))
    return out, total <= COMBINATIONS


def _validate(points: _Points, base: dict, tables, problems: _Problems, swept: bool) -> None:
    """Check each part of the points once per combination of the values it reads (see COMBINATIONS)."""
    failures: dict[tuple[str, str], list[int]] = {}  # (where, message): [first point, points, checked]
    systems: dict[tuple, object] = {}
    system_keys = [
        (position, column)
        for position, factor in enumerate(points._factors)
        for column, key in enumerate(factor.keys)
        if key.startswith("system.")
    ]

    def system_of(index: int, resolved: dict):
        digits = points.digits(index)
        token = tuple(_token(points._factors[p].rows[digits[p]][c]) for p, c in system_keys)
        if token not in systems:
            try:
                systems[token] = build_system(resolved, tables)
            except _KeyedError as error:
                systems[token] = error
        return systems[token]

    def grid_of(resolved: dict):
        from ..specs.grid import Grid

        system = resolved["system"]
        try:
            return Grid(system["points"], system["length"], system.get("center", 0.0))
        except (InvalidParameterError, InvalidTypeError):
            return None  # the system's check names it

    for part, reads in _PARTS:
        combinations, every = _combinations(points, reads)
        checked = len(points) if every else sum(shared for _, shared in combinations)
        for index, shared in combinations:
            resolved = _fill_defaults(_apply(base, points.parameters(index)))
            try:
                with warnings.catch_warnings():
                    # Under-resolution warnings come from the run itself, once per point.
                    warnings.simplefilter("ignore")
                    if part == "system":
                        system = system_of(index, resolved)
                        if isinstance(system, _KeyedError):
                            raise system
                    elif part == "packet":
                        grid = grid_of(resolved)
                        if grid is not None:
                            build_packet(resolved, grid)
                    else:
                        system = system_of(index, resolved)
                        if not isinstance(system, _KeyedError):
                            _check_run(resolved, system)
            except _KeyedError as error:
                entry = failures.setdefault((problems.where(error.path), error.message), [index, 0, checked])
                entry[0] = min(entry[0], index)
                entry[1] += shared
    for (where, message), (first, count, checked) in sorted(failures.items(), key=lambda item: item[1][0]):
        if count == len(points) or not swept:
            problems.items.append(f"{where}: {message}")
            continue
        more = count - 1
        also = f" (also at {more:,} more point{'s' if more > 1 else ''})" if more else ""
        if checked < len(points):
            also = f" (at {count:,} of the {checked:,} points checked before the run, of {len(points):,})"
        label = point_label(points.parameters(first))
        problems.items.append(f"{where}: at point {first + 1} ({label}): {message}{also}")


def parse_study(
    text: str, source: str = "<study>", root: str | Path = ".", store: str | os.PathLike | None = None
) -> Study:
    """Validate a study given as TOML text (``root`` resolves relative .npy file names).

    A sweep whose store (``store``, by default in ``root``) would not fit on its disk, or of more
    than :data:`mottle.limits.STUDY_POINTS` points, is refused at once, before its points are
    enumerated. Each part of a point (system, packet, run) is checked once per combination of
    the swept values it reads (see :data:`COMBINATIONS`)."""
    from ..limits import STUDY_POINTS

    problems = _Problems(source, text)
    document = _check_document(_parse(text, source), problems)
    tables = _load_tables(document, Path(root), problems)
    for section in ("system", "packet", "run"):
        if section not in document:
            problems.add((section,), f"the study needs a [{section}] table")
    problems.raise_if_any()

    factors = _sweep_factors(document.get("sweep", {}), document, problems)
    problems.raise_if_any()
    count = math.prod(len(factor.rows) for factor in factors)
    base = {k: v for k, v in document.items() if k != "sweep"}
    first = {key: value for factor in factors for key, value in zip(factor.keys, factor.rows[0], strict=True)}
    missing: list = []
    _required(_apply(base, first), missing)
    for path, message in missing:
        problems.add(path, message)
    problems.raise_if_any()
    if factors:
        _check_store_fits(base, first, count, tables, Path(store).parent if store else Path(root), problems)
    if count > STUDY_POINTS:
        sizes = " x ".join(f"{len(factor.rows):,}" for factor in factors)
        problems.add(
            ("sweep",),
            f"{sizes} = {count:,} points is more than the {STUDY_POINTS:,} a study may have "
            f"(mottle.limits.STUDY_POINTS): split it into several studies, or sweep fewer values",
        )
        problems.raise_if_any()

    points = _Points(base, factors, tables)
    _validate(points, base, tables, problems, bool(factors))
    problems.raise_if_any()
    sweep: dict[str, list] = {}
    for factor in factors:
        for column, key in enumerate(factor.keys):
            if len(factor.keys) == 1:
                sweep[key] = [row[0] for row in factor.rows]
                continue
            distinct = dict(zip(_keyed(factor, [column]), (row[column] for row in factor.rows), strict=True))
            sweep[key] = list(distinct.values())
    grid = all(len(factor.keys) == 1 for factor in factors)
    return Study(text, source, document, sweep, points, tables, grid, tuple(factors))


def load_study(path: str | os.PathLike, store: str | os.PathLike | None = None) -> Study:
    """Read and validate a study file; raises :class:`StudyError` listing every problem found.

    ``store`` is where its results will go (by default next to the study file): a sweep whose
    store would not fit on that disk is refused at once."""
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise StudyError([f"{path}: no such study file"]) from None
    except (OSError, UnicodeDecodeError) as error:
        raise StudyError([f"{path}: cannot read the study file: {error}"]) from None
    return parse_study(text, str(path), path.parent, store)


__all__ = ["COMBINATIONS", "Study", "StudyError", "StudyPoint", "load_study", "parse_study", "point_seed"]
