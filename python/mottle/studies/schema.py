"""The schema of study files and its checks: types, unknown keys, sweep paths, line numbers.

Everything here works on the parsed TOML (plain dicts); building the specs and
the points is :mod:`mottle.study`'s.
"""

from __future__ import annotations

import difflib
import json
import re
from dataclasses import dataclass
from typing import Any

import numpy as np

from ..errors import InvalidParameterError
from ..specs import kinds as _kinds

NUMBER, INTEGER, STRING, PAIR, NUMBERS, VALUES, TABLE, BOOLEAN, DISTRIBUTION, TABLES, POTENTIAL, TIMES = (
    "a number",
    "an integer",
    "a string",
    "a list of two numbers",
    "a list of numbers",
    "a list of numbers or a .npy file name",
    "a table",
    "a boolean",
    "a number, { uniform = [low, high] } or { normal = [mean, std] }",
    "an array of tables",
    "a potential table { kind = ..., ... } or a list of them",
    "a list of numbers or a range { start, stop, count }",
)
# The distributions a drawn value (a random packet's parameter, a phase, a quasimomentum) may take,
# with their two parameters: the registry's (mottle.specs.kinds.LAWS).
DISTRIBUTIONS = _kinds.LAWS


@dataclass(frozen=True)
class Key:
    kind: str
    required: bool = False
    default: object = None
    choices: tuple = ()


_TYPES = {
    "number": NUMBER,
    "integer": INTEGER,
    "values": VALUES,
    "distribution": DISTRIBUTION,
    "potential": POTENTIAL,
}


def _keys(cls: type) -> dict[str, Key]:
    """The study-file keys of a registered spec class: its declared fields (mottle.specs.kinds)."""
    return {
        field.key: Key(_TYPES[field.type], required=field.required, default=field.default)
        for field in _kinds.spec_fields(cls)
    }


POTENTIAL_KINDS = {kind: _keys(cls) for kind, cls in _kinds.kinds("potential").items()}
DISORDER_KINDS = {kind: _keys(cls) for kind, cls in _kinds.kinds("disorder").items()}
ARRAYS = {"potential": POTENTIAL_KINDS, "disorder": DISORDER_KINDS}
MODELS = {kind: _keys(cls) for kind, cls in _kinds.kinds("model").items()}
MODEL_KEYS = {kind: tuple(sorted(keys)) for kind, keys in MODELS.items()}
# The [packet] table describes one Gaussian packet (no kind, or kind = "gaussian"), a packet whose
# parameters are drawn per realization (kind = "random": numbers or distributions), or a list of
# Gaussian packets taken in turn (kind = "list", [[packet.members]] tables).
PACKET_KIND = "gaussian"
_GAUSSIAN_KEYS = _keys(_kinds.kinds("packet")[PACKET_KIND])
PACKET_KINDS: dict[str, dict[str, Key]] = {
    "gaussian": _GAUSSIAN_KEYS,
    "random": {name: Key(DISTRIBUTION, required=True) for name in _GAUSSIAN_KEYS},
    "list": {"members": Key(TABLES, required=True)},
    # The plane wave exp(i wavenumber x) / sqrt(length): the kicked rotor's momentum eigenstate.
    "plane-wave": {"wavenumber": Key(NUMBER, default=0.0)},
    # mottle.ground_state of the study's grid and model with the [[packet.trap]] potentials (summed)
    # and the nonlinearity (by default the system's), computed once per distinct set of them.
    "ground-state": {
        "trap": Key(TABLES, required=True),
        "nonlinearity": Key(NUMBER),
        "tolerance": Key(NUMBER, default=1e-10),
    },
}
# Packet kinds whose keys are not a Gaussian's.
_OWN_KEYS = ("list", "plane-wave", "ground-state")
_MODEL_SYSTEM_KEYS = {name: key for keys in MODELS.values() for name, key in keys.items()}

SCHEMA: dict[str, dict[str, Key]] = {
    "study": {"title": Key(STRING, default=""), "notes": Key(STRING, default="")},
    "system": {
        "points": Key(INTEGER, required=True),
        "length": Key(NUMBER, required=True),
        "center": Key(NUMBER, default=0.0),
        "model": Key(STRING, default="continuum", choices=tuple(MODEL_KEYS)),
        **_MODEL_SYSTEM_KEYS,
        "nonlinearity": Key(NUMBER, default=0.0),
        # No default: left out, it leaves the canonical form of the studies written before it.
        "quasimomentum": Key(DISTRIBUTION),
        "absorber": Key(TABLE),
        "potential": Key(TABLE),
        "disorder": Key(TABLE),
    },
    "packet": {
        **{name: Key(DISTRIBUTION) for name in _GAUSSIAN_KEYS},
        "kind": Key(STRING, choices=tuple(PACKET_KINDS)),
        "members": Key(TABLES),
        "trap": Key(TABLES),
        "nonlinearity": Key(NUMBER),
        "tolerance": Key(NUMBER),
    },
    "run": {
        "duration": Key(NUMBER, required=True),
        "step": Key(NUMBER, required=True),
        "realizations": Key(INTEGER, required=True),
        "seed": Key(INTEGER, default=0),
        "seeds": Key(STRING, default="per-point", choices=("per-point", "shared")),
        "order": Key(INTEGER, default=2),
        "splitting": Key(STRING, choices=("strang", "yoshida", "blanes-moan")),
        "detector": Key(PAIR),
        "snapshots": Key(TIMES, default=[]),
        "precision": Key(STRING, default="double", choices=("double", "single")),
        # No defaults: left out, they leave the canonical form of the studies written before them.
        "target_stderr": Key(NUMBER),
        "spectrum": Key(BOOLEAN),
    },
}
ABSORBER_KEYS = {"width": Key(NUMBER, required=True), "strength": Key(NUMBER), "axes": Key(NUMBERS)}
RANGE_KEYS = ("start", "stop", "count", "scale")
# Tables of [sweep] that are not swept paths: zipped groups and explicit points.
SWEEP_GROUPS = ("zip", "points")
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
            path = _in_array(_split_key(match.group(1)), counters)
            index = counters.get(path, -1) + 1
            counters[path] = index
            table = (*path, str(index))
            lines.setdefault(path, number)
            lines.setdefault(table, number)
        elif match := re.match(rf"^\s*\[\s*({dotted})\s*\]", line):
            table = _in_array(_split_key(match.group(1)), counters)
            lines.setdefault(table, number)
        elif match := re.match(rf"^\s*({dotted})\s*=", line):
            lines.setdefault((*table, *_split_key(match.group(1))), number)
    return lines


def _in_array(path: tuple[str, ...], counters: dict[tuple[str, ...], int]) -> tuple[str, ...]:
    """A table header below an array of tables (``[system.potential.potential]`` after
    ``[[system.potential]]``) belongs to the array's latest entry: insert its index."""
    for length in range(len(path) - 1, 0, -1):
        if path[:length] in counters:
            return (*path[:length], str(counters[path[:length]]), *path[length:])
    return path


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


# On a 2D or 3D grid a number of [system] or [packet] (and of their entries) may be given per axis.
PER_AXIS_SECTIONS = ("system", "packet")
AXES = (2, 3)


def _per_axis(value: object, integer: bool = False) -> bool:
    """Whether ``value`` is a list of one number (an integer) per axis of a 2D or 3D grid."""
    return (
        isinstance(value, list)
        and len(value) in AXES
        and all(isinstance(v, int if integer else (int, float)) and not isinstance(v, bool) for v in value)
    )


def _type_problem(key: Key, value: object, per_axis: bool = False) -> str | None:
    """Why ``value`` cannot be the value of ``key`` (None when its type fits). With ``per_axis``
    a number (integer, distribution) may be a list of one per axis (see :data:`PER_AXIS_SECTIONS`)."""

    def is_number(v):
        return isinstance(v, (int, float)) and not isinstance(v, bool)

    if per_axis and key.kind in (NUMBER, DISTRIBUTION) and _per_axis(value):
        return None
    if per_axis and key.kind == INTEGER and _per_axis(value, integer=True):
        return None
    if per_axis and key.kind in (NUMBER, INTEGER, DISTRIBUTION) and isinstance(value, list):
        what = "an integer" if key.kind == INTEGER else "a number"
        return f"must be {what} or a list of one per axis (2 or 3 of them), got {_describe(value)}"
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
    if key.kind == TIMES:
        if isinstance(value, dict):
            _, why = _range(value, Key(NUMBER), "the range")
            return "; ".join(why) or None
        if not (isinstance(value, list) and all(is_number(v) for v in value)):
            return f"must be a list of numbers or a range {{ start, stop, count }}, {got}"
    if key.kind == POTENTIAL and not (
        isinstance(value, dict)
        or (isinstance(value, list) and value and all(isinstance(v, dict) for v in value))
    ):
        return f"must be a potential table {{ kind = ..., ... }} or a list of them (summed), {got}"
    if key.kind == VALUES and not (
        isinstance(value, str) or (isinstance(value, list) and all(is_number(v) for v in value))
    ):
        return f"must be a list of numbers or the name of a .npy file, {got}"
    if key.kind == TABLE and not isinstance(value, dict):
        return f"must be a table, {got}"
    if key.kind == BOOLEAN and not isinstance(value, bool):
        return f"must be true or false, {got}"
    if key.kind == DISTRIBUTION and not is_number(value):
        shape = "must be a number, { uniform = [low, high] } or { normal = [mean, std] }"
        if not isinstance(value, dict) or len(value) != 1:
            return f"{shape}, {got}"
        ((name, pair),) = value.items()
        if name not in DISTRIBUTIONS:
            return f"{shape}, got a table with {name!r}{_did_you_mean(name, DISTRIBUTIONS)}"
        if not (isinstance(pair, list) and len(pair) == 2 and all(is_number(v) for v in pair)):
            first, second = DISTRIBUTIONS[name]
            return f"{name} takes a list of two numbers [{first}, {second}], got {_describe(pair)}"
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


def _normalize(key: Key, value: Any) -> object:
    """The canonical form of a value that passed its type check: floats for numbers, ints for integers."""
    if key.kind in (NUMBER, DISTRIBUTION) and isinstance(value, list):
        return [float(v) for v in value]  # one per axis
    if key.kind == INTEGER and isinstance(value, list):
        return [int(v) for v in value]
    if key.kind == NUMBER:
        return float(value)
    if key.kind == INTEGER:
        return int(value)
    if key.kind in (PAIR, NUMBERS, TIMES) and isinstance(value, list):
        return [float(v) for v in value]
    if key.kind == TIMES and isinstance(value, dict):
        return _range(value, Key(NUMBER), "the range")[0]
    if key.kind == VALUES and isinstance(value, list):
        return [float(v) for v in value]
    if key.kind == DISTRIBUTION:
        if isinstance(value, dict):
            return {name: [float(v) for v in pair] for name, pair in value.items()}
        return float(value)
    return value


# --------------------------------------------------------------------------- schema check of the file


def _check_table(table: dict, spec: dict[str, Key], path: tuple[str, ...], problems: _Problems) -> dict:
    """Type-check ``table`` against ``spec``; returns the normalized entries that passed."""
    out: dict[str, Any] = {}
    for name, value in table.items():
        if name not in spec:
            problems.add((*path, name), f"unknown key{_did_you_mean(name, spec)}")
            continue
        why = _type_problem(spec[name], value, per_axis=path[0] in PER_AXIS_SECTIONS)
        if why:
            problems.add((*path, name), why)
            continue
        if spec[name].kind == POTENTIAL:
            out[name] = _check_nested(value, (*path, name), problems)
            continue
        out[name] = _normalize(spec[name], value)
    return out


def _check_nested(value: dict | list, path: tuple[str, ...], problems: _Problems) -> dict | list:
    """A nested potential (of a time-dependent term): one entry, or a list of entries (summed)."""
    if isinstance(value, dict):
        return _check_entry(value, POTENTIAL_KINDS, path, problems)
    return [_check_entry(entry, POTENTIAL_KINDS, (*path, str(i)), problems) for i, entry in enumerate(value)]


def _check_entries(entries, kinds: dict, path: tuple[str, ...], problems: _Problems) -> list[dict]:
    if isinstance(entries, dict):
        entries = [entries]
    if not isinstance(entries, list) or not all(isinstance(entry, dict) for entry in entries):
        problems.add(path, f"must be an array of tables ([[{'.'.join(path)}]]), got {_describe(entries)}")
        return []
    return [_check_entry(entry, kinds, (*path, str(index)), problems) for index, entry in enumerate(entries)]


def _check_entry(entry: dict, kinds: dict, where: tuple[str, ...], problems: _Problems) -> dict:
    kind = entry.get("kind")
    if kind is None:
        problems.add(where, f"needs a kind: one of {', '.join(map(repr, kinds))}")
        return {"kind": None}
    if kind not in kinds:
        problems.add(
            (*where, "kind"),
            f"unknown kind {kind!r}; accepted: {', '.join(map(repr, kinds))}"
            f"{_did_you_mean(str(kind), kinds)}",
        )
        return {"kind": None}
    rest = {k: v for k, v in entry.items() if k != "kind"}
    return {"kind": kind, **_check_table(rest, kinds[kind], where, problems)}


def nested_entries(entries, path: tuple[str, ...], kinds: dict):
    """``(path, entry, keys)`` of each checked entry and, depth first, of the potentials nested in it
    (a time-dependent term's ``potential``: one table, or a list of them)."""
    for index, entry in enumerate(entries):
        yield from _walk(entry, (*path, str(index)), kinds)


def _walk(entry: dict, where: tuple[str, ...], kinds: dict):
    keys = kinds.get(entry.get("kind"), {})
    yield where, entry, keys
    for name, key in keys.items():
        value = entry.get(name)
        if key.kind != POTENTIAL or value is None:
            continue
        if isinstance(value, dict):
            yield from _walk(value, (*where, name), POTENTIAL_KINDS)
        else:
            yield from nested_entries(value, (*where, name), POTENTIAL_KINDS)


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
        if section == "packet":
            checked[section] = _check_packet(content, problems)
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


def _check_packet(content: dict, problems: _Problems) -> dict:
    """The [packet] table checked against its kind's keys (no kind: one Gaussian packet)."""
    kind = content.get("kind", PACKET_KIND)
    if not isinstance(kind, str) or kind not in PACKET_KINDS:
        problems.add(
            ("packet", "kind"),
            f"unknown kind {kind!r}; accepted: {', '.join(map(repr, PACKET_KINDS))}"
            f"{_did_you_mean(str(kind), PACKET_KINDS)}",
        )
        return {}
    spec = PACKET_KINDS[kind]
    out: dict = {} if kind == PACKET_KIND else {"kind": kind}
    rest = {}
    for name, value in content.items():
        if name == "kind":
            continue
        if kind == "list" and name in _GAUSSIAN_KEYS:
            problems.add(
                ("packet", name),
                f"a 'list' packet takes its packets from [[packet.members]] tables; "
                f"give each member its {name}",
            )
        elif kind != "list" and name == "members":
            problems.add(("packet", name), f'members belong to kind = "list", not to a {kind!r} packet')
        elif name not in spec and name in SCHEMA["packet"]:
            # A key of another packet kind (unknown keys get the closest name from _check_table).
            owners = [other for other, keys in PACKET_KINDS.items() if name in keys]
            problems.add(
                ("packet", name),
                f"belongs to a packet of kind {' or '.join(map(repr, owners))}, not to a {kind!r} packet",
            )
        else:
            rest[name] = value
    if kind == "ground-state":
        trap = rest.pop("trap", None)
        out.update(_check_table(rest, spec, ("packet",), problems))
        if trap is not None:
            out["trap"] = _check_entries(trap, POTENTIAL_KINDS, ("packet", "trap"), problems)
            for where, entry, _ in nested_entries(out["trap"], ("packet", "trap"), POTENTIAL_KINDS):
                if entry.get("kind") == "tabulated":
                    problems.add(
                        where,
                        "a trap takes potentials given by their parameters, not 'tabulated' values; "
                        "put tabulated potentials in [[system.potential]]",
                    )
            if not trap:
                problems.add(
                    ("packet", "trap"), "holds no potential; give at least one [[packet.trap]] table"
                )
        return out
    if kind != "list":
        out.update(_check_table(rest, spec, ("packet",), problems))
        return out
    members = rest.pop("members", None)
    out.update(_check_table(rest, spec, ("packet",), problems))
    if members is None:
        return out
    if isinstance(members, dict):
        members = [members]
    if not isinstance(members, list) or not all(isinstance(member, dict) for member in members):
        problems.add(
            ("packet", "members"), f"must be an array of tables [[packet.members]], got {_describe(members)}"
        )
        return out
    if not members:
        problems.add(("packet", "members"), "holds no packet; give at least one [[packet.members]] table")
        return out
    out["members"] = [
        _check_table(member, _GAUSSIAN_KEYS, ("packet", "members", str(index)), problems)
        for index, member in enumerate(members)
    ]
    return out


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
    if section == "packet":
        return _packet_key_at(rest, document)
    if section == "system" and name in ARRAYS:
        entries = document.get("system", {}).get(name, [])
        example = "stop" if name == "disorder" else "height"
        return _entry_key_at(entries, ARRAYS[name], rest[1:], f"system.{name}", example)
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


def _entry_key_at(
    entries: list, kinds: dict, rest: tuple[str, ...], prefix: str, example: str = "height"
) -> tuple[Key | None, str | None]:
    """The key ``rest`` = (entry number, key, ...) names in an array of entries (``prefix``)."""
    if len(rest) < 2:
        return None, f"name an entry and a key, e.g. {prefix}.0.{example}"
    if not rest[0].isdigit() or int(rest[0]) >= len(entries):
        have = f"entries 0..{len(entries) - 1}" if entries else "no entries"
        return None, f"{prefix} has {have}; {rest[0]!r} names none of them"
    return _one_entry_key_at(entries[int(rest[0])], kinds, rest[1:], f"{prefix}.{rest[0]}")


def _one_entry_key_at(entry: dict, kinds: dict, rest: tuple[str, ...], prefix: str):
    """The key ``rest`` = (key, ...) names in one entry; into a nested potential's keys too."""
    kind = entry.get("kind")
    if kind is None:
        return None, f"{prefix} has no valid kind"
    if rest[0] == "kind":
        return None, "the kind of an entry cannot be swept; write one study per kind"
    fields = kinds[kind]
    field = fields.get(rest[0])
    if field is not None and field.kind == POTENTIAL:
        nested = entry.get(rest[0])
        where = f"{prefix}.{rest[0]}"
        if len(rest) == 1 or nested is None:
            return None, f"{where} is a whole potential; sweep one of its keys, e.g. {where}.amplitude"
        if isinstance(nested, dict):
            return _one_entry_key_at(nested, POTENTIAL_KINDS, rest[1:], where)
        return _entry_key_at(nested, POTENTIAL_KINDS, rest[1:], where, "amplitude")
    if field is None or len(rest) > 1:
        return None, f"a {kind!r} entry has no key {'.'.join(rest)!r}{_did_you_mean(rest[0], fields)}"
    return field, None


def _packet_key_at(rest: tuple[str, ...], document: dict) -> tuple[Key | None, str | None]:
    packet = document.get("packet", {})
    kind = packet.get("kind", PACKET_KIND)
    name = rest[0]
    if name == "kind":
        return None, "the kind of the packet cannot be swept; write one study per kind"
    if kind == "list":
        if name != "members":
            example = name if name in _GAUSSIAN_KEYS else "wavenumber"
            return None, (
                f"a 'list' packet has no key {name!r}; sweep a member's, e.g. packet.members.0.{example}"
            )
        members = packet.get("members", [])
        if len(rest) < 3:
            return None, "name a member and a key, e.g. packet.members.0.wavenumber"
        if not rest[1].isdigit() or int(rest[1]) >= len(members):
            have = f"members 0..{len(members) - 1}" if members else "no members"
            return None, f"packet.members has {have}; {rest[1]!r} names none of them"
        if rest[2] not in _GAUSSIAN_KEYS or len(rest) > 3:
            return None, f"a member has no key {'.'.join(rest[2:])!r}{_did_you_mean(rest[2], _GAUSSIAN_KEYS)}"
        return _GAUSSIAN_KEYS[rest[2]], None
    spec = PACKET_KINDS.get(kind, _GAUSSIAN_KEYS)
    if name == "members":
        return None, f'members belong to kind = "list", not to a {kind!r} packet'
    if kind == "ground-state" and name == "trap":
        return _entry_key_at(packet.get("trap", []), POTENTIAL_KINDS, rest[1:], "packet.trap", "frequency")
    if name in spec and len(rest) > 1 and spec[name].kind == DISTRIBUTION:
        return (
            None,
            f'sweep the whole distribution, e.g. "packet.{name}" = '
            f"[{{ uniform = [0.8, 1.0] }}, {{ uniform = [1.0, 1.2] }}]",
        )
    if name not in spec or len(rest) > 1:
        return None, f"[packet] has no key {'.'.join(rest)!r}{_did_you_mean(name, spec)}"
    return spec[name], None


@dataclass(frozen=True)
class Factor:
    """Keys of a sweep that vary together (one key for a Cartesian list) and their rows of values.

    The points of a study are the Cartesian product of its factors, the first varying slowest."""

    keys: tuple[str, ...]
    rows: tuple[tuple, ...]


def _token(value: object) -> object:
    """A hashable stand-in for a swept value (lists and tables as JSON)."""
    return value if isinstance(value, (int, float, str)) else json.dumps(value, sort_keys=True)


def _swept_key(dotted: object, document: dict, where: tuple[str, ...], problems: _Problems) -> Key | None:
    if not isinstance(dotted, str):
        problems.add(where, f"a swept key must be a dotted path, got {_describe(dotted)}")
        return None
    key, why = _key_at(tuple(dotted.split(".")), document)
    if key is None:
        problems.add(where, f"names nothing: {why}")
    return key


def _sweep_factors(sweep: dict, document: dict, problems: _Problems) -> list[Factor]:
    """The factors of ``[sweep]``: its lists and ranges (one key each), its ``zip`` groups and its
    ``points``, in the order the file gives them."""
    factors: list[Factor] = []
    for name, raw in sweep.items():
        if name == "zip":
            groups: list[tuple[tuple[str, ...], dict]] | None = (
                [(("sweep", "zip"), raw)] if isinstance(raw, dict) else None
            )
            if isinstance(raw, list) and all(isinstance(group, dict) for group in raw):
                groups = [(("sweep", "zip", str(index)), group) for index, group in enumerate(raw)]
            if groups is None:
                problems.add(
                    ("sweep", "zip"),
                    f"must be [[sweep.zip]] tables of dotted keys = lists of equal length, "
                    f"got {_describe(raw)}",
                )
                continue
            for where, group in groups:
                factor = _zip_factor(group, where, document, problems)
                if factor is not None:
                    factors.append(factor)
        elif name == "points":
            factor = _points_factor(raw, document, problems)
            if factor is not None:
                factors.append(factor)
        else:
            where = ("sweep", str(name))
            key = _swept_key(name, document, where, problems)
            values = None if key is None else _sweep_values(raw, key, where, problems)
            if values is not None:
                factors.append(Factor((name,), tuple((value,) for value in values)))
    first: dict[str, int] = {}
    for index, factor in enumerate(factors):
        for dotted in factor.keys:
            if dotted in first:
                problems.add(
                    ("sweep", dotted),
                    f"is swept twice (in {_factor_name(factors[first[dotted]])} and in "
                    f"{_factor_name(factor)}); a key can vary in one place only",
                )
            first.setdefault(dotted, index)
    return factors


def _factor_name(factor: Factor) -> str:
    return "a list" if len(factor.keys) == 1 else f"the group of {', '.join(factor.keys)}"


def _zip_factor(group: dict, where: tuple[str, ...], document: dict, problems: _Problems) -> Factor | None:
    if not group:
        problems.add(where, "a zipped group needs at least one key = list of values")
        return None
    columns: dict[str, list] = {}
    bad = False
    for dotted, raw in group.items():
        key = _swept_key(dotted, document, (*where, str(dotted)), problems)
        values = None if key is None else _sweep_values(raw, key, (*where, dotted), problems, repeats=True)
        if values is None:
            bad = True
        else:
            columns[dotted] = values
    if bad:
        return None
    lengths = {len(values) for values in columns.values()}
    if len(lengths) > 1:
        counts = ", ".join(f"{dotted} has {len(values)}" for dotted, values in columns.items())
        problems.add(
            where,
            f"zipped lists differ in length ({counts}); keys that vary together need one value per point",
        )
        return None
    rows = tuple(zip(*columns.values(), strict=True))
    if not _distinct_rows(rows, tuple(columns), where, "value", problems):
        return None
    return Factor(tuple(columns), rows)


def _points_factor(raw: object, document: dict, problems: _Problems) -> Factor | None:
    where = ("sweep", "points")
    entries = [raw] if isinstance(raw, dict) else raw
    if not isinstance(entries, list) or not entries or not all(isinstance(entry, dict) for entry in entries):
        problems.add(where, f"must be [[sweep.points]] tables of dotted keys = values, got {_describe(raw)}")
        return None
    keys = tuple(entries[0])
    if not keys:
        problems.add((*where, "0"), "a point needs at least one dotted key = value")
        return None
    types: dict[str, Key | None] = {}
    rows = []
    for index, entry in enumerate(entries):
        place = (*where, str(index))
        if tuple(sorted(entry)) != tuple(sorted(keys)):
            missing = [k for k in keys if k not in entry]
            extra = [k for k in entry if k not in keys]
            detail = "; ".join(
                part
                for part in (
                    f"lacks {', '.join(missing)}" if missing else "",
                    f"adds {', '.join(extra)}" if extra else "",
                )
                if part
            )
            problems.add(place, f"{detail}: every point names the same keys as the first ({', '.join(keys)})")
            continue
        row: list[object] = []
        for dotted in keys:
            if dotted not in types:
                types[dotted] = _swept_key(dotted, document, (*place, dotted), problems)
            key = types[dotted]
            why = None if key is None else _type_problem(key, entry[dotted])
            if why:
                problems.add((*place, dotted), why)
            if key is None or why:
                break
            row.append(_normalize(key, entry[dotted]))
        if len(row) == len(keys):
            rows.append(tuple(row))
    if len(rows) != len(entries) or not _distinct_rows(tuple(rows), keys, where, "point", problems):
        return None
    return Factor(keys, tuple(rows))


def _distinct_rows(rows: tuple, keys: tuple, where: tuple[str, ...], noun: str, problems: _Problems) -> bool:
    try:
        if len(set(rows)) == len(rows):
            return True
    except TypeError:
        pass  # lists or tables among the values: compare them as JSON
    seen: dict[tuple, int] = {}
    for index, row in enumerate(rows):
        token = tuple(_token(value) for value in row)
        if token in seen:
            values = ", ".join(f"{key}={value!r}" for key, value in zip(keys, row, strict=True))
            problems.add(
                where, f"{noun} {index} repeats {noun} {seen[token]} ({values}); each point must differ"
            )
            return False
        seen[token] = index
    return True


def _sweep_values(
    raw: object, key: Key, where: tuple[str, ...], problems: _Problems, repeats: bool = False
) -> list | None:
    """The values of one swept key (a list or a range); ``repeats`` allows a value twice (zipped)."""
    path = tuple(where[-1].split("."))
    if isinstance(raw, dict):
        values, messages = _range(raw, key, ".".join(path))
        for message in messages:
            problems.add(where, message)
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
        if token in seen and not repeats:
            problems.add(where, f"the value {value!r} appears twice")
            return None
        seen.add(token)
    return values


def _range(raw: dict, key: Key, name: str) -> tuple[list | None, list[str]]:
    """The values of a range ``{ start, stop, count, scale }`` for ``key`` (``name`` in messages),
    or None and each problem with it."""
    from ..limits import STUDY_POINTS

    why: list[str] = []
    unknown = [k for k in raw if k not in RANGE_KEYS]
    for other in unknown:
        why.append(f"a range has no key {other!r}{_did_you_mean(other, RANGE_KEYS)}")
    missing = [k for k in ("start", "stop", "count") if k not in raw]
    if missing:
        why.append(f"a range needs start, stop and count; missing {', '.join(missing)}")
    if unknown or missing:
        return None, why
    start, stop, count, scale = raw["start"], raw["stop"], raw["count"], raw.get("scale", "linear")
    if any(isinstance(v, bool) or not isinstance(v, (int, float)) for v in (start, stop)):
        why.append(f"range start and stop must be numbers, got {_describe(start)} and {_describe(stop)}")
        return None, why
    if isinstance(count, bool) or not isinstance(count, int) or count < 1:
        why.append(f"range count must be an integer >= 1, got {_describe(count)}")
        return None, why
    if count > STUDY_POINTS:
        why.append(f"range count {count:,} is more than the {STUDY_POINTS:,} points a study may have")
        return None, why
    if scale not in ("linear", "log"):
        why.append(f"range scale must be 'linear' or 'log', got {_describe(scale)}")
        return None, why
    if key.kind not in (NUMBER, INTEGER, DISTRIBUTION):
        why.append(f"a range gives numbers, but {name} must be {key.kind}")
        return None, why
    if scale == "log" and not (start > 0 and stop > 0):
        why.append(f"a log range needs start > 0 and stop > 0, got start={start}, stop={stop}")
        return None, why
    values: list[Any]
    if count == 1:
        values = [float(start)]
    elif scale == "log":
        values = np.geomspace(start, stop, count).tolist()
    else:
        values = np.linspace(start, stop, count).tolist()
    if key.kind == INTEGER:
        rounded = [round(v) for v in values]
        if any(abs(r - v) > 1e-9 * max(1.0, abs(v)) for r, v in zip(rounded, values, strict=False)):
            why.append(f"range gives non-integer values {values} for an integer key")
            return None, why
        values = rounded
    return values, why


def _fill_defaults(resolved: dict) -> dict:
    for section, spec in SCHEMA.items():
        table = resolved.setdefault(section, {})
        for name, key in spec.items():
            if key.kind != TABLE and name not in table and key.default is not None:
                table[name] = key.default
    system = resolved["system"]
    for name in _MODEL_SYSTEM_KEYS:
        if (
            name not in MODEL_KEYS.get(system["model"], (name,))
            and system.get(name) == SCHEMA["system"][name].default
        ):
            system.pop(name)
    packet = resolved["packet"]
    arrays = [(system.setdefault(name, []), ("system", name), kinds) for name, kinds in ARRAYS.items()]
    if packet.get("kind") == "ground-state":
        arrays.append((packet.get("trap", []), ("packet", "trap"), POTENTIAL_KINDS))
    for name, key in PACKET_KINDS.get(packet.get("kind", PACKET_KIND), {}).items():
        if name not in packet and key.default is not None:
            packet[name] = key.default
    for entries, path, kinds in arrays:
        for _, entry, keys in nested_entries(entries, path, kinds):
            for field_name, key in keys.items():
                if field_name not in entry and key.default is not None:
                    entry[field_name] = key.default
    return resolved


def _required(resolved: dict, problems: list[tuple[tuple[str, ...], str]]) -> None:
    run = resolved.get("run", {})
    for section, spec in SCHEMA.items():
        for name, key in spec.items():
            if key.required and name not in resolved.get(section, {}):
                if (section, name) == ("run", "realizations") and "target_stderr" in run:
                    problems.append(
                        (
                            ("run", "target_stderr"),
                            "stops a point once the transmission's standard error is below it, up to "
                            "run.realizations, which is missing: add a cap, e.g. realizations = 4096",
                        )
                    )
                    continue
                problems.append(((section, name), f"is required ({key.kind})"))
    packet = resolved.get("packet", {})
    for name, key in PACKET_KINDS.get(packet.get("kind", PACKET_KIND), {}).items():
        if key.required and name not in packet:
            problems.append((("packet", name), f"is required ({key.kind})"))
    for index, member in enumerate(packet.get("members", [])):
        for name, key in _GAUSSIAN_KEYS.items():
            if key.required and name not in member:
                problems.append((("packet", "members", str(index), name), f"is required ({key.kind})"))
    arrays = [(resolved["system"].get(name, []), ("system", name), kinds) for name, kinds in ARRAYS.items()]
    if packet.get("kind") == "ground-state":
        arrays.append((packet.get("trap", []), ("packet", "trap"), POTENTIAL_KINDS))
    for entries, path, kinds in arrays:
        for where, entry, keys in nested_entries(entries, path, kinds):
            for field_name, key in keys.items():
                if key.required and field_name not in entry:
                    problems.append(((*where, field_name), f"is required ({key.kind})"))
    absorber = resolved["system"].get("absorber")
    if absorber is not None and "width" not in absorber:
        problems.append((("system", "absorber", "width"), f"is required ({NUMBER})"))
    system = resolved["system"]
    model = system.get("model", "continuum")
    for other, names in MODEL_KEYS.items():
        for name in names:
            if other != model and name not in MODEL_KEYS[model] and name in system:
                problems.append(
                    (
                        ("system", name),
                        f"applies to the {other} model, but model is {model!r} "
                        f"(it takes {', '.join(MODEL_KEYS[model])})",
                    )
                )
