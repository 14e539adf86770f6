#!/usr/bin/env bash
# Board checks for glowcheck: builds the QEMU report firmware for each Cortex-M core and its host twin,
# runs the firmware in QEMU and diffs its output with the host's byte for byte (and with the committed
# golden report), proves at link time that lib's public API has no surviving panic path, checks that
# the thumbv6m images contain no soft-float routines, builds the RP2040 firmware (no panic path of lib
# or of the board's own code in it), and prints image sizes.
#
# Usage: bash boards/check.sh            run every check; non-zero exit on any failure
#        bash boards/check.sh --bless    also overwrite boards/expected/ (host report, pipeline digest,
#                                        size baseline) -- only after a deliberate change of lib's results
# Env:   CARGO_TARGET_DIR                build folder (default: boards/target)
#        GLOWCHECK_BOARD_TARGETS         thumb targets to run (default: all three)
#        GLOWCHECK_QEMU_TIMEOUT_S        per-run QEMU timeout in seconds (default: 120)
#        GLOWSIM                         a glowsim binary of the same lib: cross-check the pipeline digest
set -euo pipefail

here="$(cd "$(dirname "${BASH_SOURCE[0]}")" && pwd)"
cd "$here"
bless=0
for arg in "$@"; do
    case "$arg" in
        --bless) bless=1 ;;
        *) echo "check.sh: unknown argument: $arg" >&2; exit 2 ;;
    esac
done

export CARGO_TARGET_DIR="${CARGO_TARGET_DIR:-$here/target}"
targets="${GLOWCHECK_BOARD_TARGETS:-thumbv6m-none-eabi thumbv7m-none-eabi thumbv7em-none-eabihf}"
qemu_timeout="${GLOWCHECK_QEMU_TIMEOUT_S:-120}"
out="$CARGO_TARGET_DIR/glowcheck-check"
mkdir -p "$out"
failures=0

stage() { printf '\n== boards: %s\n' "$*"; }
fail() { echo "FAIL: $*" >&2; failures=$((failures + 1)); }
ok() { echo "ok: $*"; }

machine_for() {
    case "$1" in
        thumbv6m-none-eabi) echo microbit ;;
        thumbv7m-none-eabi) echo mps2-an385 ;;
        thumbv7em-none-eabihf) echo mps2-an386 ;;
        *) echo "check.sh: no QEMU machine for $1" >&2; return 1 ;;
    esac
}

# ---------------------------------------------------------------------------------------------------
stage "tools"
need_targets=""
installed="$(rustup target list --installed 2>/dev/null || true)"
for t in thumbv6m-none-eabi $targets; do
    grep -qx "$t" <<<"$installed" || need_targets="$need_targets $t"
done
if [ -n "$need_targets" ]; then
    # shellcheck disable=SC2086
    rustup target add $need_targets || { sleep 5; rustup target add $need_targets; }
fi
sysroot="$(rustc --print sysroot)"
host="$(rustc -vV | sed -n 's/^host: //p')"
bin="$sysroot/lib/rustlib/$host/bin"
if [ ! -x "$bin/llvm-nm" ]; then
    rustup component add llvm-tools || { sleep 5; rustup component add llvm-tools; }
fi
nm="$bin/llvm-nm"
size="$bin/llvm-size"
objdump="$bin/llvm-objdump"
if ! command -v qemu-system-arm >/dev/null 2>&1; then
    if command -v apt-get >/dev/null 2>&1 && [ "$(id -u)" = 0 ]; then
        apt-get update -qq && DEBIAN_FRONTEND=noninteractive apt-get install -y -qq qemu-system-arm >/dev/null
    else
        echo "check.sh: qemu-system-arm is missing; install it (Debian: apt-get install qemu-system-arm)" >&2
        exit 1
    fi
fi
ok "$(rustc --version); $(qemu-system-arm --version | head -n 1)"

# ---------------------------------------------------------------------------------------------------
stage "fmt and clippy"
if cargo fmt --version >/dev/null 2>&1; then
    cargo fmt --all --check && ok "cargo fmt" || fail "cargo fmt --all --check (run cargo fmt --all in boards/)"
fi
if cargo clippy --version >/dev/null 2>&1; then
    cargo clippy -q -p glowcheck-report -p glowcheck-host-twin -p glowcheck-pipeline-report \
        -p glowcheck-pipeline-twin -p glowcheck-float-baseline -p glowcheck-link --all-targets -- -D warnings \
        && ok "clippy host crates" || fail "clippy on report/host-twin/pipeline-report/pipeline-twin/float-baseline/link"
    cargo clippy -q -p glowcheck-qemu -p glowcheck-nopanic -p glowcheck-pipeline --target thumbv6m-none-eabi -- -D warnings \
        && ok "clippy thumb crates" || fail "clippy on qemu/nopanic/pipeline"
    cargo clippy -q -p glowcheck-pipeline --features measure --target thumbv6m-none-eabi -- -D warnings \
        && cargo clippy -q -p glowcheck-pipeline --features profile --target thumbv6m-none-eabi -- -D warnings \
        && ok "clippy pipeline measure/profile builds" || fail "clippy on glowcheck-pipeline --features measure/profile"
    cargo clippy -q -p glowcheck-rp2040 --target thumbv6m-none-eabi -- -D warnings \
        && ok "clippy rp2040 firmware" || fail "clippy on glowcheck-rp2040"
fi

# ---------------------------------------------------------------------------------------------------
stage "unit tests of the shared report code"
cargo test -q -p glowcheck-report -p glowcheck-pipeline-report -p glowcheck-float-baseline -p glowcheck-link \
    || fail "cargo test -p glowcheck-report -p glowcheck-pipeline-report -p glowcheck-float-baseline -p glowcheck-link"

# ---------------------------------------------------------------------------------------------------
stage "build"
cargo build -q --release -p glowcheck-host-twin -p glowcheck-pipeline-twin || { echo "FAIL: host twin build" >&2; exit 1; }
for t in $targets; do
    cargo build -q --release -p glowcheck-qemu --target "$t" || fail "glowcheck-qemu build for $t"
    # The pipeline image is kept under its own name: measure.sh rebuilds the same path with features.
    if cargo build -q --release -p glowcheck-pipeline --target "$t"; then
        cp "$CARGO_TARGET_DIR/$t/release/glowcheck-pipeline" "$out/glowcheck-pipeline-$t.elf"
    else
        fail "glowcheck-pipeline build for $t"
    fi
done

# ---------------------------------------------------------------------------------------------------
stage "host twin vs QEMU, byte for byte"
twin_rc=0
"$CARGO_TARGET_DIR/release/glowcheck-host-twin" >"$out/host.txt" || twin_rc=$?
[ "$twin_rc" = 0 ] && ok "host twin: $(wc -l <"$out/host.txt") lines, $(tail -n 1 "$out/host.txt")" \
    || fail "host twin exited $twin_rc (unexpected results: grep UNEXPECTED $out/host.txt)"
for t in $targets; do
    elf="$CARGO_TARGET_DIR/$t/release/glowcheck-qemu"
    [ -f "$elf" ] || continue
    machine="$(machine_for "$t")"
    rc=0
    timeout "$qemu_timeout" qemu-system-arm -M "$machine" -nographic -monitor none -serial null \
        -semihosting-config enable=on,target=native -kernel "$elf" </dev/null >"$out/$t.txt" 2>"$out/$t.err" || rc=$?
    if [ "$rc" != 0 ]; then
        fail "QEMU $machine ($t) exited $rc (124 = timeout); see $out/$t.txt and $out/$t.err"
    fi
    if cmp -s "$out/host.txt" "$out/$t.txt"; then
        ok "QEMU $machine ($t) output identical to host ($(wc -c <"$out/$t.txt") bytes)"
    else
        fail "QEMU $machine ($t) output differs from host:"
        diff "$out/host.txt" "$out/$t.txt" | head -n 20 >&2 || true
    fi
done

# ---------------------------------------------------------------------------------------------------
stage "golden report"
golden="$here/expected/report.txt"
if [ "$bless" = 1 ]; then
    cp "$out/host.txt" "$golden"
    ok "blessed $golden"
elif [ ! -f "$golden" ]; then
    fail "no golden report; create it with: bash boards/check.sh --bless"
elif cmp -s "$golden" "$out/host.txt"; then
    ok "host report equals $golden"
else
    fail "host report differs from boards/expected/report.txt; if the predictor's numbers changed on purpose, run: bash boards/check.sh --bless"
    diff "$golden" "$out/host.txt" | head -n 20 >&2 || true
fi

# ---------------------------------------------------------------------------------------------------
stage "whole pipeline: host twin vs QEMU, byte for byte, and the golden digest"
# Checker::new + Checker::check on the three embedded 2048-px frames. All three cores run on the mps2
# machines (the M0 code on mps2-an385, whose M3 executes thumbv6m unchanged): a 2048-px check needs
# more RAM than the microbit's 16 KiB.
pipeline_machine() { [ "$1" = thumbv7em-none-eabihf ] && echo mps2-an386 || echo mps2-an385; }
twin_rc=0
"$CARGO_TARGET_DIR/release/glowcheck-pipeline-twin" >"$out/pipeline-host.txt" || twin_rc=$?
[ "$twin_rc" = 0 ] && ok "pipeline twin: $(grep -c '^case ' "$out/pipeline-host.txt") cases, $(tail -n 1 "$out/pipeline-host.txt")" \
    || fail "pipeline twin exited $twin_rc; see $out/pipeline-host.txt"
for t in $targets; do
    elf="$out/glowcheck-pipeline-$t.elf"
    [ -f "$elf" ] || continue
    machine="$(pipeline_machine "$t")"
    rc=0
    timeout "$qemu_timeout" qemu-system-arm -M "$machine" -nographic -monitor none -serial null \
        -semihosting-config enable=on,target=native -kernel "$elf" </dev/null >"$out/pipeline-$t.txt" 2>"$out/pipeline-$t.err" || rc=$?
    [ "$rc" = 0 ] || fail "pipeline on QEMU $machine ($t) exited $rc; see $out/pipeline-$t.txt and .err"
    if cmp -s "$out/pipeline-host.txt" "$out/pipeline-$t.txt"; then
        ok "pipeline on QEMU $machine ($t) identical to host ($(wc -c <"$out/pipeline-$t.txt") bytes)"
    else
        fail "pipeline on QEMU $machine ($t) differs from host:"
        diff "$out/pipeline-host.txt" "$out/pipeline-$t.txt" | head -n 20 >&2 || true
    fi
done
pgolden="$here/expected/pipeline.txt"
if [ "$bless" = 1 ]; then
    cp "$out/pipeline-host.txt" "$pgolden"
    ok "blessed $pgolden"
elif [ ! -f "$pgolden" ]; then
    fail "no golden pipeline digest; create it with: bash boards/check.sh --bless"
elif cmp -s "$pgolden" "$out/pipeline-host.txt"; then
    ok "pipeline digest equals $pgolden"
else
    fail "pipeline digest differs from boards/expected/pipeline.txt; if lib's results changed on purpose, run: bash boards/check.sh --bless"
    diff "$pgolden" "$out/pipeline-host.txt" | head -n 20 >&2 || true
fi

# With GLOWSIM=path/to/glowsim (built from the same lib), the digest is also checked against host-sim's
# `glowsim check --json` on the same frames: verdict, reason codes and every matched line.
if [ -n "${GLOWSIM:-}" ]; then
    if bash "$here/pipeline-report/compare-glowsim.sh" "$out/pipeline-host.txt" "$GLOWSIM" >"$out/pipeline-glowsim.txt" 2>&1; then
        ok "pipeline digest agrees with glowsim check ($GLOWSIM)"
    else
        fail "pipeline digest differs from glowsim check:"
        cat "$out/pipeline-glowsim.txt" >&2
    fi
fi

# ---------------------------------------------------------------------------------------------------
# Calls into core's panic functions in an image, one line per source line (else the last own line
# before it) with a count.
panic_sites() { # elf
    "$objdump" -d -l --demangle --no-show-raw-insn "$1" | awk '
        /^[0-9a-f]+ <.*>:$/ { fn = $0; next }
        /^; \/.*:[0-9]+/ { loc = $2; if (loc !~ /\/rustlib\//) own = loc; next }
        fn !~ /<core::/ && /\tb[a-z.]*\t0x[0-9a-f]+ <core::(panicking|option::unwrap_failed|option::expect_failed|result::unwrap_failed|slice::index::|str::slice_error_fail)/ {
            where = loc
            if (loc ~ /\/rustlib\//) { c = loc; sub(/.*\/library\//, "", c); where = own " (in core: " c ")" }
            n[where]++ }
        END { for (l in n) printf "    %s (%d)\n", l, n[l] }' | sort
}

stage "no-panic link proof (thumbv6m, release)"
np_elf="$CARGO_TARGET_DIR/thumbv6m-none-eabi/release/glowcheck-nopanic"
api_elf="$out/glowcheck-nopanic.elf"   # every public lib entry point; the proof image when it links
rm -f "$api_elf"
if cargo build -q --release -p glowcheck-nopanic --target thumbv6m-none-eabi 2>"$out/nopanic.err"; then
    cp "$np_elf" "$api_elf"
    ok "glowcheck-nopanic links: no panic path survives in lib's public API"
else
    fail "glowcheck-nopanic does not link: a panic path survived (or another build error):"
    grep -E "undefined symbol|referenced by|^error(\[|:)" "$out/nopanic.err" | head -n 20 >&2 || cat "$out/nopanic.err" >&2
    # Name the lib modules that hold a panic path (one build each), then link a variant whose panic
    # handler exists and list the source lines next to the calls into core's panic functions.
    for m in acquire predict fixed condition find calibrate judge check; do
        if cargo build -q --release -p glowcheck-nopanic --target thumbv6m-none-eabi \
            --no-default-features --features "$m" >"$out/nopanic-$m.err" 2>&1; then
            echo "  lib::$m: no panic path" >&2
        elif grep -q "undefined symbol: glowcheck_nopanic_proof_failed" "$out/nopanic-$m.err"; then
            echo "  lib::$m: PANIC PATH(S)" >&2
        else
            echo "  lib::$m: build error, see $out/nopanic-$m.err" >&2
        fi
    done
    if cargo build -q --release -p glowcheck-nopanic --target thumbv6m-none-eabi --features locate 2>/dev/null; then
        cp "$np_elf" "$api_elf"
        echo "  panic call sites (source line, else the last own line before it; count):" >&2
        panic_sites "$api_elf" >&2
    fi
fi

# The same calls, run: stack painted at reset and scanned at the end. The M3 of mps2-an385 runs the
# thumbv6m code unchanged and gives it 64 KiB of RAM, so a deep stack is measured rather than faulting.
stack_bytes=""
if cargo build -q --release -p glowcheck-nopanic --target thumbv6m-none-eabi --features stack-report 2>"$out/stack.err"; then
    rc=0
    timeout "$qemu_timeout" qemu-system-arm -M mps2-an385 -nographic -monitor none -serial null \
        -semihosting-config enable=on,target=native -kernel "$np_elf" </dev/null >"$out/stack.txt" 2>&1 || rc=$?
    stack_bytes="$(sed -n 's/^stack_bytes \([0-9]*\)$/\1/p' "$out/stack.txt")"
    if [ "$rc" = 0 ] && [ -n "$stack_bytes" ]; then
        ok "every public lib entry point runs on the M0 code (128-px frame); deepest stack $stack_bytes bytes"
    else
        fail "stack-report run exited $rc; see $out/stack.txt"
    fi
else
    fail "glowcheck-nopanic --features stack-report does not build; see $out/stack.err"
fi

# ---------------------------------------------------------------------------------------------------
stage "RP2040 firmware builds for thumbv6m (release)"
# The real board (boards/rp2040): lib's acquisition driver on rp2040-hal pins, timer and ADC, the whole
# check, the link encoder. rp2040-hal and postcard keep a few panic paths, so the link-time proof
# cannot apply; instead no panic call site may lie in lib or in the board's own code.
rp_elf="$out/glowcheck-rp2040.elf"
rm -f "$rp_elf"
if cargo build -q --release -p glowcheck-rp2040 --target thumbv6m-none-eabi 2>"$out/rp2040.err"; then
    cp "$CARGO_TARGET_DIR/thumbv6m-none-eabi/release/glowcheck-rp2040" "$rp_elf"
    ok "glowcheck-rp2040 builds for thumbv6m-none-eabi"
    panic_sites "$rp_elf" >"$out/rp2040-panic-sites.txt"
    own="$(grep -E '/lib/src/|/boards/rp2040/src/' "$out/rp2040-panic-sites.txt" || true)"
    if [ -z "$own" ]; then
        ok "glowcheck-rp2040: no panic call site in lib or the board's code ($(wc -l <"$out/rp2040-panic-sites.txt") in its dependencies, see $out/rp2040-panic-sites.txt)"
    else
        fail "glowcheck-rp2040 has panic call sites in lib or the board's code:"
        echo "$own" >&2
    fi
else
    fail "glowcheck-rp2040 build for thumbv6m-none-eabi; see $out/rp2040.err"
    cat "$out/rp2040.err" >&2
fi

# ---------------------------------------------------------------------------------------------------
stage "soft-float symbols (thumbv6m release images)"
# Soft-float arithmetic, comparison and conversion routines of compiler-builtins/libgcc, and the
# common libm entry points: none may be in a float-free image.
float_re='^(__aeabi_(f|d|[ul]?i2[fd]|[ul]?l2[fd]|h2f|f2h)|__(add|sub|mul|div|neg|pow)[sdhtx]f[23]|__float|__fix|__extend|__trunc|__(eq|ne|lt|le|gt|ge|un|cmp)[sdht]f2|__.*[sdht]f2$|__.*[sdht]f3$|(sqrt|cbrt|pow|exp|exp2|log|log2|log10|sin|cos|tan|atan2?|fabs|floor|ceil|round|fma|fmod|hypot)f?$)'
# The filter itself must tell float routines from the integer ones lib needs.
float_probe="__aeabi_fadd __aeabi_dmul __adddf3 __mulsf3 __divdf3 __fixsfsi __fixunsdfdi __floatsisf __eqsf2 __gedf2 __extendsfdf2 __aeabi_i2f sqrtf"
int_probe="__aeabi_uidiv __aeabi_uldivmod __aeabi_lmul __udivti3 __multi3 __ashldi3 __clzsi2 __aeabi_memcpy __udivmoddi4"
for s in $float_probe; do grep -qE "$float_re" <<<"$s" || fail "soft-float filter misses $s"; done
for s in $int_probe; do grep -qE "$float_re" <<<"$s" && fail "soft-float filter flags integer routine $s"; done
for elf in "$CARGO_TARGET_DIR/thumbv6m-none-eabi/release/glowcheck-qemu" "$api_elf" "$out/glowcheck-pipeline-thumbv6m-none-eabi.elf" "$rp_elf"; do
    [ -f "$elf" ] || { fail "missing image $elf"; continue; }
    syms="$("$nm" "$elf" | awk '{print $NF}' | sort -u)"
    bad="$(grep -E "$float_re" <<<"$syms" || true)"
    if [ -z "$bad" ]; then
        ok "$(basename "$elf"): no soft-float symbols ($(wc -l <<<"$syms") symbols checked)"
    else
        fail "$(basename "$elf") contains soft-float symbols: $(tr '\n' ' ' <<<"$bad")"
    fi
done
m4f="$CARGO_TARGET_DIR/thumbv7em-none-eabihf/release/glowcheck-qemu"
if [ -f "$m4f" ]; then
    fpu="$("$objdump" -d --no-show-raw-insn "$m4f" | grep -cE '\bv(add|sub|mul|div|cvt[a-z]*|sqrt|fm[as]|fnm[as]|neg|abs|cmpe?|nmul|nml[as]|ml[as])\.f(16|32|64)' || true)"
    [ "$fpu" = 0 ] && ok "glowcheck-qemu (thumbv7em-none-eabihf): no FPU arithmetic instructions" \
        || fail "glowcheck-qemu (thumbv7em-none-eabihf) has $fpu FPU arithmetic instructions"
fi

# ---------------------------------------------------------------------------------------------------
stage "image sizes (bytes)"
# Flash = everything loaded from flash (vector table, code, constants, .data's initial values);
# static RAM = .data + .bss + .uninit. The stack is measured separately (see the no-panic stage).
# glowcheck-nopanic holds every public lib entry point, so it is an upper bound on lib's own flash.
printf '%-24s %-22s %10s %16s\n' image target flash_bytes static_ram_bytes | tee "$out/sizes.txt"
sizes() { # name target elf
    "$size" -A "$3" | awk -v name="$1" -v t="$2" '
        $1 == ".vector_table" || $1 == ".text" || $1 == ".rodata" || $1 == ".data" { flash += $2 }
        $1 == ".data" || $1 == ".bss" || $1 == ".uninit" { ram += $2 }
        END { printf "%-24s %-22s %10d %16d\n", name, t, flash, ram }' | tee -a "$out/sizes.txt"
}
for t in $targets; do
    elf="$CARGO_TARGET_DIR/$t/release/glowcheck-qemu"
    [ -f "$elf" ] && sizes glowcheck-qemu "$t" "$elf"
done
for t in $targets; do
    elf="$out/glowcheck-pipeline-$t.elf"
    [ -f "$elf" ] && sizes glowcheck-pipeline "$t" "$elf"
done
[ -f "$api_elf" ] && sizes glowcheck-nopanic thumbv6m-none-eabi "$api_elf"
[ -f "$rp_elf" ] && sizes glowcheck-rp2040 thumbv6m-none-eabi "$rp_elf"
[ -n "$stack_bytes" ] && echo "glowcheck-nopanic stack_bytes (thumbv6m code, painted and scanned): $stack_bytes" | tee -a "$out/sizes.txt"
# `Buffers::new()` and `Report::new()` are all zero, so a firmware's `static` of either takes RAM in
# .bss and no flash (a non-zero default, e.g. an `Option` whose `None` is a niche value or an enum
# whose default is not its 0, would copy ~45 KiB and ~3 KiB into .data).
pelf="$out/glowcheck-pipeline-thumbv6m-none-eabi.elf"
if [ -f "$pelf" ]; then
    for s in BUFFERS:Buffers REPORT:Report; do
        kind="$("$nm" "$pelf" | awk -v s="${s%%:*}" '$3 ~ ("glowcheck_pipeline.*" s) { print $2 }')"
        case "$kind" in
            b | B) ok "the pipeline firmware's ${s#*:} static sits in .bss (no flash)" ;;
            *) fail "the pipeline firmware's ${s#*:} static is not in .bss (symbol type '$kind'): ${s#*:}::new() is no longer all zero" ;;
        esac
    done
fi

# Instruction counts and stack of the whole pipeline on the M0 code (boards/measure.sh): more than 5 %
# over boards/expected/measure.json fails, any change prints; --bless rewrites the baseline.
if bash "$here/measure.sh" thumbv6m-none-eabi >"$out/measure.json" 2>"$out/measure.err"; then
    cat "$out/measure.json"
    grep -q '"count_source": "plugin"' "$out/measure.json" \
        || echo "  note: instruction counts from SysTick (+- 40), not the counting plugin: $(head -n 1 "$out/measure.err")" >&2
    # Adversarial frames (boards/pipeline-report/src/adversarial.rs): every check's instructions within
    # 2 x the typical frame's in the same mode (the costliest of the embedded h-tube, air-leak and
    # d-lamp frames; scaled by pixels / 2048 above 2048 px). Not blessable.
    if python3 - "$out/measure.json" <<'PY'
import json, sys
d = json.loads(open(sys.argv[1]).readline())
over = [f"{a['frame']} ({a['mode']}): {a['ratio']:.2f} x" for a in d.get("adversarial", []) if a["ratio"] > 2.0]
print(f"  adversarial frames: {len(d.get('adversarial', []))} checks, worst {d.get('adversarial_worst_ratio')} x ({d.get('adversarial_worst')})")
for o in over:
    print("  over 2 x: " + o, file=sys.stderr)
sys.exit(1 if over or not d.get("adversarial") else 0)
PY
    then
        ok "adversarial frames within 2 x the typical frame's instructions"
    else
        fail "an adversarial frame took more than 2 x the typical frame's instructions (see above)"
    fi
    # Issue 6's stack bar: every measured lib call (the stages, and each typical and adversarial
    # check) within a 4 KiB stack on the M0 code. Not blessable.
    if python3 - "$out/measure.json" <<'PY'
import json, sys
d = json.loads(open(sys.argv[1]).readline())
print(f"  deepest stack: {d['stack_bytes']} bytes ({d.get('stack_deepest')})")
sys.exit(0 if 0 < d["stack_bytes"] <= 4096 else 1)
PY
    then
        ok "every measured lib call fits a 4 KiB stack"
    else
        fail "a lib call needs more than 4 KiB of stack (see above)"
    fi
    # The same bar as a worst case over every path, read from the M0 image's call graph and
    # prologues (stack-bound.py): the entry points a small core calls. (`Checker::new` returns the
    # ≈ 4 KiB checker by value; such a firmware keeps a `Checker::blank` and calls `configure`.)
    melf="$CARGO_TARGET_DIR/glowcheck-measure/thumbv6m-none-eabi-measure.elf"
    if python3 "$here/stack-bound.py" "$objdump" "$melf" 4096 "pipeline::Checker::check::" \
        "Checker::configure" "glowcheck::find::find_peaks" "glowcheck::condition::condition_frame" \
        | tee "$out/stack-bound.txt"; then
        ok "worst-case stack of check, configure, find_peaks and condition_frame within 4 KiB (call graph)"
    else
        fail "a worst-case stack bound exceeds 4 KiB or is unknown (see above)"
    fi
    mgolden="$here/expected/measure.json"
    if [ "$bless" = 1 ]; then
        cp "$out/measure.json" "$mgolden"
        ok "blessed $mgolden"
    elif [ -f "$mgolden" ]; then
        if python3 - "$mgolden" "$out/measure.json" <<'PY'
import json, sys
old, new = (json.loads(open(p).readline()) for p in sys.argv[1:3])
flat = lambda d: {**{"instructions." + k: v for k, v in d["instructions"].items()},
                  **{k: d[k] for k in ("float_baseline_instructions", "flash_bytes", "static_ram_bytes", "stack_bytes", "predict_once_instructions")}}
o, n = flat(old), flat(new)
grown = []
for k in o:
    if o[k] is None or n.get(k) is None:
        continue
    if n[k] != o[k]:
        print(f"  {k}: {o[k]} -> {n[k]}", file=sys.stderr)
    # 5 % of the baseline's size (a zero or negative figure cannot make every change a growth).
    if n[k] > o[k] + abs(o[k]) * 0.05:
        grown.append(k)
if grown:
    print("grew more than 5 %: " + " ".join(grown), file=sys.stderr)
sys.exit(1 if grown else 0)
PY
        then
            ok "instruction counts and stack within 5 % of $mgolden"
        else
            fail "instruction counts or stack grew more than 5 % over boards/expected/measure.json (bash boards/check.sh --bless after a deliberate change)"
        fi
    else
        fail "no instruction-count baseline; create it with: bash boards/check.sh --bless"
    fi
else
    fail "boards/measure.sh failed (a build, the QEMU run, or a plugin-vs-SysTick cross-check):"
    cat "$out/measure.err" >&2
fi

# Size baselines: an image that grew more than 5 % over boards/expected/sizes.txt fails (lib changes
# every day, so smaller moves only print); --bless rewrites the baseline.
sgolden="$here/expected/sizes.txt"
if [ "$bless" = 1 ]; then
    grep -v '^image ' "$out/sizes.txt" | grep -v stack_bytes >"$sgolden"
    ok "blessed $sgolden"
elif [ -f "$sgolden" ]; then
    grown="$(awk 'NR == FNR { flash[$1 " " $2] = $3; ram[$1 " " $2] = $4; next }
        ($1 " " $2) in flash {
            k = $1 " " $2
            if ($3 != flash[k] || $4 != ram[k]) printf "  %s: flash %d -> %d, static RAM %d -> %d\n", k, flash[k], $3, ram[k], $4 > "/dev/stderr"
            if ($3 > flash[k] * 1.05 || $4 > ram[k] * 1.05) print k }' "$sgolden" "$out/sizes.txt")"
    [ -z "$grown" ] && ok "image sizes within 5 % of $sgolden" \
        || fail "images grew more than 5 % over boards/expected/sizes.txt: $(tr '\n' ' ' <<<"$grown") (bash boards/check.sh --bless after a deliberate change)"
else
    fail "no size baseline; create it with: bash boards/check.sh --bless"
fi

# ---------------------------------------------------------------------------------------------------
echo
if [ "$failures" = 0 ]; then
    echo "boards: all checks passed"
else
    echo "boards: $failures check(s) failed" >&2
    exit 1
fi
