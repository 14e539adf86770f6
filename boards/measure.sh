#!/usr/bin/env bash
# Instruction counts, sizes and stack of the whole glowcheck pipeline on a 2048-pixel frame (the
# `h-tube` trace of boards/pipeline-report, ~12 lines), one JSON object per thumb target on stdout.
#
# Counts: the `measure` build of boards/pipeline stamps SysTick (core clock) around each stage and
# runs in QEMU with `-icount shift=0`, where every instruction advances virtual time by exactly 1 ns:
# ticks are deterministic and proportional to instructions. A register-only loop of 2 000 000
# instructions gives the instructions per tick (40 on the 25 MHz mps2 clock), so each count is
# exact to +- 1 tick. (Debian 12's QEMU 7.2 ships no TCG plugin header, so no counting plugin.)
# Stages: condition = condition_frame, find = find_peaks, calibrate = check(calibrate mode) -
# check(verify mode), match = check(verify) - condition - find (matching AND judging: lib runs
# them inside Checker::check with no public seam, so "judge" is null), total = check(calibrate).
# Sizes: the digest image of boards/pipeline (the same code without the f32 baseline), minus the
# 3 embedded 4096-byte test frames for flash. Stack: deepest lib call, each call measured on a freshly
# painted stack below its caller's stack pointer.
#
# Usage: bash boards/measure.sh [target ...]   (default: the three thumb targets)
# Env:   CARGO_TARGET_DIR (default boards/target); GLOWCHECK_QEMU_TIMEOUT_S (default 120)
set -euo pipefail
here="$(cd "$(dirname "${BASH_SOURCE[0]}")" && pwd)"
cd "$here"
export CARGO_TARGET_DIR="${CARGO_TARGET_DIR:-$here/target}"
timeout_s="${GLOWCHECK_QEMU_TIMEOUT_S:-120}"
targets="${*:-thumbv6m-none-eabi thumbv7m-none-eabi thumbv7em-none-eabihf}"
out="$CARGO_TARGET_DIR/glowcheck-measure"
mkdir -p "$out"
sysroot="$(rustc --print sysroot)"
host="$(rustc -vV | sed -n 's/^host: //p')"
size="$sysroot/lib/rustlib/$host/bin/llvm-size"
nm="$sysroot/lib/rustlib/$host/bin/llvm-nm"
for t in $targets; do
    case "$t" in
        thumbv6m-none-eabi | thumbv7m-none-eabi) machine=mps2-an385 ;;
        thumbv7em-none-eabihf) machine=mps2-an386 ;;
        *) echo "measure.sh: no QEMU machine for $t" >&2; exit 2 ;;
    esac
    elf="$CARGO_TARGET_DIR/$t/release/glowcheck-pipeline"
    cargo build -q --release -p glowcheck-pipeline --target "$t"
    cp "$elf" "$out/$t-digest.elf"
    cargo build -q --release -p glowcheck-pipeline --target "$t" --features measure
    cp "$elf" "$out/$t-measure.elf"
    timeout "$timeout_s" qemu-system-arm -M "$machine" -nographic -monitor none -serial null \
        -icount shift=0 -semihosting-config enable=on,target=native -kernel "$out/$t-measure.elf" \
        </dev/null >"$out/$t.txt"
    read -r flash ram < <("$size" -A "$out/$t-digest.elf" | awk '
        $1 == ".vector_table" || $1 == ".text" || $1 == ".rodata" || $1 == ".data" { flash += $2 }
        $1 == ".data" || $1 == ".bss" || $1 == ".uninit" { ram += $2 }
        END { print flash, ram }')
    frames="$("$nm" -S --radix=d --demangle "$out/$t-digest.elf" | awk '/traces::(H_TUBE|D_LAMP|AIR_LEAK)(::h[0-9a-f]+)?$/ { s += $2 } END { print s + 0 }')"
    awk -v target="$t" -v flash="$flash" -v frames="$frames" -v ram="$ram" '
        function kv(line, key,   i, n, f) { n = split(line, f, " "); for (i = 1; i < n; i++) if (f[i] == key) return f[i + 1]; return "" }
        /^ticks / { tk = $0 } /^stack_bytes / { st = $0 }
        /^typical / { ref[$3] = $7 }
        /^adversary / { na++; an[na] = $2; am[na] = $3; ap[na] = $5; at[na] = $7; ar[na] = $9 }
        END {
            per = int(kv(tk, "loop_instructions") / kv(tk, "calibration") + 0.5)
            c = kv(tk, "condition") * per; f = kv(tk, "find") * per
            cal = kv(tk, "check_calibrate") * per; ver = kv(tk, "check_verify") * per
            fb = kv(tk, "float_baseline") * per; pr = kv(tk, "predict") * per
            stack = 0; n = split("predict condition find check_calibrate check_verify", k, " ")
            for (i = 1; i <= n; i++) if (kv(st, k[i]) + 0 > stack) stack = kv(st, k[i]) + 0
            printf "{\"target\": \"%s\", \"pixels\": 2048, \"instructions\": {\"condition\": %d, \"find\": %d, \"calibrate\": %d, \"match\": %d, \"judge\": null, \"total\": %d}, ", target, c, f, cal - ver, ver - c - f, cal
            printf "\"instructions_per_pixel\": %.1f, \"float_baseline_instructions\": %d, \"float_baseline_ratio\": %.3f, ", (c + f) / 2048, fb, fb / (c + f)
            printf "\"flash_bytes\": %d, \"static_ram_bytes\": %d, \"stack_bytes\": %d, ", flash - frames, ram, stack
            printf "\"predict_once_instructions\": %d, \"instructions_per_tick\": %d, \"embedded_frame_bytes\": %d, ", pr, per, frames
            # Adversarial frames: work of Checker::check relative to the typical frame in the same mode,
            # the bound scaled by pixels / 2048 for longer frames (never below 1).
            worst = 0; wname = ""
            printf "\"adversarial\": ["
            for (i = 1; i <= na; i++) {
                scale = ap[i] / 2048; if (scale < 1) scale = 1
                r = at[i] / (ref[am[i]] * scale)
                if (r > worst) { worst = r; wname = an[i] " " am[i] }
                printf "%s{\"frame\": \"%s\", \"mode\": \"%s\", \"pixels\": %d, \"instructions\": %d, \"ratio\": %.3f, \"result\": \"%s\"}", (i > 1 ? ", " : ""), an[i], am[i], ap[i], at[i] * per, r, ar[i]
            }
            printf "], \"typical_check_instructions\": {\"verify\": %d, \"calibrate\": %d, \"calibrate-blind\": %d}, ", ref["verify"] * per, ref["calibrate"] * per, ref["calibrate-blind"] * per
            printf "\"adversarial_worst_ratio\": %.3f, \"adversarial_worst\": \"%s\"}\n", worst, wname
        }' "$out/$t.txt"
done
