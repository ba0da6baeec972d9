"""Study files: a TOML description of a sweep of ensemble runs, validated before anything runs.

A study file is data. Its keys are the Python names of the specs (every key,
with its type, default and an example: docs/study-files.md): ``[system]``
(grid, model, ``absorber``, ``[[system.potential]]`` and
``[[system.disorder]]`` entries with a ``kind``), ``[packet]``, ``[run]``
and ``[sweep]``, plus an optional ``[study]`` table (``title``, ``notes``)
that labels reports and does not change results. ``[sweep]`` maps dotted
paths such as ``"system.disorder.0.stop"`` to lists of values or to ranges
``{ start, stop, count }`` (``scale = "log"`` for geometric spacing); the
points are the Cartesian product, the first key varying slowest.

Keys (defaults in brackets): ``[system]`` points, length, center [0], model
["continuum" or "lattice"], hbar [1], mass [1] (continuum), hopping [1]
(lattice), nonlinearity [0], absorber {width, strength}; one potential or
disorder entry per registered spec class (:mod:`mottle.specs.kinds`), its
``kind`` and its fields as keys (tabulated values: a list or a .npy file, read
without pickles); the kinds and their keys are listed at the end.
``[packet]`` center, wavenumber, width. ``[run]`` duration, step,
realizations, seed [0], seeds ["per-point"], order [2], splitting ["strang" or
"blanes-moan" by order; "yoshida" on request], detector [the
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

import hashlib
import itertools
import json
import math
import os
import re
import shutil
import warnings
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ..errors import InvalidParameterError, InvalidTypeError
from .schema import (
    ARRAYS,
    METADATA_SECTIONS,
    StudyError,
    _check_document,
    _fill_defaults,
    _key_at,
    _Problems,
    _required,
    _sweep_values,
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
    grid = _in(("system",), lambda: Grid(system["points"], system["length"], system.get("center", 0.0)))
    model_class = kinds("model")[system.get("model", "continuum")]
    model = _in(("system",), lambda: model_class.from_entry(system, tables))
    makers = {name: kinds(name) for name in ARRAYS}
    parts = {}
    for name in ARRAYS:
        total = None
        for index, entry in enumerate(system.get(name, [])):
            where = ("system", name, str(index))
            maker = makers[name][entry["kind"]]
            term = _in(where, lambda entry=entry, maker=maker: maker.from_entry(entry, tables), entry)
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
    from ..specs.kinds import kinds
    from .schema import PACKET_KIND

    spec = resolved["packet"]
    packet = _in(("packet",), lambda: kinds("packet")[PACKET_KIND].from_entry(spec, {}), spec)
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
        "splitting": run.get("splitting"),
        "detector": detector_of(resolved),
        "snapshots": tuple(run.get("snapshots", ())),
        "precision": run.get("precision", "double"),
    }


def detector_of(resolved: Mapping) -> tuple[float, float] | None:
    """``run.detector`` as a pair (None: :func:`mottle.ensemble` defaults it to the disorder region)."""
    detector = resolved["run"].get("detector")
    return None if detector is None else (float(detector[0]), float(detector[1]))


def _check_run(resolved: Mapping, system) -> None:
    from .. import _checks
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
    detector = default_detector(system, detector_of(resolved))
    _in(("run", "detector"), lambda: detector_bounds(system, detector))
    _in(("run", "order"), lambda: resolve_splitting(run.get("order", 2), run.get("splitting")))
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
        return point_label(self.parameters, names)


def _plain(make):
    try:
        return make()
    except _KeyedError as error:
        raise InvalidParameterError(f"{'.'.join(error.path)}: {error.message}") from None


def format_value(value: object) -> str:
    """A swept value as labels and tables show it (floats to 6 significant digits)."""
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


def _check_store_fits(base: dict, sweep: dict, tables, store_dir: Path, problems) -> None:
    """Refuse, before enumerating the points, a sweep whose store would not fit in ``store_dir``."""
    count = math.prod(len(values) for values in sweep.values())
    first = _fill_defaults(_apply(base, {path: values[0] for path, values in sweep.items()}))
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


def parse_study(
    text: str, source: str = "<study>", root: str | Path = ".", store: str | os.PathLike | None = None
) -> Study:
    """Validate a study given as TOML text (``root`` resolves relative .npy file names).

    A sweep whose store (``store``, by default in ``root``) would not fit on its disk is refused at
    once, before its points are enumerated."""
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
    if sweep:
        _check_store_fits(base, sweep, tables, Path(store).parent if store else Path(root), problems)

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


__all__ = ["Study", "StudyError", "StudyPoint", "load_study", "parse_study", "point_seed"]
