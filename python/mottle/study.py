"""Study files: a TOML description of a sweep of ensemble runs, validated before anything runs.

A study file is data. Its keys are the Python names of the specs (see
DESIGN.md): ``[system]`` (grid, model, ``absorber``, ``[[system.potential]]``
and ``[[system.disorder]]`` entries with a ``kind``), ``[packet]``, ``[run]``
and ``[sweep]``, plus an optional ``[study]`` table (``title``, ``notes``)
that labels reports and does not change results. ``[sweep]`` maps dotted
paths such as ``"system.disorder.0.stop"`` to lists of values or to ranges
``{ start, stop, count }`` (``scale = "log"`` for geometric spacing); the
points are the Cartesian product, the first key varying slowest.

Keys (defaults in brackets): ``[system]`` points, length, center [0], model
["continuum" or "lattice"], hbar [1], mass [1] (continuum), hopping [1]
(lattice), nonlinearity [0], absorber {width, strength}; potential kinds
barrier {height, left, right}, harmonic {frequency, center}, tabulated
{values: a list or a .npy file, read without pickles}; disorder kinds
white-noise {strength}, box {width}, gaussian {rms, correlation_length},
speckle {strength, correlation_length, sign [1]}, each with start and stop.
``[packet]`` center, wavenumber, width. ``[run]`` duration, step,
realizations, seed [0], seeds ["per-point"], order [2], detector [the
disorder region, as in :func:`mottle.ensemble`], snapshots [none], precision
["double"].

Seeds: with ``[run] seeds = "per-point"`` (the default) each point draws its
own disorder, from a seed derived from the study's ``seed`` and the point's
swept values (SHA-256, 63 bits): adding values to a sweep leaves the seeds of
the existing points unchanged. ``seeds = "shared"`` gives every point the
study's ``seed`` itself (common random numbers: differences between points
are less noisy, but the points are no longer independent samples).

Validation reports every problem it finds, each with the file, the line
where one is known and the key path, as a :class:`StudyError`.
"""

from __future__ import annotations

import difflib
import hashlib
import itertools
import json
import re
import warnings
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .errors import InvalidParameterError, InvalidTypeError

NUMBER, INTEGER, STRING, PAIR, NUMBERS, VALUES, TABLE = (
    "a number",
    "an integer",
    "a string",
    "a list of two numbers",
    "a list of numbers",
    "a list of numbers or a .npy file name",
    "a table",
)


@dataclass(frozen=True)
class Key:
    kind: str
    required: bool = False
    default: object = None
    choices: tuple = ()


def _fields(required: tuple[str, ...], optional: dict | None = None, kind: str = NUMBER) -> dict:
    spec = {name: Key(kind, required=True) for name in required}
    for name, default in (optional or {}).items():
        spec[name] = Key(kind, default=default)
    return spec


POTENTIAL_KINDS = {
    "barrier": _fields(("height", "left", "right")),
    "harmonic": _fields(("frequency",), {"center": 0.0}),
    "tabulated": {"values": Key(VALUES, required=True)},
}
DISORDER_KINDS = {
    "white-noise": _fields(("strength", "start", "stop")),
    "box": _fields(("width", "start", "stop")),
    "gaussian": _fields(("rms", "correlation_length", "start", "stop")),
    "speckle": {
        **_fields(("strength", "correlation_length", "start", "stop")),
        "sign": Key(INTEGER, default=1),
    },
}
ARRAYS = {"potential": POTENTIAL_KINDS, "disorder": DISORDER_KINDS}
MODEL_KEYS = {"continuum": ("hbar", "mass"), "lattice": ("hbar", "hopping")}

SCHEMA: dict[str, dict[str, Key]] = {
    "study": {"title": Key(STRING, default=""), "notes": Key(STRING, default="")},
    "system": {
        "points": Key(INTEGER, required=True),
        "length": Key(NUMBER, required=True),
        "center": Key(NUMBER, default=0.0),
        "model": Key(STRING, default="continuum", choices=tuple(MODEL_KEYS)),
        "hbar": Key(NUMBER, default=1.0),
        "mass": Key(NUMBER, default=1.0),
        "hopping": Key(NUMBER, default=1.0),
        "nonlinearity": Key(NUMBER, default=0.0),
        "absorber": Key(TABLE),
        "potential": Key(TABLE),
        "disorder": Key(TABLE),
    },
    "packet": _fields(("center", "wavenumber", "width")),
    "run": {
        "duration": Key(NUMBER, required=True),
        "step": Key(NUMBER, required=True),
        "realizations": Key(INTEGER, required=True),
        "seed": Key(INTEGER, default=0),
        "seeds": Key(STRING, default="per-point", choices=("per-point", "shared")),
        "order": Key(INTEGER, default=2),
        "detector": Key(PAIR),
        "snapshots": Key(NUMBERS, default=[]),
        "precision": Key(STRING, default="double", choices=("double", "single")),
    },
}
ABSORBER_KEYS = {"width": Key(NUMBER, required=True), "strength": Key(NUMBER)}
RANGE_KEYS = ("start", "stop", "count", "scale")
# Keys that label a study but do not change its results: left out when two studies are compared.
METADATA_SECTIONS = ("study",)


class StudyError(InvalidParameterError):
    """A study file that cannot run; ``problems`` lists each one as a line naming file, line and key."""

    def __init__(self, problems: list[str]):
        self.problems = list(problems)
        super().__init__("\n".join(self.problems))


# --------------------------------------------------------------------------- locating keys


def _key_lines(text: str) -> dict[tuple[str, ...], int]:
    """Best-effort map from key path to the 1-based line that sets it (tables, arrays of tables, keys)."""
    lines: dict[tuple[str, ...], int] = {}
    table: tuple[str, ...] = ()
    counters: dict[tuple[str, ...], int] = {}
    key_part = r'(?:"[^"]*"|\'[^\']*\'|[A-Za-z0-9_-]+)'
    dotted = rf"{key_part}(?:\s*\.\s*{key_part})*"
    for number, line in enumerate(text.splitlines(), start=1):
        if match := re.match(rf"^\s*\[\[\s*({dotted})\s*\]\]", line):
            path = _split_key(match.group(1))
            index = counters.get(path, -1) + 1
            counters[path] = index
            table = (*path, str(index))
            lines.setdefault(path, number)
            lines.setdefault(table, number)
        elif match := re.match(rf"^\s*\[\s*({dotted})\s*\]", line):
            table = _split_key(match.group(1))
            lines.setdefault(table, number)
        elif match := re.match(rf"^\s*({dotted})\s*=", line):
            lines.setdefault((*table, *_split_key(match.group(1))), number)
    return lines


def _split_key(key: str) -> tuple[str, ...]:
    parts = re.findall(r'"([^"]*)"|\'([^\']*)\'|([A-Za-z0-9_-]+)', key)
    return tuple(next(p for p in part if p) if any(part) else "" for part in parts)


class _Problems:
    """Collects problems, each prefixed by the file name, the line (when known) and the key path."""

    def __init__(self, source: str, text: str):
        self.source = source
        self.lines = _key_lines(text)
        self.items: list[str] = []

    def line_of(self, path: tuple[str, ...]) -> int | None:
        for length in range(len(path), 0, -1):
            if path[:length] in self.lines:
                return self.lines[path[:length]]
        return None

    def where(self, path: tuple[str, ...]) -> str:
        line = self.line_of(path)
        place = self.source if line is None else f"{self.source}:{line}"
        return f"{place}: {'.'.join(path)}" if path else place

    def add(self, path: tuple[str, ...], message: str) -> None:
        self.items.append(f"{self.where(path)}: {message}")

    def raise_if_any(self) -> None:
        if self.items:
            raise StudyError(self.items)


def _did_you_mean(name: str, known) -> str:
    close = difflib.get_close_matches(name, list(known), n=1, cutoff=0.6)
    if close:
        return f"; did you mean {close[0]!r}?"
    return f"; known keys: {', '.join(sorted(known))}"


# --------------------------------------------------------------------------- types


def _type_problem(key: Key, value: object) -> str | None:
    """Why ``value`` cannot be the value of ``key`` (None when its type fits)."""

    def is_number(v):
        return isinstance(v, (int, float)) and not isinstance(v, bool)

    got = f"got {_describe(value)}"
    if key.kind == NUMBER and not is_number(value):
        return f"must be a number, {got}"
    if key.kind == INTEGER:
        if isinstance(value, float) and value.is_integer():
            return None
        if not isinstance(value, int) or isinstance(value, bool):
            return f"must be an integer, {got}"
    if key.kind == STRING:
        if not isinstance(value, str):
            return f"must be a string, {got}"
        if key.choices and value not in key.choices:
            accepted = " or ".join(repr(c) for c in key.choices)
            return f"must be {accepted}, got {value!r}{_did_you_mean(value, key.choices)}"
    if key.kind == PAIR and not (
        isinstance(value, list) and len(value) == 2 and all(is_number(v) for v in value)
    ):
        return f"must be a list of two numbers [left, right], {got}"
    if key.kind == NUMBERS and not (isinstance(value, list) and all(is_number(v) for v in value)):
        return f"must be a list of numbers, {got}"
    if key.kind == VALUES and not (
        isinstance(value, str) or (isinstance(value, list) and all(is_number(v) for v in value))
    ):
        return f"must be a list of numbers or the name of a .npy file, {got}"
    if key.kind == TABLE and not isinstance(value, dict):
        return f"must be a table, {got}"
    return None


def _describe(value: object) -> str:
    if isinstance(value, bool):
        return f"the boolean {str(value).lower()}"
    if isinstance(value, str):
        return f"the string {value!r}"
    if isinstance(value, dict):
        return "a table"
    if isinstance(value, list):
        return f"a list {json.dumps(value, default=str)[:60]}"
    if isinstance(value, (int, float)):
        return repr(value)
    return f"{value!r} of type {type(value).__name__}"


def _normalize(key: Key, value: object) -> object:
    """The canonical form of a value that passed its type check: floats for numbers, ints for integers."""
    if key.kind == NUMBER:
        return float(value)
    if key.kind == INTEGER:
        return int(value)
    if key.kind in (PAIR, NUMBERS) and isinstance(value, list):
        return [float(v) for v in value]
    if key.kind == VALUES and isinstance(value, list):
        return [float(v) for v in value]
    return value


# --------------------------------------------------------------------------- schema check of the file


def _check_table(table: dict, spec: dict[str, Key], path: tuple[str, ...], problems: _Problems) -> dict:
    """Type-check ``table`` against ``spec``; returns the normalized entries that passed."""
    out = {}
    for name, value in table.items():
        if name not in spec:
            problems.add((*path, name), f"unknown key{_did_you_mean(name, spec)}")
            continue
        why = _type_problem(spec[name], value)
        if why:
            problems.add((*path, name), why)
            continue
        out[name] = _normalize(spec[name], value)
    return out


def _check_entries(entries, kinds: dict, path: tuple[str, ...], problems: _Problems) -> list[dict]:
    if isinstance(entries, dict):
        entries = [entries]
    if not isinstance(entries, list) or not all(isinstance(entry, dict) for entry in entries):
        problems.add(path, f"must be an array of tables ([[{'.'.join(path)}]]), got {_describe(entries)}")
        return []
    out = []
    for index, entry in enumerate(entries):
        where = (*path, str(index))
        kind = entry.get("kind")
        if kind is None:
            problems.add(where, f"needs a kind: one of {', '.join(map(repr, kinds))}")
            out.append({"kind": None})
            continue
        if kind not in kinds:
            problems.add(
                (*where, "kind"),
                f"unknown kind {kind!r}; accepted: {', '.join(map(repr, kinds))}"
                f"{_did_you_mean(str(kind), kinds)}",
            )
            out.append({"kind": None})
            continue
        rest = {k: v for k, v in entry.items() if k != "kind"}
        out.append({"kind": kind, **_check_table(rest, kinds[kind], where, problems)})
    return out


def _check_document(document: dict, problems: _Problems) -> dict:
    """The document with every entry type-checked and normalized (bad entries dropped and reported)."""
    known = (*SCHEMA, "sweep")
    checked: dict = {}
    for section, content in document.items():
        if section not in known:
            problems.add((section,), f"unknown section{_did_you_mean(section, known)}")
            continue
        if not isinstance(content, dict):
            problems.add((section,), f"must be a table ([{section}]), got {_describe(content)}")
            continue
        if section == "sweep":
            checked["sweep"] = dict(content)
            continue
        plain = {k: v for k, v in content.items() if not (section == "system" and k in ("absorber", *ARRAYS))}
        checked[section] = _check_table(plain, SCHEMA[section], (section,), problems)
        if section == "system":
            if "absorber" in content:
                absorber = content["absorber"]
                if isinstance(absorber, dict):
                    checked[section]["absorber"] = _check_table(
                        absorber, ABSORBER_KEYS, ("system", "absorber"), problems
                    )
                else:
                    problems.add(
                        ("system", "absorber"),
                        f"must be a table {{ width = ... }}, got {_describe(absorber)}",
                    )
            for name, kinds in ARRAYS.items():
                if name in content:
                    checked[section][name] = _check_entries(content[name], kinds, ("system", name), problems)
    return checked


def _key_at(path: tuple[str, ...], document: dict) -> tuple[Key | None, str | None]:
    """The schema key a sweep path names, or why it names nothing."""
    section, rest = path[0], path[1:]
    if section == "sweep" or section not in SCHEMA:
        known = [s for s in SCHEMA if s not in METADATA_SECTIONS]
        return None, f"{section!r} is not a section that can be swept{_did_you_mean(section, known)}"
    if section in METADATA_SECTIONS:
        return None, f"[{section}] only labels the study; sweep a key of system, packet or run"
    if not rest:
        return (
            None,
            f"names the whole [{section}] table; name one of its keys, "
            f"e.g. {section}.{next(iter(SCHEMA[section]))}",
        )
    spec = SCHEMA[section]
    name = rest[0]
    if section == "system" and name in ARRAYS:
        entries = document.get("system", {}).get(name, [])
        if len(rest) < 3:
            return (
                None,
                f"name an entry and a key, e.g. system.{name}.0.{'stop' if name == 'disorder' else 'height'}",
            )
        if not rest[1].isdigit() or int(rest[1]) >= len(entries):
            have = f"entries 0..{len(entries) - 1}" if entries else "no entries"
            return None, f"system.{name} has {have}; {rest[1]!r} names none of them"
        entry = entries[int(rest[1])]
        kind = entry.get("kind")
        if kind is None:
            return None, f"system.{name}.{rest[1]} has no valid kind"
        if rest[2] == "kind":
            return None, "the kind of an entry cannot be swept; write one study per kind"
        fields = ARRAYS[name][kind]
        if rest[2] not in fields or len(rest) > 3:
            return None, f"a {kind!r} entry has no key {'.'.join(rest[2:])!r}{_did_you_mean(rest[2], fields)}"
        return fields[rest[2]], None
    if section == "system" and name == "absorber":
        if "absorber" not in document.get("system", {}):
            return None, "system.absorber is not set in the study; add it to sweep its keys"
        if len(rest) != 2 or rest[1] not in ABSORBER_KEYS:
            last = rest[-1] if len(rest) > 1 else ""
            return None, f"the absorber has no key {'.'.join(rest[1:])!r}{_did_you_mean(last, ABSORBER_KEYS)}"
        return ABSORBER_KEYS[rest[1]], None
    if name not in spec or len(rest) > 1:
        return None, f"[{section}] has no key {'.'.join(rest)!r}{_did_you_mean(name, spec)}"
    return spec[name], None


def _sweep_values(raw: object, key: Key, path: tuple[str, ...], problems: _Problems) -> list | None:
    where = ("sweep", ".".join(path))
    if isinstance(raw, dict):
        unknown = [k for k in raw if k not in RANGE_KEYS]
        for name in unknown:
            problems.add(where, f"a range has no key {name!r}{_did_you_mean(name, RANGE_KEYS)}")
        missing = [k for k in ("start", "stop", "count") if k not in raw]
        if missing:
            problems.add(where, f"a range needs start, stop and count; missing {', '.join(missing)}")
        if unknown or missing:
            return None
        start, stop, count, scale = raw["start"], raw["stop"], raw["count"], raw.get("scale", "linear")
        if any(isinstance(v, bool) or not isinstance(v, (int, float)) for v in (start, stop)):
            problems.add(
                where, f"range start and stop must be numbers, got {_describe(start)} and {_describe(stop)}"
            )
            return None
        if isinstance(count, bool) or not isinstance(count, int) or count < 1:
            problems.add(where, f"range count must be an integer >= 1, got {_describe(count)}")
            return None
        if scale not in ("linear", "log"):
            problems.add(where, f"range scale must be 'linear' or 'log', got {_describe(scale)}")
            return None
        if key.kind not in (NUMBER, INTEGER):
            problems.add(where, f"a range gives numbers, but {'.'.join(path)} must be {key.kind}")
            return None
        if scale == "log" and not (start > 0 and stop > 0):
            problems.add(where, f"a log range needs start > 0 and stop > 0, got start={start}, stop={stop}")
            return None
        if count == 1:
            values = [float(start)]
        elif scale == "log":
            values = np.geomspace(start, stop, count).tolist()
        else:
            values = np.linspace(start, stop, count).tolist()
        if key.kind == INTEGER:
            rounded = [round(v) for v in values]
            if any(abs(r - v) > 1e-9 * max(1.0, abs(v)) for r, v in zip(rounded, values, strict=False)):
                problems.add(where, f"range gives non-integer values {values} for an integer key")
                return None
            values = rounded
        return values
    if not isinstance(raw, list):
        problems.add(
            where, f"must be a list of values or a range {{ start, stop, count }}, got {_describe(raw)}"
        )
        return None
    if not raw:
        problems.add(where, "the list of values is empty; give at least one")
        return None
    values = []
    for position, value in enumerate(raw):
        why = _type_problem(key, value)
        if why:
            problems.add(where, f"value {position}: {why}")
            return None
        values.append(_normalize(key, value))
    seen = set()
    for value in values:
        token = json.dumps(value)
        if token in seen:
            problems.add(where, f"the value {value!r} appears twice")
            return None
        seen.add(token)
    return values


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


def _fill_defaults(resolved: dict) -> dict:
    for section, spec in SCHEMA.items():
        table = resolved.setdefault(section, {})
        for name, key in spec.items():
            if key.kind != TABLE and name not in table and key.default is not None:
                table[name] = key.default
    system = resolved["system"]
    for name in ("mass", "hopping"):
        if (
            name not in MODEL_KEYS.get(system["model"], (name,))
            and system.get(name) == SCHEMA["system"][name].default
        ):
            system.pop(name)
    for name, kinds in ARRAYS.items():
        for entry in system.setdefault(name, []):
            for field_name, key in kinds.get(entry.get("kind"), {}).items():
                if field_name not in entry and key.default is not None:
                    entry[field_name] = key.default
    return resolved


def point_seed(seed: int, parameters: Mapping[str, object]) -> int:
    """The seed of a point with these swept values under ``seeds = "per-point"`` (63 bits of SHA-256)."""
    token = json.dumps({"seed": int(seed), "parameters": dict(parameters)}, sort_keys=True)
    return int.from_bytes(hashlib.sha256(token.encode()).digest()[:8], "little") >> 1


def _tables_of(resolved: dict) -> list[dict]:
    return [entry for entry in resolved["system"].get("potential", []) if entry.get("kind") == "tabulated"]


def build_system(resolved: Mapping, tables: Mapping[str, np.ndarray]):
    """The :class:`~mottle.System` of a resolved parameter set (raises the spec classes' own errors)."""
    from .absorber import Absorber
    from .disorder import BoxDisorder, GaussianDisorder, Speckle, WhiteNoise
    from .grid import Grid
    from .models import Continuum, Lattice
    from .potentials import Barrier, Harmonic, Tabulated
    from .system import System

    system = resolved["system"]
    grid = _in(("system",), lambda: Grid(system["points"], system["length"], system.get("center", 0.0)))
    if system.get("model", "continuum") == "lattice":
        model = _in(
            ("system",), lambda: Lattice(hopping=system.get("hopping", 1.0), hbar=system.get("hbar", 1.0))
        )
    else:
        model = _in(
            ("system",), lambda: Continuum(hbar=system.get("hbar", 1.0), mass=system.get("mass", 1.0))
        )
    makers = {
        "barrier": lambda e: Barrier(e["height"], e["left"], e["right"]),
        "harmonic": lambda e: Harmonic(e["frequency"], e.get("center", 0.0)),
        "tabulated": lambda e: Tabulated(tables[e["values"]["sha256"]]),
        "white-noise": lambda e: WhiteNoise(e["strength"], e["start"], e["stop"]),
        "box": lambda e: BoxDisorder(e["width"], e["start"], e["stop"]),
        "gaussian": lambda e: GaussianDisorder(e["rms"], e["correlation_length"], e["start"], e["stop"]),
        "speckle": lambda e: Speckle(
            e["strength"], e["correlation_length"], e["start"], e["stop"], e.get("sign", 1)
        ),
    }
    parts = {}
    for name in ARRAYS:
        total = None
        for index, entry in enumerate(system.get(name, [])):
            where = ("system", name, str(index))
            term = _in(where, lambda entry=entry: makers[entry["kind"]](entry), entry)
            _in(where, lambda term=term: term.validate(grid), entry)
            total = term if total is None else total + term
        parts[name] = total
    absorber = None
    if "absorber" in system:
        spec = system["absorber"]
        absorber = _in(("system", "absorber"), lambda: Absorber(spec["width"], spec.get("strength")), spec)
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


def build_packet(resolved: Mapping, system=None):
    """The :class:`~mottle.GaussianPacket` of a resolved parameter set, checked against the grid if given."""
    from .packets import GaussianPacket

    spec = resolved["packet"]
    packet = _in(("packet",), lambda: GaussianPacket(spec["center"], spec["wavenumber"], spec["width"]), spec)
    if system is not None:
        _in(("packet",), lambda: packet.validate(system.grid), spec)
    return packet


def run_arguments(resolved: Mapping, seed: int) -> dict:
    """Keyword arguments of :func:`mottle.ensemble` (but system and packet) for a resolved parameter set."""
    run = resolved["run"]
    return {
        "duration": run["duration"],
        "step": run["step"],
        "realizations": run["realizations"],
        "seed": seed,
        "order": run.get("order", 2),
        "detector": detector_of(resolved),
        "snapshots": tuple(run.get("snapshots", ())),
        "precision": run.get("precision", "double"),
    }


def detector_of(resolved: Mapping) -> tuple[float, float] | None:
    """``run.detector`` as a pair (None: :func:`mottle.ensemble` defaults it to the disorder region)."""
    detector = resolved["run"].get("detector")
    return None if detector is None else (float(detector[0]), float(detector[1]))


def _check_run(resolved: Mapping, system) -> None:
    from . import _checks
    from .propagate import detector_bounds, pauses_for, resolve_splitting, steps_for

    run = resolved["run"]
    duration = _in(("run", "duration"), lambda: _checks.positive("duration", run["duration"]))
    step = _in(("run", "step"), lambda: _checks.positive("step", run["step"]))
    steps = _in(("run", "step"), lambda: steps_for(duration, step))
    _in(("run", "snapshots"), lambda: pauses_for(run.get("snapshots", []), step, steps))
    detector = detector_of(resolved)
    if detector is None and system.disorder is not None:
        detector = (system.disorder.start, system.disorder.stop)
    _in(("run", "detector"), lambda: detector_bounds(system, detector))
    _in(("run", "order"), lambda: resolve_splitting(run.get("order", 2), None))
    _in(("run", "realizations"), lambda: _checks.integer("realizations", run["realizations"], minimum=1))
    _in(("run", "seed"), lambda: _checks.integer("seed", run.get("seed", 0), minimum=0))


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


def _required(resolved: dict, problems: list[tuple[tuple[str, ...], str]]) -> None:
    for section, spec in SCHEMA.items():
        for name, key in spec.items():
            if key.required and name not in resolved.get(section, {}):
                problems.append(((section, name), f"is required ({key.kind})"))
    for name, kinds in ARRAYS.items():
        for index, entry in enumerate(resolved["system"].get(name, [])):
            for field_name, key in kinds.get(entry.get("kind"), {}).items():
                if key.required and field_name not in entry:
                    problems.append((("system", name, str(index), field_name), f"is required ({key.kind})"))
    absorber = resolved["system"].get("absorber")
    if absorber is not None and "width" not in absorber:
        problems.append((("system", "absorber", "width"), f"is required ({NUMBER})"))
    system = resolved["system"]
    model = system.get("model", "continuum")
    other = "lattice" if model == "continuum" else "continuum"
    for name in MODEL_KEYS[other]:
        if name not in MODEL_KEYS[model] and name in system:
            problems.append(
                (
                    ("system", name),
                    f"applies to the {other} model, but model is {model!r} "
                    f"(it takes {', '.join(MODEL_KEYS[model])})",
                )
            )


@dataclass(frozen=True, eq=False)
class StudyPoint:
    """One parameter set of a study: the swept ``parameters``, the full ``resolved`` set and its ``seed``."""

    index: int
    parameters: dict
    resolved: dict
    seed: int
    tables: Mapping[str, np.ndarray] = field(repr=False, default_factory=dict)

    @property
    def realizations(self) -> int:
        return int(self.resolved["run"]["realizations"])

    def system(self):
        return _plain(lambda: build_system(self.resolved, self.tables))

    def packet(self):
        return _plain(lambda: build_packet(self.resolved))

    def run_arguments(self) -> dict:
        """Keyword arguments of :func:`mottle.ensemble`: duration, step, realizations, seed, order..."""
        return _plain(lambda: run_arguments(self.resolved, self.seed))

    def build(self):
        """``(system, packet, arguments)``: ``mo.ensemble(system, packet, **arguments)`` runs the point."""
        system = self.system()
        return system, self.packet(), self.run_arguments()

    def label(self, names: Mapping[str, str] | None = None) -> str:
        """``stop=25, wavenumber=0.8``: the swept values, by short names."""
        names = names or short_names(self.parameters)
        return (
            ", ".join(f"{names[path]}={_format(value)}" for path, value in self.parameters.items())
            or "single point"
        )


def _plain(make):
    try:
        return make()
    except _KeyedError as error:
        raise InvalidParameterError(f"{'.'.join(error.path)}: {error.message}") from None


def _format(value: object) -> str:
    return f"{value:.6g}" if isinstance(value, float) else str(value)


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
    """A validated study: its text, the base parameters, the sweep and its :class:`StudyPoint` list."""

    text: str
    source: str
    document: dict
    sweep: dict
    points: tuple[StudyPoint, ...]
    tables: Mapping[str, np.ndarray] = field(repr=False, default_factory=dict)

    @property
    def title(self) -> str:
        return self.document.get("study", {}).get("title", "") or Path(self.source).stem

    @property
    def realizations(self) -> int:
        """Realizations over all points."""
        return sum(point.realizations for point in self.points)

    def canonical(self) -> dict:
        """What the results depend on: the base parameters and the sweep (metadata left out)."""
        body = _fill_defaults(json.loads(json.dumps(self.document)))
        for section in METADATA_SECTIONS:
            body.pop(section, None)
        return json.loads(json.dumps({**body, "sweep": self.sweep}))

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
    tables = {}
    for index, entry in enumerate(document.get("system", {}).get("potential", [])):
        if entry.get("kind") != "tabulated" or "values" not in entry:
            continue
        values = entry["values"]
        where = ("system", "potential", str(index), "values")
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


def parse_study(text: str, source: str = "<study>", root: str | Path = ".") -> Study:
    """Validate a study given as TOML text (``root`` resolves relative .npy file names)."""
    problems = _Problems(source, text)
    document = _check_document(_parse(text, source), problems)
    tables = _load_tables(document, Path(root), problems)
    for section in ("system", "packet", "run"):
        if section not in document:
            problems.add((section,), f"the study needs a [{section}] table")
    problems.raise_if_any()

    sweep = {}
    for dotted, raw in document.get("sweep", {}).items():
        path = tuple(dotted.split("."))
        key, why = _key_at(path, document)
        if key is None:
            problems.add(("sweep", dotted), f"names nothing: {why}")
            continue
        values = _sweep_values(raw, key, path, problems)
        if values is not None:
            sweep[dotted] = values
    problems.raise_if_any()

    base = {k: v for k, v in document.items() if k != "sweep"}
    missing: list = []
    _required(_apply(base, {path: values[0] for path, values in sweep.items()}), missing)
    for path, message in missing:
        problems.add(path, message)
    problems.raise_if_any()

    points = []
    failures: dict[tuple[str, str], list[int]] = {}
    combos = list(itertools.product(*sweep.values())) if sweep else [()]
    for index, combo in enumerate(combos):
        parameters = dict(zip(sweep, combo, strict=False))
        resolved = _fill_defaults(_apply(base, parameters))
        run = resolved["run"]
        seed = point_seed(run["seed"], parameters) if run.get("seeds") == "per-point" else int(run["seed"])
        try:
            with warnings.catch_warnings():
                # Under-resolution warnings come from the run itself, once per point, not at validation.
                warnings.simplefilter("ignore")
                system = build_system(resolved, tables)
                build_packet(resolved, system)
                _check_run(resolved, system)
        except _KeyedError as error:
            failures.setdefault((problems.where(error.path), error.message), []).append(index)
        points.append(StudyPoint(index, parameters, resolved, seed, tables))
    for (where, message), indices in failures.items():
        if len(indices) == len(combos) or not sweep:
            problems.items.append(f"{where}: {message}")
            continue
        first = points[indices[0]]
        more = len(indices) - 1
        also = f" (also at {more} more point{'s' if more > 1 else ''})" if more else ""
        problems.items.append(f"{where}: at point {first.index + 1} ({first.label()}): {message}{also}")
    problems.raise_if_any()
    return Study(text, source, document, sweep, tuple(points), tables)


def load_study(path: str | Path) -> Study:
    """Read and validate a study file; raises :class:`StudyError` listing every problem found."""
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise StudyError([f"{path}: no such study file"]) from None
    except (OSError, UnicodeDecodeError) as error:
        raise StudyError([f"{path}: cannot read the study file: {error}"]) from None
    return parse_study(text, str(path), path.parent)


__all__ = ["Study", "StudyError", "StudyPoint", "load_study", "parse_study", "point_seed"]
