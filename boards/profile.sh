#!/usr/bin/env bash
# Hot spots of the whole pipeline on the Cortex-M0 code: the `profile` build of boards/pipeline samples
# the interrupted PC every 4 000 instructions (SysTick every 100 ticks under QEMU -icount shift=0) with
# the stage it was in, and this script names the innermost lib source line of each sample
# (llvm-addr2line -i, inlined frames included) and prints the top lines per stage.
# Usage: bash boards/profile.sh [top-n] [stage-filter]   (e.g. 8 random-walk)        Needs llvm-addr2line (Debian: llvm).
# Env: FINE=1 samples every 400 instructions (line prediction not sampled); BY=function ranks the
# innermost lib functions instead of source lines. Stages inside the calibrate-mode check are named
# ("check (calibrate): match stage", …).
set -euo pipefail
here="$(cd "$(dirname "${BASH_SOURCE[0]}")" && pwd)"
cd "$here"
export CARGO_TARGET_DIR="${CARGO_TARGET_DIR:-$here/target}"
top="${1:-8}"
out="$CARGO_TARGET_DIR/glowcheck-measure"
mkdir -p "$out"
features=profile
every=4000
if [ "${FINE:-0}" = 1 ]; then features=profile-fine; every=400; fi
cargo build -q --release -p glowcheck-pipeline --target thumbv6m-none-eabi --features "$features"
elf="$out/thumbv6m-none-eabi-profile.elf"
cp "$CARGO_TARGET_DIR/thumbv6m-none-eabi/release/glowcheck-pipeline" "$elf"
timeout "${GLOWCHECK_QEMU_TIMEOUT_S:-120}" qemu-system-arm -M mps2-an385 -nographic -monitor none -serial null \
    -icount shift=0 -semihosting-config enable=on,target=native -kernel "$elf" </dev/null >"$out/samples.bin" 2>"$out/profile.txt"
python3 - "$elf" "$out/samples.bin" "$top" "${2:-}" "$every" "${BY:-line}" <<'PY'
import collections, re, struct, subprocess, sys
elf, path, top = sys.argv[1], sys.argv[2], int(sys.argv[3])
every = int(sys.argv[5])
by_function = sys.argv[6] == "function"
data = open(path, "rb").read()
flat = struct.unpack("<%dI" % (len(data) // 4), data)
# Pairs: (stage << 24 | PC, LR). A sample in a leaf routine outside lib (a compiler-builtins call such as
# __aeabi_lmul) is charged to "routine <- lib line of its caller", found from LR.
words, callers = flat[0::2], flat[1::2]
stages = {0: "Checker::new (x2: verify and calibrate checkers)", 2: "condition_frame", 4: "find_peaks",
          6: "check (calibrate)", 8: "check (verify)", 10: "f32 baseline", 12: "calibration loop",
          116: "check (verify): judging", 117: "check (verify): after judging",
          118: "check (calibrate): calibrate stage", 119: "check (calibrate): match stage",
          120: "check (calibrate): judge stage", 121: "check (calibrate): after judging",
          80: "find part: noise", 81: "find part: baseline", 82: "find part: detect",
          83: "find part: fits", 84: "find part: fit of the strongest", 85: "find part: div32",
          86: "find part: div64"}
pcs = sorted({w & 0xFFFFFF for w in words} | {max((c & 0xFFFFFE) - 2, 0) for c in callers})
res = subprocess.run(["llvm-addr2line", "-e", elf, "-a", "-i", "-f", "-C"],
                     input="\n".join(hex(p) for p in pcs), capture_output=True, text=True).stdout
where, cur, frames = {}, None, []
for line in res.splitlines() + ["0x0"]:
    if re.fullmatch(r"0x[0-9a-f]+", line):
        if cur is not None:
            pairs = list(zip(frames[0::2], frames[1::2]))
            own = [f"{loc.split('/lib/src/')[1]} ({re.sub(r'::h[0-9a-f]{16}$', '', fn)})"
                   for fn, loc in pairs if "/lib/src/" in loc]
            if own and by_function:
                own = [re.sub(r"^[^ ]* \((.*)\)$", r"\1", o) for o in own]
            where[cur] = own[0] if own else "outside lib: " + re.sub(r"::h[0-9a-f]{16}$", "", pairs[-1][0] if pairs else "?")
        cur, frames = int(line, 16), []
    else:
        frames.append(line)
by = collections.defaultdict(collections.Counter)
for w, c in zip(words, callers):
    name = where.get(w & 0xFFFFFF, "?")
    if name.startswith("outside lib"):
        site = where.get(max((c & 0xFFFFFE) - 2, 0), "?")
        if not site.startswith("outside lib"):
            name = f"{name} <- {site}"
    by[w >> 24][name] += 1
names = ["noise-at-max-gain", "spike-comb-1000-4096px", "spike-every-other-px", "all-saturated", "all-zero",
         "16px", "1px", "4096px", "staircase", "alternating-extremes", "204-narrow-lines", "single-lit-pixel",
         "dark-above-signal", "saturated-dark-max-gain", "random-walk", "typical h-tube"]
modes = ["verify", "calibrate", "calibrate-blind"]
for k, name in enumerate(names):
    for m, mode in enumerate(modes):
        stages[16 + 3 * k + m] = f"adversarial {name} ({mode})"
only = sys.argv[4] if len(sys.argv) > 4 else ""
for st in sorted(by):
    if st not in stages or only not in stages[st]:
        continue
    total = sum(by[st].values())
    print(f"== {stages[st]}: {total} samples = ~{total * every / 1e6:.2f} M instructions")
    for k, c in by[st].most_common(top):
        print(f"  {100 * c / total:5.1f} %  {k}")
PY
