#!/usr/bin/env bash
# Builds the instruction-counting QEMU plugin (icount.c) into a shared object.
#
# Usage: bash boards/icount-plugin/build.sh OUT.so
#        bash boards/icount-plugin/build.sh --check-version DIR
#            builds copies that claim plugin interface versions 0, 1 and 2 into DIR and prints which
#            ones this machine's qemu-system-arm accepts (7.2: 0 and 1, refuses 2), the evidence that
#            the version QEMU checks is the one plugin-api-v1.h declares. Each copy is started with a
#            bad argument, so an accepted copy stops in its own install function with its own message.
# Env:   CC (default cc)
set -euo pipefail
here="$(cd "$(dirname "${BASH_SOURCE[0]}")" && pwd)"
cc="${CC:-cc}"
flags=(-shared -fPIC -O2 -std=c11 -Wall -Wextra -Werror -fvisibility=hidden)
if [ "${1:-}" = "--check-version" ]; then
    dir="${2:?usage: build.sh --check-version DIR}"
    mkdir -p "$dir"
    for v in 0 1 2; do
        so="$dir/libglowcheck-icount-v$v.so"
        "$cc" "${flags[@]}" -DGLOWCHECK_CLAIM_VERSION="$v" -o "$so" "$here/icount.c"
        timeout 20 qemu-system-arm -M mps2-an385 -nographic -monitor none -serial null \
            -plugin "$so,no-such-argument=1" </dev/null >"$dir/v$v.log" 2>&1 || true
        if grep -q '^glowcheck-icount: unknown or malformed argument' "$dir/v$v.log"; then
            echo "version $v: accepted"
        else
            echo "version $v: refused: $(head -n 1 "$dir/v$v.log")"
        fi
    done
    exit 0
fi
out="${1:?usage: build.sh OUT.so}"
mkdir -p "$(dirname "$out")"
"$cc" "${flags[@]}" -o "$out" "$here/icount.c"
