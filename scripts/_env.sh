# Shared set-up of scripts/demo and scripts/test (sourced, not run).
#
#   source scripts/_env.sh
#   mottle_setup EXTRAS [--editable]   # checks, environment, pip install ".[EXTRAS]"
#   ... "$MOTTLE_PYTHON" -m ... / "$MOTTLE_BIN/mottle" ...
#
# What it does, in order, before anything is downloaded or built:
#   1. the interpreter: the active virtual environment's (VIRTUAL_ENV) or conda
#      environment's (CONDA_PREFIX) python, else python3 (or python) from PATH;
#   2. Python >= 3.10, Rust >= MOTTLE_MIN_RUST (cargo and rustc) and a C linker (cc),
#      each missing piece named in one line with what to install;
#   3. with no environment active: .venv/ in the checkout, created with
#      `python3 -m venv` (PEP 668 systems refuse pip into the system Python) and
#      reused while it works;
#   4. pip install into that environment.
# mottle_hint prints the one line that says how to use .venv afterwards.

# The newest rust-version among the locked dependencies (rand_core 0.10: edition 2024).
MOTTLE_MIN_RUST=1.85
MOTTLE_MIN_PYTHON=3.10
MOTTLE_ROOT=$(cd "${BASH_SOURCE[0]%/*}/.." && pwd)
MOTTLE_VENV=""

mottle_fail() {
    printf 'mottle set-up: %s\n' "$*" >&2
    exit 1
}

# "A.B" >= "C.D"? (numeric, major then minor)
_mottle_at_least() {
    local have=$1 need=$2
    local have_major=${have%%.*} need_major=${need%%.*}
    local have_minor=${have#*.} need_minor=${need#*.}
    have_minor=${have_minor%%.*}
    need_minor=${need_minor%%.*}
    ((have_major > need_major || (have_major == need_major && have_minor >= need_minor)))
}

# Interpreter to install into: MOTTLE_PYTHON; MOTTLE_VENV is set when it is .venv/.
_mottle_python() {
    if [[ -n "${VIRTUAL_ENV:-}" ]]; then
        [[ -x "$VIRTUAL_ENV/bin/python" ]] ||
            mottle_fail "VIRTUAL_ENV=$VIRTUAL_ENV has no bin/python: deactivate it or recreate it"
        MOTTLE_PYTHON="$VIRTUAL_ENV/bin/python"
        return
    fi
    if [[ -n "${CONDA_PREFIX:-}" ]]; then
        [[ -x "$CONDA_PREFIX/bin/python" ]] ||
            mottle_fail "the active conda environment $CONDA_PREFIX has no python: conda install 'python>=$MOTTLE_MIN_PYTHON' (or conda deactivate)"
        MOTTLE_PYTHON="$CONDA_PREFIX/bin/python"
        return
    fi
    local candidate found=""
    for candidate in python3 python; do
        if command -v "$candidate" >/dev/null 2>&1; then
            found=$(command -v "$candidate")
            break
        fi
    done
    [[ -n "$found" ]] ||
        mottle_fail "no python3 on PATH: install Python >= $MOTTLE_MIN_PYTHON (Debian/Ubuntu: apt install python3 python3-venv)"
    MOTTLE_PYTHON=$found
}

_mottle_python_version() {
    "$1" -c 'import sys; print("%d.%d" % sys.version_info[:2])' 2>/dev/null
}

_mottle_check_python() {
    local version
    version=$(_mottle_python_version "$MOTTLE_PYTHON") ||
        mottle_fail "$MOTTLE_PYTHON does not run: install Python >= $MOTTLE_MIN_PYTHON"
    _mottle_at_least "$version" "$MOTTLE_MIN_PYTHON" ||
        mottle_fail "mottle needs Python >= $MOTTLE_MIN_PYTHON, $MOTTLE_PYTHON is $version: install a newer one (apt install python3.11, pyenv or conda) and put it first on PATH"
}

_mottle_check_rust() {
    # rustup installs into ~/.cargo/bin; a shell started before the install lacks it on PATH.
    if ! command -v cargo >/dev/null 2>&1 && [[ -x "${CARGO_HOME:-$HOME/.cargo}/bin/cargo" ]]; then
        PATH="${CARGO_HOME:-$HOME/.cargo}/bin:$PATH"
        export PATH
    fi
    local rustup="install it with rustup (https://rustup.rs: curl --proto '=https' --tlsv1.2 -sSf https://sh.rustup.rs | sh), then open a new shell"
    command -v cargo >/dev/null 2>&1 && command -v rustc >/dev/null 2>&1 ||
        mottle_fail "building mottle's core needs a Rust toolchain >= $MOTTLE_MIN_RUST (cargo and rustc), not found on PATH: $rustup"
    local line version
    line=$(rustc --version 2>/dev/null) || mottle_fail "rustc does not run: $rustup"
    [[ $line =~ ([0-9]+\.[0-9]+) ]] || mottle_fail "cannot read the version of rustc from '$line'"
    version=${BASH_REMATCH[1]}
    _mottle_at_least "$version" "$MOTTLE_MIN_RUST" ||
        mottle_fail "building mottle's core needs Rust >= $MOTTLE_MIN_RUST, rustc is $version (distribution packages are often older): rustup update, or $rustup"
    command -v cc >/dev/null 2>&1 || command -v gcc >/dev/null 2>&1 || command -v clang >/dev/null 2>&1 ||
        mottle_fail "Rust needs a C compiler and linker (cc), not found on PATH: apt install build-essential (Fedora: dnf install gcc)"
}

# .venv/ in the checkout when no environment is active: reused while its python runs, is new
# enough and has pip; re-created otherwise (a failed `python3 -m venv` leaves one without pip).
_mottle_venv() {
    [[ -z "${VIRTUAL_ENV:-}" && -z "${CONDA_PREFIX:-}" ]] || return 0
    local venv="$MOTTLE_ROOT/.venv" version
    if [[ -x "$venv/bin/python" ]] && version=$(_mottle_python_version "$venv/bin/python") &&
        _mottle_at_least "$version" "$MOTTLE_MIN_PYTHON" &&
        "$venv/bin/python" -m pip --version >/dev/null 2>&1; then
        MOTTLE_PYTHON="$venv/bin/python"
        MOTTLE_VENV=$venv
        return
    fi
    # Debian and Ubuntu ship venv's pip (ensurepip) in a separate package.
    "$MOTTLE_PYTHON" -c 'import venv, ensurepip' >/dev/null 2>&1 ||
        mottle_fail "$MOTTLE_PYTHON cannot create a virtual environment (no venv/ensurepip module): apt install python3-venv (python3.X-venv for a Python 3.X that is not the default)"
    local clear=()
    [[ -e "$venv" ]] && clear=(--clear) && echo "mottle set-up: re-creating $venv (it has no working python or pip)"
    [[ ${#clear[@]} -gt 0 ]] || echo "mottle set-up: creating a virtual environment in $venv"
    "$MOTTLE_PYTHON" -m venv ${clear[@]+"${clear[@]}"} "$venv" ||
        mottle_fail "$MOTTLE_PYTHON -m venv $venv failed (see above): apt install python3-venv on Debian/Ubuntu"
    MOTTLE_PYTHON="$venv/bin/python"
    MOTTLE_VENV=$venv
}

# mottle_setup EXTRAS [--editable]: everything above, then pip install of the checkout.
mottle_setup() {
    local extras=$1 editable=()
    [[ "${2:-}" == "--editable" ]] && editable=(--editable)
    _mottle_python
    _mottle_check_python
    _mottle_check_rust
    _mottle_venv
    export PIP_DISABLE_PIP_VERSION_CHECK=1
    echo "mottle set-up: pip install ${editable[*]+${editable[*]} }.[$extras] into $("$MOTTLE_PYTHON" -c 'import sys; print(sys.prefix)') (builds the Rust core: a few minutes the first time)"
    "$MOTTLE_PYTHON" -m pip install --quiet ${editable[@]+"${editable[@]}"} "$MOTTLE_ROOT[$extras]"
    MOTTLE_BIN=$("$MOTTLE_PYTHON" -c 'import os, sys; print(os.path.dirname(sys.executable))')
    export MOTTLE_PYTHON MOTTLE_BIN
}

# The one line on how to use the environment afterwards (only for .venv/, which the user did not activate).
mottle_hint() {
    [[ -n "$MOTTLE_VENV" ]] || return 0
    local here=${MOTTLE_VENV#"$PWD"/}
    echo "mottle is installed in $MOTTLE_VENV: run 'source $here/bin/activate' (then 'mottle ...', 'python -m pytest'), or call $here/bin/mottle directly"
}
