#!/usr/bin/env python3
"""Worst-case stack of lib's entry points on the M0 code, from the image itself (no run).

Each function's frame comes from its prologue (`push {...}`, `sub sp, #n`, or a literal loaded into
rN and added to sp); its callees from its `bl` instructions to a symbol's start (a `bl` into the
middle of a function is a long branch, not a call). A `blx rN` (a call through a pointer: lib
has a few `&dyn Fn` closures) may reach any closure of the caller's own module, so the deepest of
those is taken. The bound of an entry point is its frame plus the deepest bound among its callees;
a call cycle (recursion) makes the bound unknown, and that fails like an overflow does.

Usage: stack-bound.py OBJDUMP ELF LIMIT ROOT...   (ROOT: a substring of a demangled symbol name)
Prints one line per root (`stack_bound <bytes> <root> (<deepest path>)`); exit 1 when a bound
exceeds LIMIT or cannot be found.
"""
import re
import struct
import subprocess
import sys


def sections(path):
    data = open(path, "rb").read()
    shoff = struct.unpack_from("<I", data, 0x20)[0]
    shentsize, shnum = struct.unpack_from("<HH", data, 0x2E)
    out = []
    for i in range(shnum):
        _, typ, _, addr, off, size = struct.unpack_from("<IIIIII", data, shoff + i * shentsize)
        if addr and typ == 1:  # PROGBITS
            out.append((addr, off, size))
    return data, out


def main():
    objdump, elf, limit, roots = sys.argv[1], sys.argv[2], int(sys.argv[3]), sys.argv[4:]
    data, secs = sections(elf)

    def word(a):
        for addr, off, size in secs:
            if addr <= a < addr + size:
                return struct.unpack_from("<i", data, off + a - addr)[0]
        return None

    lines = subprocess.run([objdump, "-d", "--no-show-raw-insn", "-C", elf],
                           capture_output=True, text=True, check=True).stdout.splitlines()
    frame, calls, indirect = {}, {}, set()
    fn, k = None, 0
    for i, line in enumerate(lines):
        m = re.match(r"^[0-9a-f]+ <(.*)>:", line)
        if m:
            fn, k = m.group(1), 0
            frame[fn], calls[fn] = 0, set()
            continue
        if fn is None:
            continue
        k += 1
        # A call targets a function's start; `bl` to an offset inside one is Thumb-1's long branch.
        m = re.search(r"\tbl\t0x[0-9a-f]+ <([^>+]*)>", line)
        if m:
            calls[fn].add(m.group(1))
        if re.search(r"\tblx\tr\d+", line):
            indirect.add(fn)
        if k > 16:  # the prologue is over
            continue
        m = re.search(r"\tpush\t\{([^}]*)\}", line)
        if m:
            frame[fn] += 4 * len(m.group(1).split(","))
            continue
        m = re.search(r"\tsub\tsp, #0x([0-9a-f]+)", line)
        if m:
            frame[fn] += int(m.group(1), 16)
            continue
        m = re.search(r"\tadd\tsp, (r\d)\s*$", line)
        if m:
            for j in range(i - 1, max(i - 6, 0), -1):
                mm = re.search(r"ldr\t%s, \[pc, #0x[0-9a-f]+\]\s+@ 0x([0-9a-f]+)" % m.group(1), lines[j])
                if mm:
                    v = word(int(mm.group(1), 16))
                    if v is not None and v < 0:
                        frame[fn] -= v
                    break
    # A call through a pointer may reach any closure of the caller's module.
    for f in indirect:
        module = re.sub(r"::[^:]*$", "", re.sub(r"::h[0-9a-f]{16}$", "", f.split("::{{closure}}")[0]))
        calls[f] |= {g for g in frame if g.startswith(module) and "closure" in g}

    memo, active = {}, set()

    def deep(f):
        if f in memo:
            return memo[f]
        if f in active:
            raise RecursionError(f)
        active.add(f)
        best = (0, [])
        for c in sorted(calls.get(f, ())):
            if c == f or c not in frame:
                if c == f:
                    raise RecursionError(f)
                continue
            d = deep(c)
            if d[0] > best[0]:
                best = d
        active.discard(f)
        memo[f] = (frame.get(f, 0) + best[0], [f] + best[1])
        return memo[f]

    bad = False
    for root in roots:
        found = [f for f in frame if root in f]
        if not found:
            print(f"stack_bound none {root} (no such symbol)")
            bad = True
            continue
        for f in found:
            try:
                total, path = deep(f)
            except RecursionError as e:
                print(f"stack_bound unknown {root} (call cycle through {e})")
                bad = True
                continue
            short = " > ".join(re.sub(r"::h[0-9a-f]{16}$", "", p).split("::")[-1] for p in path[:8])
            print(f"stack_bound {total} {root} ({short})")
            bad |= total > limit
    sys.exit(1 if bad else 0)


main()
