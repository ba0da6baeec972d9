"""The documentation stays in step with the package: every public name has its API entry,
and the documents the repository's files point to are in the repository."""

from __future__ import annotations

import re
import subprocess
from pathlib import Path

import mottle

ROOT = Path(__file__).resolve().parents[1]


def test_every_public_name_is_in_the_api_reference():
    pages = "".join(path.read_text(encoding="utf-8") for path in (ROOT / "docs" / "api").glob("*.md"))
    from mottle.specs import kinds

    directives = set(re.findall(r"^\.\. auto\w+:: mottle\.(\w+)", pages, re.MULTILINE))
    # ``{mottle-kinds} FAMILY`` (docs/conf.py) documents every registered class of a family.
    for family in re.findall(r"^```\{mottle-kinds\} (\w+)", pages, re.MULTILINE):
        directives |= {cls.__name__ for cls in kinds.kinds(family).values()}
    missing = sorted(set(mottle.__all__) - directives)
    assert not missing, f"add these to a page in docs/api/: {missing}"


def test_docs_named_in_the_repository_exist():
    # Every docs page named in a tracked file, and every README marker that docs/ includes.
    tracked = subprocess.run(
        ["git", "ls-files"], cwd=ROOT, capture_output=True, text=True, check=True
    ).stdout.split()
    named = set()
    for name in tracked:
        path = ROOT / name
        if path.suffix in {".py", ".rs", ".md", ".toml", ".sh"} and path.is_file():
            named |= set(re.findall(r"docs/[a-z][\w-]*\.md", path.read_text(encoding="utf-8")))
    assert {"docs/validation.md", "docs/study-files.md"} <= named
    assert [name for name in sorted(named) if not (ROOT / name).is_file()] == []
    readme = (ROOT / "README.md").read_text(encoding="utf-8")
    for page in ("examples", "conventions"):
        text = (ROOT / "docs" / f"{page}.md").read_text(encoding="utf-8")
        for marker in re.findall(r'"(<!-- [^"]+ -->)"', text):
            assert readme.count(marker) == 1, marker


def test_every_test_docs_validation_names_exists():
    # docs/validation.md names each check by file::test; a renamed or removed test must update it.
    text = (ROOT / "docs" / "validation.md").read_text(encoding="utf-8")
    named = re.findall(r"`((?:tests|rust/src)/[\w/]+\.(?:py|rs))((?:::\w+)*)`", text)
    assert len(named) > 40
    for path, names in named:
        source = (ROOT / path).read_text(encoding="utf-8")
        for name in names.split("::")[1:]:
            if name != "tests":
                assert re.search(rf"\bfn {name}\b|\bdef {name}\b", source), f"{path}::{name}"
    # the "::name" shorthand after a full entry refers to the same file
    for path, _first, more in re.findall(r"`(tests/\w+\.py)::(\w+)`, `::(\w+)`", text):
        assert f"def {more}(" in (ROOT / path).read_text(encoding="utf-8"), more


def test_docs_study_files_lists_every_key_of_the_schema():
    # Every key of the fixed tables, and the kinds the page describes with exactly their keys. A
    # new kind needs no edit here (its spec class is the whole of it); the HTML reference lists
    # it from the registry, and a row in docs/study-files.md is welcome.
    from mottle.studies import schema

    text = (ROOT / "docs" / "study-files.md").read_text(encoding="utf-8")
    for section, keys in schema.SCHEMA.items():
        assert f"`[{section}]`" in text, section
        for key in keys:
            assert f"| `{key}` |" in text, f"[{section}] {key}"
    for key in (*schema.ABSORBER_KEYS, *schema.RANGE_KEYS, *schema.SWEEP_GROUPS, *schema.DISTRIBUTIONS):
        assert f"| `{key}` |" in text, key
    for kind in schema.PACKET_KINDS:
        assert f'`"{kind}"`' in text, kind
    for name in schema.ARRAYS:
        heading = f"### `[[system.{name}]]`"
        section = text.split(heading, 1)[1].split("\n## ", 1)[0].split("\n### ", 1)[0]
        documented: dict[str, set[str]] = {}
        kind = None
        for row in re.findall(r"^\|\s*(.*?)\s*\|\s*`(\w+)`\s*\|", section, re.MULTILINE):
            label, key = row
            if label.startswith('`"'):
                kind = label.strip('`"')
                documented[kind] = set()
            if label == "every kind":
                kind = "*"
                documented["*"] = set()
            documented[kind].add(key)
        common = documented.pop("*", set())
        assert documented, name
        for kind, keys in documented.items():
            assert kind in schema.ARRAYS[name], f"{name} kind {kind!r} is not in the schema"
            assert keys | common == set(schema.ARRAYS[name][kind]), f"{name} {kind}"
