#!/usr/bin/env bash
# Exact instruction counts by function, source line and call site (self and inclusive) of one span of
# the M0 measure image, from the call-site plugin (icount-plugin/callsite.c): where a stage's
# instructions go, to the instruction, when profile.sh's samples are too coarse.
#
# Usage: bash boards/callsite.sh LO HI [OUT]    LO, HI: marker hits bounding the span (see the `hits`
#        line of glowcheck-measure/thumbv6m-none-eabi.txt after boards/measure.sh: e.g. the calibrate
#        stage is the pair `stage_calibrate A B`). Env: SITE=PC to count only inside one call site.
# Needs cc and llvm-addr2line (Debian: gcc, libc6-dev, llvm). Writes OUT (default
# $CARGO_TARGET_DIR/glowcheck-measure/callsite.txt) and OUT.raw.
set -euo pipefail
here="$(cd "$(dirname "${BASH_SOURCE[0]}")" && pwd)"
export CARGO_TARGET_DIR="${CARGO_TARGET_DIR:-$here/target}"
lo="${1:?usage: callsite.sh LO HI [OUT]}"; hi="${2:?usage: callsite.sh LO HI [OUT]}"
dir="$CARGO_TARGET_DIR/glowcheck-measure"
out="${3:-$dir/callsite.txt}"
elf="$dir/thumbv6m-none-eabi-measure.elf"
[ -f "$elf" ] || { echo "callsite.sh: no $elf: run boards/measure.sh thumbv6m-none-eabi first" >&2; exit 2; }
sysroot="$(rustc --print sysroot)"
nm="$(find "$sysroot" -name llvm-nm -type f | head -n 1)"
so="$dir/callsite.so"
"${CC:-cc}" -shared -fPIC -O2 -std=c11 -Wall -Wextra -I"$here/icount-plugin" -o "$so" "$here/icount-plugin/callsite.c"
marker="$("$nm" "$elf" | awk '$3 == "glowcheck_marker" { print $1 }')"
marker="$(printf '0x%x' $((0x$marker & ~1)))"
"$nm" "$elf" | awk 'NF >= 3 && $2 ~ /^[tTwW]$/ { print $1 }' >"$out.funcs"
timeout "${GLOWCHECK_QEMU_TIMEOUT_S:-300}" qemu-system-arm -M mps2-an385 -nographic -monitor none -serial null \
    -icount shift=0 -semihosting-config enable=on,target=native -kernel "$elf" \
    -plugin "$so,marker=$marker,lo=$lo,hi=$hi,out=$out.raw,funcs=$out.funcs${SITE:+,site=$SITE}" </dev/null >/dev/null
python3 - "$elf" "$out.raw" >"$out" <<'PY'
import collections, re, subprocess, sys
elf, raw = sys.argv[1], sys.argv[2]
rows = [(int(a, 16), int(b), int(c)) for a, b, c in (l.split() for l in open(raw))]
res = subprocess.run(["llvm-addr2line", "-e", elf, "-a", "-i", "-f", "-C"],
                     input="\n".join(hex(r[0]) for r in rows), capture_output=True, text=True).stdout
where, cur, fr = {}, None, []
for line in res.splitlines() + ["0x0"]:
    if re.fullmatch(r"0x[0-9a-f]+", line):
        if cur is not None:
            where[cur] = [(re.sub(r"::h[0-9a-f]{16}$", "", f),
                           l.split("/lib/src/")[-1] if "/lib/src/" in l else l.split("/")[-1])
                          for f, l in zip(fr[0::2], fr[1::2])]
        cur, fr = int(line, 16), []
    else:
        fr.append(line)
total = sum(r[1] for r in rows)
print("total", total)
def show(title, c, n):
    print("==", title)
    for k, v in c.most_common(n):
        print("%9d %5.1f%%  %s" % (v, 100 * v / max(total, 1), k))
fn, line, outer, site = (collections.Counter() for _ in range(4))
for pc, s, i in rows:
    w = where.get(pc, [("?", "?")])
    fn[w[0][0]] += s
    line[w[0][1] + "  " + w[0][0].split("::")[-1]] += s
    outer[w[-1][0]] += s
    if i:
        chain = " < ".join("%s:%s" % (f.split("::")[-1], l.split(":")[-1]) for f, l in w[:3])
        site["%x %s  [%s]" % (pc, chain, w[0][1].split(":")[0])] += i
show("self, by innermost function", fn, 40)
show("self, by outermost function", outer, 30)
show("self, by source line", line, 40)
show("inclusive, by call site", site, 60)
PY
echo "callsite.sh: $out"
