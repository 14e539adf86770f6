#!/usr/bin/env bash
# Installs what the tests need (idempotent; quiet unless something fails), then runs every test stage.
#
#   bash tests/run-all.sh
#
# Fresh Debian 12 machine as root, with rustup already installed (https://rustup.rs). Adds the thumb targets
# and rustup components, the Debian packages (qemu-system-arm, python3-venv, a C linker) if missing, and a
# Python venv with pinned reference packages at .venv (reused when complete). Stages keep going after a
# failure; the exit status is non-zero if any stage failed, and the last line reads "N passed, M failed".
#
# Environment: CARGO_TARGET_DIR (honoured), GLOWCHECK_VENV (venv path, default .venv),
# GLOWCHECK_SKIP_SETUP=1 (skip the three set-up stages on a machine already set up).
set -uo pipefail

REPO="$(cd "$(dirname "${BASH_SOURCE[0]}")/.." && pwd)"
cd "$REPO" || exit 1

VENV="${GLOWCHECK_VENV:-$REPO/.venv}"
LOG_DIR="$(mktemp -d "${TMPDIR:-/tmp}/glowcheck-run-all.XXXXXX")"
THUMB_TARGETS=(thumbv6m-none-eabi thumbv7m-none-eabi thumbv7em-none-eabihf)
COMPONENTS=(llvm-tools rust-src clippy rustfmt)

passed=0
failed=0
failed_names=()
start_all=$SECONDS

# stage NAME COMMAND...: runs one stage with a header and a verdict line.
stage() {
    local name="$1"
    shift
    local t0=$SECONDS
    printf '\n######## stage: %s\n' "$name"
    if "$@"; then
        passed=$((passed + 1))
        printf '######## passed: %s (%ds)\n' "$name" $((SECONDS - t0))
    else
        failed=$((failed + 1))
        failed_names+=("$name")
        printf '######## FAILED: %s (%ds)\n' "$name" $((SECONDS - t0))
    fi
}

# quietly LOGNAME COMMAND...: runs a set-up command, shows its output only if it fails.
quietly() {
    local log="$LOG_DIR/$1.log"
    shift
    if "$@" >"$log" 2>&1; then
        return 0
    fi
    echo "command failed: $*" >&2
    tail -n 40 "$log" >&2
    return 1
}

as_root() {
    if [ "$(id -u)" -eq 0 ]; then
        "$@"
    elif command -v sudo >/dev/null 2>&1; then
        sudo "$@"
    else
        echo "need root (or sudo) to run: $*" >&2
        return 1
    fi
}

# ---- set-up stages ---------------------------------------------------------------------------------------

setup_rust() {
    if ! command -v rustup >/dev/null 2>&1 || ! command -v cargo >/dev/null 2>&1; then
        echo "rustup and cargo are needed: install them from https://rustup.rs, then rerun" >&2
        return 1
    fi
    local have_targets have_components missing=()
    have_targets="$(rustup target list --installed)"
    for t in "${THUMB_TARGETS[@]}"; do
        grep -qx "$t" <<<"$have_targets" || missing+=("$t")
    done
    if [ ${#missing[@]} -gt 0 ]; then
        quietly rustup-target rustup target add "${missing[@]}" || return 1
    fi
    have_components="$(rustup component list --installed)"
    missing=()
    for c in "${COMPONENTS[@]}"; do
        # Installed components carry the host triple (clippy-x86_64-unknown-linux-gnu; llvm-tools may show
        # as llvm-tools-preview-…).
        grep -q "^$c\(-preview\)\?-" <<<"$have_components" || missing+=("$c")
    done
    if [ ${#missing[@]} -gt 0 ]; then
        quietly rustup-component rustup component add "${missing[@]}" || return 1
    fi
    echo "rust: $(rustc --version); targets ${THUMB_TARGETS[*]}; components ${COMPONENTS[*]}"
}

setup_debian() {
    local need=()
    command -v qemu-system-arm >/dev/null 2>&1 || need+=(qemu-system-arm)
    command -v cc >/dev/null 2>&1 || need+=(gcc libc6-dev)
    if ! command -v python3 >/dev/null 2>&1; then
        need+=(python3 python3-venv)
    elif ! python3 -c 'import ensurepip, venv' >/dev/null 2>&1; then
        need+=(python3-venv)
    fi
    if [ ${#need[@]} -eq 0 ]; then
        echo "debian packages: nothing missing"
        return 0
    fi
    if ! command -v apt-get >/dev/null 2>&1; then
        echo "missing ${need[*]} and no apt-get here: install them by hand" >&2
        return 1
    fi
    echo "installing ${need[*]}"
    quietly apt-update as_root env DEBIAN_FRONTEND=noninteractive apt-get update -qq || return 1
    quietly apt-install as_root env DEBIAN_FRONTEND=noninteractive \
        apt-get install -y -qq --no-install-recommends "${need[@]}" || return 1
}

REQ="$REPO/tests/python/requirements.txt"
REQ_NODEPS="$REPO/tests/python/requirements-nodeps.txt"
STAMP="$VENV/.glowcheck-requirements"

venv_fingerprint() {
    cat "$REQ" "$REQ_NODEPS" | sha256sum | cut -d' ' -f1
}

setup_venv() {
    local py="$VENV/bin/python" want
    want="$(venv_fingerprint)"
    if [ -f "$STAMP" ] && [ "$(cat "$STAMP")" = "$want" ] && "$py" -c 'import pytest' >/dev/null 2>&1; then
        echo "python venv: $VENV is complete, reused"
        return 0
    fi
    if ! "$py" -c 'import sys' >/dev/null 2>&1; then
        quietly venv-create python3 -m venv --clear "$VENV" || return 1
    fi
    # pip skips what is already installed at the pinned version, so a half-made venv is completed.
    # ref_index has no wheel (pure Python, built from its sdist); everything else comes as wheels.
    quietly pip-install "$py" -m pip install --disable-pip-version-check --prefer-binary -r "$REQ" || return 1
    quietly pip-install-nodeps "$py" -m pip install --disable-pip-version-check --only-binary=:all: \
        --no-deps -r "$REQ_NODEPS" || return 1
    "$py" -c 'import numpy, scipy, periodictable, PyAstronomy, mendeleev, ref_index, sympy, mpmath, pytest' || return 1
    "$py" -c 'import importlib.util as u; assert u.find_spec("arc")' || return 1
    echo "$want" >"$STAMP"
    echo "python venv: $VENV ready ($("$py" --version))"
}

# The fuzz smoke needs cargo-fuzz (from crates.io) and the machine's nightly toolchain; a nightly cannot
# be downloaded here, so without one the smoke script prints a skip line.
fuzz_smoke() {
    if ! cargo fuzz --version >/dev/null 2>&1 && rustup run nightly rustc --version >/dev/null 2>&1; then
        quietly cargo-fuzz-install cargo install --locked cargo-fuzz || return 1
    fi
    bash "$REPO/tests/fuzz-smoke.sh"
}

# ---- test stages -----------------------------------------------------------------------------------------

target_dir() {
    if [ -n "${CARGO_TARGET_DIR:-}" ]; then
        echo "$CARGO_TARGET_DIR"
    else
        cargo metadata --format-version 1 --no-deps 2>/dev/null |
            python3 -c 'import json, sys; print(json.load(sys.stdin)["target_directory"])' 2>/dev/null ||
            echo "$REPO/target"
    fi
}

thumb_build() {
    cargo build -p glowcheck --target thumbv6m-none-eabi --release || return 1
    # The lib is float-free: its object code must not call the soft-float helpers of the Cortex-M0 ABI.
    local rlib nm host bad
    rlib="$(target_dir)/thumbv6m-none-eabi/release/libglowcheck.rlib"
    host="$(rustc -vV | sed -n 's/^host: //p')"
    nm="$(rustc --print sysroot)/lib/rustlib/$host/bin/llvm-nm"
    if [ ! -f "$rlib" ] || [ ! -x "$nm" ]; then
        echo "cannot inspect $rlib (llvm-nm at $nm)" >&2
        return 1
    fi
    # Guard against a vacuous pass: nm must see the lib's code at all.
    if [ "$("$nm" --defined-only "$rlib" 2>/dev/null | grep -c ' [Tt] ')" -eq 0 ]; then
        echo "llvm-nm found no code in $rlib" >&2
        return 1
    fi
    bad="$("$nm" --undefined-only "$rlib" 2>/dev/null |
        grep -E '__aeabi_[fd][a-z0-9]+|__(add|sub|mul|div|neg)[sdt]f3|__(fix|fixuns|float|floatun)[a-z]*[sdt]f|__(eq|ne|lt|le|gt|ge|un|cmp)[sdt]f2|__(extend|trunc)[sdt]f[sdt]f2' |
        sort -u)"
    if [ -n "$bad" ]; then
        echo "soft-float symbols referenced by libglowcheck for thumbv6m-none-eabi:" >&2
        echo "$bad" >&2
        return 1
    fi
    echo "libglowcheck (thumbv6m-none-eabi, release): no soft-float symbols"
}

python_refs() {
    cargo build -p glowcheck-sim --bin glowsim || return 1
    GLOWSIM="$(target_dir)/debug/glowsim" "$VENV/bin/python" -m pytest -q -p no:cacheprovider "$REPO/tests/python"
}

generated_tables() {
    "$VENV/bin/python" "$REPO/lib/gen/tables.py" --check
}

if [ "${GLOWCHECK_SKIP_SETUP:-0}" != 1 ]; then
    stage "setup: rust targets and components" setup_rust
    stage "setup: debian packages" setup_debian
    stage "setup: python venv" setup_venv
fi
stage "fmt --check" cargo fmt --all -- --check
stage "clippy --all-targets -D warnings" cargo clippy --workspace --all-targets -- -D warnings
stage "cargo doc (-D warnings)" env RUSTDOCFLAGS="-D warnings" cargo doc --workspace --no-deps
stage "cargo test --workspace" cargo test --workspace
stage "lib for thumbv6m-none-eabi (release, no soft float)" thumb_build
if [ -f "$REPO/lib/gen/tables.py" ]; then
    stage "generated tables up to date" generated_tables
fi
stage "python reference checks" python_refs
if [ -f "$REPO/boards/check.sh" ]; then
    stage "boards/check.sh" bash "$REPO/boards/check.sh"
fi
if [ -f "$REPO/tests/fuzz-smoke.sh" ]; then
    stage "fuzz smoke (bounded, fixed seeds)" fuzz_smoke
fi

elapsed=$((SECONDS - start_all))
echo
for n in "${failed_names[@]}"; do
    echo "failed stage: $n"
done
echo "total time ${elapsed}s; set-up logs in $LOG_DIR"
echo "$passed passed, $failed failed"
[ "$failed" -eq 0 ]
