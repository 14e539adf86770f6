#!/usr/bin/env bash
# Cross-check of the firmware digest with host-sim: runs `glowsim check --json` on the same three
# frames (same instrument, profiles and modes as src/case.rs) and compares verdict, reason codes and
# every matched line (nucleus, levels, measured wavelength and error; glowsim's JSON rounds to 1 fm).
# Usage: bash compare-glowsim.sh DIGEST_FILE [GLOWSIM]     exit 0 when all three agree
set -euo pipefail
here="$(cd "$(dirname "$0")" && pwd)"
root="$here/../.."
digest="$1"
glowsim="${2:-$root/target/release/glowsim}"
inst="$root/tests/data/instruments/bench-2048.toml"
tmp="$(mktemp -d)"
trap 'rm -rf "$tmp"' EXIT
"$glowsim" synth --nucleus H --seed 11 --pixels 2048 --out "$tmp/h.trace" >/dev/null 2>&1
"$glowsim" synth --nucleus D --seed 12 --pixels 2048 --out "$tmp/d.trace" >/dev/null 2>&1
"$glowsim" check "$tmp/h.trace" --instrument "$inst" --profile hydrogen --mode calibrate --json >"$tmp/h.json" || true
"$glowsim" check "$tmp/d.trace" --instrument "$inst" --profile deuterium --json >"$tmp/d.json" || true
"$glowsim" check "$root/tests/data/demo/traces/h-tube-0116.trace" --instrument "$inst" --profile hydrogen --json >"$tmp/a.json" || true
python3 - "$digest" "$tmp/h.json" "$tmp/d.json" "$tmp/a.json" <<'PY'
import json, sys
cases = open(sys.argv[1]).read().split("case ")[1:]
ok = True
for blk, path in zip(cases, sys.argv[2:]):
    j = json.load(open(path))
    rows = blk.splitlines()
    name, verdict, codes = rows[0].split()[0], rows[1].split()[1], rows[1].split("reasons ")[1]
    mine = [r.split() for r in rows if r.startswith("line ")]
    bad = []
    if verdict != j["verdict"]:
        bad.append(f"verdict {verdict} vs {j['verdict']}")
    if codes != (",".join(j["reason_codes"]) or "-"):
        bad.append(f"reasons {codes} vs {j['reason_codes']}")
    if len(mine) != len(j["lines"]):
        bad.append(f"{len(mine)} lines vs {len(j['lines'])}")
    for m, l in zip(mine, j["lines"]):
        fm, err = int(m[m.index("measured_fm") + 1]), int(m[m.index("error_fm") + 1])
        if (m[1], m[2]) != (l["nucleus"], f"{l['lower']}-{l['upper']}") \
                or abs(fm / 1e6 - l["measured_nm"]) > 2e-6 or abs(err / 1e6 - l["error_nm"]) > 2e-6:
            bad.append(f"{m[1]} {m[2]}: {fm} fm, error {err} fm vs {l['measured_nm']} nm, {l['error_nm']} nm")
    print(f"{name}: " + ("agrees with glowsim check" if not bad else "DIFFERS: " + "; ".join(bad[:4])))
    ok = ok and not bad
sys.exit(0 if ok else 1)
PY
