#!/usr/bin/env bash
# Fuzz smoke: runs every cargo-fuzz target in fuzz/ for a short bounded run from the committed seeds.
#
#   bash tests/fuzz-smoke.sh
#
# Each target runs a fixed number of inputs with a fixed libFuzzer seed (about 10-15 s each on a shared
# 2-core machine), so a CI run is reproducible rather than a lottery; FUZZ_SECONDS (default 30) caps
# each target's time on a slow machine. FUZZ_SEED changes the seed, FUZZ_SCALE multiplies the runs.
#
# Needs cargo-fuzz and the nightly toolchain; without them it prints one skip line and exits 0. Fails
# when a target crashes, panics, hangs (libFuzzer -timeout) or cannot be built. New inputs found go to a
# temporary corpus, never into fuzz/seeds; a crash input is kept under fuzz/artifacts/<target>/.
# Environment: CARGO_TARGET_DIR (honoured: the fuzz build goes to $CARGO_TARGET_DIR/fuzz),
# FUZZ_SECONDS, FUZZ_SEED, FUZZ_SCALE, FUZZ_TARGETS (space-separated subset).
set -uo pipefail

REPO="$(cd "$(dirname "${BASH_SOURCE[0]}")/.." && pwd)"
FUZZ="$REPO/fuzz"
SECONDS_PER_TARGET="${FUZZ_SECONDS:-30}"
SEED="${FUZZ_SEED:-1}"
SCALE="${FUZZ_SCALE:-1}"

# Inputs per target: roughly 10-15 s each at the rates measured on the build machine.
runs_for() {
    local n
    case "$1" in
        trace_csv) n=600000 ;;
        trace_text) n=400000 ;;
        link_decode) n=200000 ;;
        instrument_profile) n=80000 ;;
        pipeline) n=1000 ;;
        *) n=10000 ;;
    esac
    echo $((n * SCALE))
}

if ! cargo fuzz --version >/dev/null 2>&1; then
    echo "fuzz smoke: skipped (cargo-fuzz not installed: cargo install cargo-fuzz)"
    exit 0
fi
if ! rustup run nightly rustc --version >/dev/null 2>&1; then
    echo "fuzz smoke: skipped (no nightly toolchain: rustup toolchain install nightly)"
    exit 0
fi

export CARGO_TARGET_DIR="${CARGO_TARGET_DIR:-$FUZZ/target}/fuzz"
cd "$FUZZ" || exit 1
targets="${FUZZ_TARGETS:-$(cargo +nightly fuzz list)}"
# -a: debug assertions and overflow checks on, as in `cargo test`.
build_log="${TMPDIR:-/tmp}/glowcheck-fuzz-build.log"
if [ -z "${FUZZ_TARGETS:-}" ]; then
    build() { cargo +nightly fuzz build -a; }
else
    build() { for t in $targets; do cargo +nightly fuzz build -a "$t" || return 1; done; }
fi
if ! build >"$build_log" 2>&1; then
    tail -n 40 "$build_log" >&2
    echo "fuzz smoke: build failed" >&2
    exit 1
fi

work="$(mktemp -d "${TMPDIR:-/tmp}/glowcheck-fuzz.XXXXXX")"
failed=0
for t in $targets; do
    mkdir -p "$work/$t" "$FUZZ/artifacts/$t"
    log="$work/$t.log"
    # First corpus folder is written to (temporary), the seeds are only read.
    if cargo +nightly fuzz run -a "$t" "$work/$t" "$FUZZ/seeds/$t" -- \
        -runs="$(runs_for "$t")" -seed="$SEED" -max_total_time="$SECONDS_PER_TARGET" -timeout=10 -rss_limit_mb=2048 -print_final_stats=1 \
        -artifact_prefix="$FUZZ/artifacts/$t/" >"$log" 2>&1; then
        runs="$(sed -n 's/^stat::number_of_executed_units: *//p' "$log" | tail -n 1)"
        echo "fuzz smoke: $t ok, ${runs:-?} executions (seed $SEED)"
    else
        failed=$((failed + 1))
        echo "fuzz smoke: $t FAILED (crash input under fuzz/artifacts/$t/); last lines:" >&2
        tail -n 30 "$log" >&2
    fi
done
rm -rf "$work"
[ "$failed" -eq 0 ]
