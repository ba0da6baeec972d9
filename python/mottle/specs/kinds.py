"""The one registry of spec kinds.

Each spec class of a family (``"potential"``, ``"disorder"``, ``"packet"``,
``"model"``) declares its kind once, as a class attribute (``kind =
"speckle"``), and its fields once, as dataclass fields; subclassing
:class:`Kinded` registers it. Everything else is derived from that
declaration: the study-file schema and its checks
(:mod:`mottle.studies.schema`), the constructors :func:`mottle.load_study`
uses (:meth:`Kinded.from_entry`), the store's canonical form (the schema's
defaults) and the requests for the Rust core (:mod:`mottle._requests`). A new
disorder model is therefore its spec class, its Rust generator and its test.

A field's study-file type comes from its annotation (``float``: a number,
``int``: an integer, ``Potential``: a nested potential entry) unless its
metadata says otherwise (``field(metadata={"type": "values", "key": "values"})``;
``"distribution"``: a number or a draw per realization, written
``{ uniform = [low, high] }`` or ``{ normal = [mean, std] }`` and built by
:func:`distribution`); its default is the dataclass default.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any, ClassVar

FAMILIES = ("potential", "disorder", "packet", "model")
_REGISTRY: dict[str, dict[str, type[Kinded]]] = {family: {} for family in FAMILIES}
_TYPES = {"float": "number", "int": "integer", "Potential": "potential"}
# The laws a "distribution" field may name, with their two parameters (mottle.Uniform, mottle.Normal).
LAWS = {"uniform": ("low", "high"), "normal": ("mean", "std")}


class Kinded:
    """Base of the registered spec classes: a subclass that sets ``kind`` joins its ``family``."""

    family: ClassVar[str]
    kind: ClassVar[str]

    def __init_subclass__(cls, **kwargs: Any) -> None:
        super().__init_subclass__(**kwargs)
        if "kind" not in cls.__dict__:
            return
        known = _REGISTRY[cls.family]
        other = known.get(cls.kind)
        if other is not None and other.__qualname__ != cls.__qualname__:
            raise TypeError(
                f"{cls.family} kind {cls.kind!r} is declared twice: {other.__name__}, {cls.__name__}"
            )
        known[cls.kind] = cls

    @classmethod
    def from_entry(cls, entry: Mapping[str, Any], tables: Mapping[str, Any]) -> Kinded:
        """The spec from a study-file entry (its keys by name; missing ones take their defaults).

        A ``"potential"`` field's nested entry (a table with a ``kind``, or a list of them: their
        sum) is built by :func:`from_entry` of its own kind unless it is a spec already; a
        ``"distribution"`` field's table by :func:`distribution`."""
        arguments = {}
        for field in spec_fields(cls):
            if field.key not in entry:
                continue
            value = entry[field.key]
            if isinstance(value, list) and field.type in ("number", "distribution"):
                value = tuple(value)  # one per axis of a 2D/3D grid
            elif field.type == "potential":
                value = potential(value, tables)
            elif field.type == "distribution":
                value = distribution(value)
            arguments[field.key] = value
        return cls(**arguments)


@dataclass(frozen=True)
class SpecField:
    """One declared field: its attribute, its study-file key and type, and its default."""

    attribute: str
    key: str
    type: str
    required: bool
    default: object


def spec_fields(cls: type) -> tuple[SpecField, ...]:
    """The declared fields of a spec class, in declaration order."""
    out = []
    for field in dataclasses.fields(cls):
        annotation = field.type if isinstance(field.type, str) else getattr(field.type, "__name__", "")
        kind = field.metadata.get("type", _TYPES.get(annotation))
        if kind is None:
            raise TypeError(
                f"{cls.__name__}.{field.name}: declare its study-file type in the field's metadata"
            )
        required = field.default is dataclasses.MISSING and field.default_factory is dataclasses.MISSING
        out.append(
            SpecField(
                attribute=field.name,
                key=field.metadata.get("key", field.name),
                type=kind,
                required=required,
                default=None if required else field.default,
            )
        )
    return tuple(out)


def distribution(value: Any) -> Any:
    """A number as it is, or ``{ uniform = [low, high] }`` / ``{ normal = [mean, std] }`` as
    :class:`~mottle.Uniform` / :class:`~mottle.Normal` (the one parser of drawn values)."""
    if not isinstance(value, Mapping):
        return value
    from .packets import Normal, Uniform

    ((law, pair),) = value.items()
    return {"uniform": Uniform, "normal": Normal}[law](*pair)


def potential(value: Any, tables: Mapping[str, Any]) -> Any:
    """A nested potential entry (a table with a ``kind``, or a list of them, summed) as its spec;
    a spec (or a sum) already built passes through."""
    if isinstance(value, Kinded):
        return value
    if isinstance(value, Mapping):
        return kinds("potential")[value["kind"]].from_entry(value, tables)
    total = None
    for item in value:
        term = potential(item, tables)
        total = term if total is None else total + term
    return total


def kinds(family: str) -> dict[str, type[Kinded]]:
    """The registered classes of a family, by kind, in the order they were declared."""
    _load()
    return dict(_REGISTRY[family])


def values(spec: Kinded) -> dict[str, Any]:
    """A spec's declared fields and their values, by attribute name."""
    return {field.attribute: getattr(spec, field.attribute) for field in spec_fields(type(spec))}


def _load() -> None:
    # The families' modules register their classes on import.
    from . import disorder, models, packets, potentials  # noqa: F401


__all__ = [
    "FAMILIES",
    "LAWS",
    "Kinded",
    "SpecField",
    "distribution",
    "kinds",
    "potential",
    "spec_fields",
    "values",
]
