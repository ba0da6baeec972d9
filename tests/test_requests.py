"""The typed boundary between Python and the Rust core: requests and exception classes."""

import ast
import pickle
from pathlib import Path

import numpy as np
import pytest

import mottle as mo
from mottle import _core, _requests
from mottle.specs import kinds

LINE = {"points": 64, "dx": 1.0, "start": 0.0}
BASE = np.zeros(64)


def realize(term):
    return _core.realize(LINE, [term], BASE, 0, 0)


def test_a_misspelt_field_is_named_with_the_right_one():
    with pytest.raises(mo.InvalidTypeError) as caught:
        realize({"kind": "box", "widht": 1.0, "start": 0.0, "stop": 10.0})
    message = str(caught.value)
    assert 'disorder term "box"' in message
    assert '"widht"' in message
    assert 'did you mean "width"' in message


def test_a_missing_field_is_named():
    with pytest.raises(
        mo.InvalidTypeError, match='disorder term "speckle" lacks the field "correlation_length"'
    ):
        realize({"kind": "speckle", "strength": 1.0, "sign": 1, "start": 0.0, "stop": 10.0})


def test_a_mistyped_field_is_named():
    with pytest.raises(mo.InvalidTypeError, match='disorder term "box" field "width"'):
        realize({"kind": "box", "width": "wide", "start": 0.0, "stop": 10.0})


def test_an_unknown_kind_lists_the_kinds():
    with pytest.raises(mo.InvalidTypeError) as caught:
        realize({"kind": "boxx", "width": 1.0, "start": 0.0, "stop": 10.0})
    message = str(caught.value)
    assert '"boxx" is unknown' in message and 'did you mean "box"' in message
    for kind in kinds.kinds("disorder"):
        assert kind in message


def test_a_nested_request_names_its_field():
    system = mo.System(mo.Grid(64, 64.0), model=mo.Lattice())
    setup = _requests.setup(system, 0.1, "strang")
    setup["model"] = {"kind": "lattice", "hbar": 1.0, "hoping": 1.0}  # type: ignore[typeddict-unknown-key]
    run = _requests.run(1, [1], None, None, "double")
    psi = np.ones(64, dtype=complex) / 8.0
    with pytest.raises(mo.InvalidTypeError, match='model "lattice" has no field "hoping"'):
        _core.propagate_one(setup, run, system.absorption(), BASE, psi)


def test_a_request_that_is_not_a_dict_says_what_it_needs():
    with pytest.raises(
        mo.InvalidTypeError, match="grid line must be a dict with the fields points, dx, start"
    ):
        _core.realize([64, 1.0, 0.0], [], BASE, 0, 0)


def test_the_core_raises_mottles_own_classes():
    assert mo.InvalidParameterError is _core.InvalidParameterError
    assert mo.InvalidTypeError is _core.InvalidTypeError
    assert mo.MottleError is _core.MottleError
    assert issubclass(mo.InvalidParameterError, ValueError)
    assert issubclass(mo.InvalidParameterError, mo.MottleError)
    assert issubclass(mo.InvalidTypeError, TypeError)
    assert issubclass(mo.InvalidTypeError, mo.MottleError)
    assert mo.InvalidParameterError.__module__ == "mottle.errors"
    # A value the core refuses, past Python's checks: the core's own message, mottle's class.
    with pytest.raises(mo.InvalidParameterError, match="holds no grid point"):
        realize({"kind": "box", "width": 1.0, "start": 10.2, "stop": 10.7})


def test_errors_survive_pickling():
    # Cluster workers send exceptions back pickled.
    error = pickle.loads(pickle.dumps(mo.InvalidParameterError("bad value")))
    assert type(error) is mo.InvalidParameterError and str(error) == "bad value"


def _stub_requests():
    """The kind-tagged TypedDicts of _core.pyi: {kind: set of fields}, for the disorder terms' union."""
    tree = ast.parse(Path(_core.__file__).with_name("_core.pyi").read_text())
    classes = {node.name: node for node in tree.body if isinstance(node, ast.ClassDef)}
    union = next(
        node.value
        for node in tree.body
        if isinstance(node, ast.Assign) and any(getattr(t, "id", "") == "_Term" for t in node.targets)
    )
    names = [n.id for n in ast.walk(union) if isinstance(n, ast.Name)]
    out = {}
    for name in names:
        fields = {}
        for item in classes[name].body:
            if isinstance(item, ast.AnnAssign):
                fields[item.target.id] = ast.unparse(item.annotation)
        kind = fields.pop("kind")
        out[ast.literal_eval(kind.removeprefix("Literal[").removesuffix("]"))] = set(fields)
    return out


def test_the_stub_describes_every_registered_disorder_kind():
    declared = {
        kind: {f.attribute for f in kinds.spec_fields(cls)} for kind, cls in kinds.kinds("disorder").items()
    }
    assert _stub_requests() == declared


def test_every_kind_is_registered_once_with_its_family():
    for family in kinds.FAMILIES:
        for kind, cls in kinds.kinds(family).items():
            assert cls.kind == kind and cls.family == family
    with pytest.raises(TypeError, match="declared twice"):

        class Twice(mo.BoxDisorder):
            kind = "white-noise"
