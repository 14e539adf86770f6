#!/usr/bin/env bash
# Instruction counts, sizes and stack of the whole glowcheck pipeline on a 2048-pixel frame (the
# `h-tube` trace of boards/pipeline-report, ~12 lines), one JSON object per thumb target on stdout.
#
# Counts: the `measure` build of boards/pipeline marks each stage; a mark takes a SysTick stamp and
# then calls `glowcheck_marker`. It runs once in QEMU under `-icount shift=0` with the project's
# counting plugin (boards/icount-plugin, built here with cc) watching that function's address: the
# plugin writes the exact number of instructions executed at every marker hit, and a stage's count
# is the difference between its two hits minus that of an empty pair of marks (the marks' own cost).
# The SysTick stamps of the same run are the cross-check: under `-icount shift=0` every instruction
# advances virtual time by exactly 1 ns, and a register-only loop of 2 000 000 instructions gives the
# instructions per tick (40 on the 25 MHz mps2 clock), so ticks x 40 must agree with the plugin to
# within one tick; the script fails otherwise, and when the plugin's count of that loop is not exactly
# 2 000 000 plus the loop function's fixed instructions (counted in its disassembly). Without a C
# compiler the plugin cannot be built: the counts are then SysTick's (+- 40), and stderr says so.
# Stages: condition = condition_frame, find = find_peaks, calibrate = check(calibrate mode) -
# check(verify mode), judge = from `Stage::Matched` to `Stage::Judged` of the verify check
# (`Checker::check_traced`), match = check(verify) - condition - find - judge, total = check(calibrate).
# Sizes: the digest image of boards/pipeline (the same code without the f32 baseline), minus the
# 3 embedded 4096-byte test frames for flash. Stack: deepest lib call (the stages on the h-tube frame and every typical and adversarial check), each measured on a freshly
# painted stack below its caller's stack pointer.
#
# Usage: bash boards/measure.sh [target ...]   (default: the three thumb targets)
# Env:   CARGO_TARGET_DIR (default boards/target); GLOWCHECK_QEMU_TIMEOUT_S (default 120);
#        GLOWCHECK_COUNTS=systick skips the plugin (SysTick counts only)
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
objdump="$sysroot/lib/rustlib/$host/bin/llvm-objdump"

plugin="$out/libglowcheck-icount.so"
if [ "${GLOWCHECK_COUNTS:-plugin}" = systick ]; then
    plugin=""
    echo "measure.sh: GLOWCHECK_COUNTS=systick: instruction counts from SysTick ticks (+- 40 instructions)" >&2
elif ! bash "$here/icount-plugin/build.sh" "$plugin" 2>"$out/icount-plugin.err"; then
    echo "measure.sh: the counting plugin does not build (needs cc and libc headers: apt-get install gcc libc6-dev);" \
        "instruction counts from SysTick ticks instead (+- 40 instructions). See $out/icount-plugin.err" >&2
    plugin=""
fi

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
    counts="$out/$t-counts.txt"
    rm -f "$counts"
    plugin_args=()
    calib_fixed=""
    handler=""
    if [ -n "$plugin" ]; then
        # Thumb function symbols may carry bit 0 set; the instruction's address has it clear.
        marker="$("$nm" "$out/$t-measure.elf" | awk '$3 == "glowcheck_marker" { print $1 }')"
        [ -n "$marker" ] || { echo "measure.sh: no glowcheck_marker symbol in $out/$t-measure.elf" >&2; exit 1; }
        marker="$(printf '0x%x' $((0x$marker & ~1)))"
        plugin_args=(-plugin "$plugin,marker=$marker,out=$counts")
        # The calibration loop's instructions outside its 2-instruction loop body, and the call to
        # it; and the instructions of the SysTick handler, which runs in that loop when SysTick wraps.
        read -r calib_fixed handler < <("$objdump" -d --demangle --no-show-raw-insn "$out/$t-measure.elf" | awk '
            /^[0-9a-f]+ <.*measure::calibration_loop.*>:$/ { f = "loop"; next }
            /^[0-9a-f]+ <SysTick>:$/ { f = "handler"; next }
            /^$/ { f = "" }
            f != "" && /^ *[0-9a-f]+:/ && $0 !~ /\t\.(word|short|byte)/ { n[f]++ }
            END { if (n["loop"] >= 2 && n["handler"] >= 1) print n["loop"] - 2 + 1, n["handler"] }') || true
    fi
    timeout "$timeout_s" qemu-system-arm -M "$machine" -nographic -monitor none -serial null \
        -icount shift=0 -semihosting-config enable=on,target=native -kernel "$out/$t-measure.elf" \
        "${plugin_args[@]}" </dev/null >"$out/$t.txt"
    if [ -n "$plugin" ] && ! grep -q '^total ' "$counts" 2>/dev/null; then
        echo "measure.sh: the counting plugin wrote no total to $counts" >&2
        exit 1
    fi
    read -r flash ram < <("$size" -A "$out/$t-digest.elf" | awk '
        $1 == ".vector_table" || $1 == ".text" || $1 == ".rodata" || $1 == ".data" { flash += $2 }
        $1 == ".data" || $1 == ".bss" || $1 == ".uninit" { ram += $2 }
        END { print flash, ram }')
    frames="$("$nm" -S --radix=d --demangle "$out/$t-digest.elf" | awk '/traces::(H_TUBE|D_LAMP|AIR_LEAK)(::h[0-9a-f]+)?$/ { s += $2 } END { print s + 0 }')"
    # The plugin's counts (a missing file reads as none: SysTick only).
    [ -n "$plugin" ] || counts=/dev/null
    awk -v target="$t" -v flash="$flash" -v frames="$frames" -v ram="$ram" -v calib_fixed="$calib_fixed" -v handler="$handler" '
        function kv(line, key,   i, n, f) { n = split(line, f, " "); for (i = 1; i < n; i++) if (f[i] == key) return f[i + 1]; return "" }
        function kv2(line, key,   i, n, f) { n = split(line, f, " "); for (i = 1; i < n; i++) if (f[i] == key) return f[i + 2]; return "" }
        # Plugin instructions between the two hits of pair `key` on `line`, and the cross-check
        # against SysTick: ticks x per must lie within one tick (+ 64 for a SysTick wrap handled
        # between a stamp and its marker) of it.
        # The deepest stack so far (the "stack N" of a check line) and which call it was.
        function deep(line, name,   v) { v = kv(line, "stack") + 0; if (v > stack) { stack = v; stack_at = name } }
        function raw(line, key, ticks,   d, s, e) {
            d = count[kv2(line, key)] - count[kv(line, key)]
            s = ticks * per; e = d - s; if (e < 0) e = -e
            if (e > worst_disagree) worst_disagree = e
            if (e > per + 64) { printf "measure.sh: %s: %s: plugin %d instructions, SysTick %d x %d = %d\n", target, key, d, ticks, per, s > "/dev/stderr"; bad = 1 }
            return d
        }
        FILENAME == ARGV[1] { if ($1 == "marker") count[$2] = $3; else if ($1 == "total") { plugin = 1; hits_seen = $3 } next }
        /^ticks / { tk = $0 } /^stack_bytes / { st = $0 } /^hits / { hl = $0 }
        /^typical / { nt++; tm[nt] = $3; tname[nt] = $2; tt[nt] = kv($0, "ticks"); ta[nt] = kv($0, "hits"); tb[nt] = kv2($0, "hits"); ref_t[$3] = 1; deep($0, "check " $2 " " $3) }
        /^part / { np++; pn[np] = $2; pa[np] = kv($0, "hits"); pb[np] = kv2($0, "hits"); pt[np] = kv($0, "ticks") }
        /^adversary / { deep($0, "check " $2 " " $3); na++; an[na] = $2; am[na] = $3; ap[na] = kv($0, "pixels"); at[na] = kv($0, "ticks"); aa[na] = kv($0, "hits"); ab[na] = kv2($0, "hits"); ar[na] = kv($0, "result") }
        END {
            per = int(kv(tk, "loop_instructions") / kv(tk, "calibration") + 0.5)
            n = split("predict condition find check_calibrate check_verify float_baseline calibration judge stage_calibrate stage_match stage_judge", names, " ")
            for (i = 1; i <= n; i++) sys[names[i]] = kv(tk, names[i]) * per
            if (plugin) {
                if (hits_seen != kv(hl, "total")) { printf "measure.sh: %s: plugin saw %d marker hits, the firmware made %d\n", target, hits_seen, kv(hl, "total") > "/dev/stderr"; bad = 1 }
                empty = raw(hl, "empty", kv(tk, "empty"))
                empty_stamp = count[kv2(hl, "empty_stamp")] - count[kv(hl, "empty_stamp")]
                for (i = 1; i <= n; i++) ins[names[i]] = raw(hl, names[i], kv(tk, names[i])) - empty
                # The loop, its entry and exit, the call, and one SysTick handler per wrap in the pair.
                loop = kv(tk, "loop_instructions") + calib_fixed + kv(hl, "calibration_wraps") * handler
                if (calib_fixed == "" || ins["calibration"] != loop) { printf "measure.sh: %s: plugin counts the calibration loop as %d instructions, its code says %s\n", target, ins["calibration"], (calib_fixed == "" ? "?" : loop) > "/dev/stderr"; bad = 1 }
                # The reference per mode is the costliest typical frame (h-tube, air-leak, d-lamp).
                for (i = 1; i <= nt; i++) { v = count[tb[i]] - count[ta[i]] - empty_stamp; tv[i] = v; if (v > ref[tm[i]]) ref[tm[i]] = v; e = v + empty_stamp - tt[i] * per; if (e < 0) e = -e; if (e > worst_disagree) worst_disagree = e; if (e > per + 64) { printf "measure.sh: %s: typical %s %s disagrees with SysTick\n", target, tname[i], tm[i] > "/dev/stderr"; bad = 1 } }
                for (i = 1; i <= na; i++) { ai[i] = count[ab[i]] - count[aa[i]] - empty_stamp; e = ai[i] + empty_stamp - at[i] * per; if (e < 0) e = -e; if (e > worst_disagree) worst_disagree = e; if (e > per + 64) { printf "measure.sh: %s: adversary %s %s disagrees with SysTick\n", target, an[i], am[i] > "/dev/stderr"; bad = 1 } }
                source = "plugin"
            } else {
                for (i = 1; i <= n; i++) ins[names[i]] = sys[names[i]]
                for (i = 1; i <= nt; i++) { tv[i] = tt[i] * per; if (tv[i] > ref[tm[i]]) ref[tm[i]] = tv[i] }
                for (i = 1; i <= na; i++) ai[i] = at[i] * per
                source = "systick"
            }
            # The stages after finding come from the calibrate-mode check itself (marks at its stage
            # callbacks, each pair already less one mark); its total loses the four marks inside it.
            c = ins["condition"]; f = ins["find"]; cal = ins["check_calibrate"] - (plugin ? 4 * empty : 0)
            sc = ins["stage_calibrate"]; sm = ins["stage_match"]; j = ins["stage_judge"]
            fb = ins["float_baseline"]; pr = ins["predict"]
            # Deepest stack of any lib call measured: the stages on the h-tube frame, and every typical
            # and adversarial check.
            k = split("predict condition find check_calibrate check_verify", sk, " ")
            for (i = 1; i <= k; i++) if (kv(st, sk[i]) + 0 > stack) { stack = kv(st, sk[i]) + 0; stack_at = sk[i] " h-tube" }
            printf "{\"target\": \"%s\", \"pixels\": 2048, \"count_source\": \"%s\", \"instructions\": {\"condition\": %d, \"find\": %d, \"calibrate\": %d, \"match\": %d, \"judge\": %d, \"total\": %d}, ", target, source, c, f, sc, sm, j, cal
            printf "\"systick_instructions\": {\"condition\": %d, \"find\": %d, \"calibrate\": %d, \"match\": %d, \"judge\": %d, \"total\": %d}, ", sys["condition"], sys["find"], sys["stage_calibrate"], sys["stage_match"], sys["stage_judge"], sys["check_calibrate"]
            if (plugin) printf "\"systick_max_disagreement_instructions\": %d, \"mark_overhead_instructions\": %d, \"stamp_overhead_instructions\": %d, \"calibration_loop_instructions\": %d, ", worst_disagree, empty, empty_stamp, ins["calibration"]
            else printf "\"systick_max_disagreement_instructions\": null, \"mark_overhead_instructions\": null, \"stamp_overhead_instructions\": null, \"calibration_loop_instructions\": null, "
            printf "\"instructions_per_pixel\": %.1f, \"float_baseline_instructions\": %d, \"float_baseline_ratio\": %.3f, ", (c + f) / 2048, fb, fb / (c + f)
            printf "\"flash_bytes\": %d, \"static_ram_bytes\": %d, \"stack_bytes\": %d, \"stack_deepest\": \"%s\", ", flash - frames, ram, stack, stack_at
            # The pieces of find_peaks, each timed alone (see find_parts in boards/pipeline/src/measure.rs).
            printf "\"find_parts\": {"
            for (i = 1; i <= np; i++) printf "%s\"%s\": %d", (i > 1 ? ", " : ""), pn[i], (plugin ? count[pb[i]] - count[pa[i]] - empty_stamp : pt[i] * per)
            printf "}, "
            printf "\"predict_once_instructions\": %d, \"instructions_per_tick\": %d, \"embedded_frame_bytes\": %d, ", pr, per, frames
            # Adversarial frames: work of Checker::check relative to the typical frame in the same mode
            # (the costliest of the embedded h-tube, air-leak and d-lamp frames), the bound scaled by
            # pixels / 2048 for longer frames (never below 1).
            worst = 0; wname = ""
            printf "\"adversarial\": ["
            for (i = 1; i <= na; i++) {
                scale = ap[i] / 2048; if (scale < 1) scale = 1
                r = ai[i] / (ref[am[i]] * scale)
                if (r > worst) { worst = r; wname = an[i] " " am[i] }
                printf "%s{\"frame\": \"%s\", \"mode\": \"%s\", \"pixels\": %d, \"instructions\": %d, \"ratio\": %.3f, \"result\": \"%s\"}", (i > 1 ? ", " : ""), an[i], am[i], ap[i], ai[i], r, ar[i]
            }
            printf "], \"typical_check_instructions\": {\"verify\": %d, \"calibrate\": %d, \"calibrate-blind\": %d}, ", ref["verify"], ref["calibrate"], ref["calibrate-blind"]
            printf "\"typical_frames\": ["
            for (i = 1; i <= nt; i++) printf "%s{\"frame\": \"%s\", \"mode\": \"%s\", \"instructions\": %d}", (i > 1 ? ", " : ""), tname[i], tm[i], tv[i]
            printf "], "
            printf "\"adversarial_worst_ratio\": %.3f, \"adversarial_worst\": \"%s\"}\n", worst, wname
            exit bad
        }' "$counts" "$out/$t.txt"
done
