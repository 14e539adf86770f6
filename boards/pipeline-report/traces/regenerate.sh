#!/usr/bin/env bash
# Rewrites the traces the pipeline firmware embeds (2048 px, little-endian u16 counts, 4096 bytes each)
# from seeded `glowsim synth` runs; the air-leak trace is the committed demo trace h-tube-0116 (itself
# glowsim synth runs, recipe in tests/data/demo/README.md). Run from anywhere; needs a built glowsim.
set -euo pipefail
here="$(cd "$(dirname "$0")" && pwd)"
root="$here/../../.."
glowsim="${GLOWSIM:-$root/target/release/glowsim}"
[ -x "$glowsim" ] || (cd "$root" && cargo build -q --release -p glowcheck-sim)
to_bin() { # glowtrace text on stdin -> first signal frame as LE u16 in $1
    python3 -c '
import struct, sys
words, on = [], False
for line in sys.stdin:
    t = line.split("#")[0].split()
    if t[:2] == ["frame", "signal"]: on = True; continue
    if on and t and not t[0].isdigit(): break
    if on: words += [int(w) for w in t]
assert len(words) == 2048, len(words)
open(sys.argv[1], "wb").write(struct.pack("<2048H", *words))' "$1"
}
"$glowsim" synth --nucleus H --seed 11 --pixels 2048 --out - | to_bin "$here/h-tube.bin"
"$glowsim" synth --nucleus D --seed 12 --pixels 2048 --out - | to_bin "$here/d-lamp.bin"
to_bin "$here/air-leak.bin" <"$root/tests/data/demo/traces/h-tube-0116.trace"
