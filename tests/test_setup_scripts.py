"""scripts/_env.sh, the set-up shared by scripts/demo and scripts/test, on machines that lack something.

Each case runs the real script in a temporary copy of scripts/ with a PATH made of a
temporary folder holding only the commands the case grants (a python3 that is this
interpreter, fake cargo/rustc/cc printing a version), so nothing is downloaded or built:
every case stops at a check, before a virtual environment or pip.
"""

from __future__ import annotations

import shutil
import subprocess
import sys
from pathlib import Path

import pytest

SCRIPT = Path(__file__).resolve().parents[1] / "scripts" / "_env.sh"
BASH = shutil.which("bash")


def fake(folder: Path, name: str, body: str) -> None:
    path = folder / name
    path.write_text(f"#!/bin/sh\n{body}\n")
    path.chmod(0o755)


@pytest.fixture
def machine(tmp_path):
    """A checkout holding scripts/_env.sh, and an empty folder that is the whole PATH."""
    root = tmp_path / "checkout"
    (root / "scripts").mkdir(parents=True)
    shutil.copy(SCRIPT, root / "scripts" / "_env.sh")
    bin_dir = tmp_path / "bin"
    bin_dir.mkdir()
    return root, bin_dir, tmp_path


def setup(root: Path, bin_dir: Path, home: Path, **env: str) -> subprocess.CompletedProcess:
    environment = {"PATH": str(bin_dir), "HOME": str(home), **env}
    return subprocess.run(
        [BASH, "-c", "source scripts/_env.sh && mottle_setup study"],
        cwd=root,
        env=environment,
        capture_output=True,
        text=True,
        timeout=60,
    )


def one_line(result: subprocess.CompletedProcess) -> str:
    assert result.returncode == 1, (result.stdout, result.stderr)
    lines = result.stderr.splitlines()
    assert len(lines) == 1, result.stderr  # one line, not a traceback
    assert lines[0].startswith("mottle set-up: ")
    return lines[0]


def grant_python(bin_dir: Path, name: str = "python3") -> None:
    (bin_dir / name).symlink_to(sys.executable)


def grant_rust(bin_dir: Path, version: str = "1.95.0") -> None:
    fake(bin_dir, "cargo", f"echo cargo {version}")
    fake(bin_dir, "rustc", f"echo 'rustc {version} (0000000 2026-01-01)'")
    fake(bin_dir, "cc", "exit 0")


def test_missing_rust_is_named_with_rustup_before_any_environment_is_made(machine):
    root, bin_dir, home = machine
    grant_python(bin_dir)
    line = one_line(setup(root, bin_dir, home))
    assert "Rust toolchain >= 1.85 (cargo and rustc), not found" in line
    assert "rustup" in line
    assert not (root / ".venv").exists()


def test_python_alone_is_used_when_python3_is_absent(machine):
    # Only `python`: it is found and checked (the set-up then stops at the missing Rust).
    root, bin_dir, home = machine
    grant_python(bin_dir, "python")
    assert "Rust toolchain" in one_line(setup(root, bin_dir, home))


def test_no_python_at_all_is_named(machine):
    root, bin_dir, home = machine
    line = one_line(setup(root, bin_dir, home))
    assert "no python3 on PATH" in line and "apt install python3 python3-venv" in line


def test_an_old_python_is_named_with_its_version(machine):
    root, bin_dir, home = machine
    fake(bin_dir, "python3", "echo 3.8")  # what the version probe prints on Python 3.8
    grant_rust(bin_dir)
    line = one_line(setup(root, bin_dir, home))
    assert "needs Python >= 3.10" in line and "is 3.8" in line


def test_an_old_rust_is_named_with_its_version(machine):
    root, bin_dir, home = machine
    grant_python(bin_dir)
    grant_rust(bin_dir, "1.63.0")
    line = one_line(setup(root, bin_dir, home))
    assert "needs Rust >= 1.85, rustc is 1.63" in line and "rustup" in line


def test_rustup_installed_in_home_but_not_on_path_is_found(machine):
    # A shell opened before rustup ran lacks ~/.cargo/bin on PATH: the set-up adds it.
    root, bin_dir, home = machine
    grant_python(bin_dir)
    cargo_bin = home / ".cargo" / "bin"
    cargo_bin.mkdir(parents=True)
    grant_rust(cargo_bin, "1.63.0")
    assert "rustc is 1.63" in one_line(setup(root, bin_dir, home))


def test_a_missing_linker_is_named(machine):
    root, bin_dir, home = machine
    grant_python(bin_dir)
    grant_rust(bin_dir)
    (bin_dir / "cc").unlink()
    assert "apt install build-essential" in one_line(setup(root, bin_dir, home))


def test_a_python_without_venv_is_named_with_the_debian_package(machine):
    # Debian's python3 without python3-venv has no ensurepip: a module of that name that fails
    # to import, first on the path, plays that interpreter.
    root, bin_dir, home = machine
    grant_python(bin_dir)
    grant_rust(bin_dir)
    shadow = home / "shadow" / "ensurepip"
    shadow.mkdir(parents=True)
    (shadow / "__init__.py").write_text("raise ImportError('ensurepip is not available')\n")
    line = one_line(setup(root, bin_dir, home, PYTHONPATH=str(shadow.parent)))
    assert "cannot create a virtual environment" in line and "apt install python3-venv" in line
    assert not (root / ".venv").exists()


def test_a_stale_active_environment_is_named(machine):
    root, bin_dir, home = machine
    grant_python(bin_dir)
    missing = str(home / "gone")
    assert "has no bin/python" in one_line(setup(root, bin_dir, home, VIRTUAL_ENV=missing))
    line = one_line(setup(root, bin_dir, home, CONDA_PREFIX=missing))
    assert "conda environment" in line and "conda install" in line


def test_the_active_environment_is_used_instead_of_a_new_one(machine):
    # With VIRTUAL_ENV set, its python is the one checked (here an old one), not python3 from PATH.
    root, bin_dir, home = machine
    grant_python(bin_dir)
    grant_rust(bin_dir)
    active = home / "active" / "bin"
    active.mkdir(parents=True)
    fake(active, "python", "echo 3.9")
    line = one_line(setup(root, bin_dir, home, VIRTUAL_ENV=str(active.parent)))
    assert f"{active}/python is 3.9" in line


def test_a_broken_venv_is_recreated_and_a_working_one_reused(machine):
    # The .venv step alone, for real (venv and ensurepip only, nothing downloaded): a .venv left
    # without pip (as a failed `python3 -m venv` on Debian leaves it) is re-created, then reused.
    root, bin_dir, home = machine
    grant_python(bin_dir)
    subprocess.run([sys.executable, "-m", "venv", "--without-pip", str(root / ".venv")], check=True)
    step = 'source scripts/_env.sh && _mottle_python && _mottle_venv && echo "using $MOTTLE_PYTHON"'

    def venv_step():
        environment = {"PATH": str(bin_dir), "HOME": str(home)}
        return subprocess.run(
            [BASH, "-c", step], cwd=root, env=environment, capture_output=True, text=True, timeout=300
        )

    first = venv_step()
    assert first.returncode == 0, first.stderr
    assert "re-creating" in first.stdout and f"using {root}/.venv/bin/python" in first.stdout
    pip = subprocess.run(
        [str(root / ".venv" / "bin" / "python"), "-m", "pip", "--version"], capture_output=True
    )
    assert pip.returncode == 0
    again = venv_step()
    assert again.returncode == 0, again.stderr
    assert again.stdout.strip() == f"using {root}/.venv/bin/python"  # reused: no creation message
