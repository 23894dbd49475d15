#!/usr/bin/env python3
"""Instruction-address profile of a board image under QEMU, by source line or function.

Where the emulated cores spend their instructions: QEMU logs every translated block
(`-d in_asm`) and every block it executes (`-d exec,nochain`); this script counts the
executed instructions per address and maps the addresses to functions (`nm`) or to the
innermost source line of this repository (`addr2line -i`).

Usage (a short job keeps the log small; the firmware of `tidewise onchip` is left under
boards/target/<triple>/release/):

    python3 boards/profile.py ELF --machine microbit --cpu cortex-m0 [--lines] [--top 30]

The start-up calibration loop (`workload::calibrate`) is left out of the shares when
`--lines` is given. Needs python3, qemu-system-arm, nm and addr2line (binutils).
"""

import argparse
import bisect
import collections
import os
import re
import subprocess
import sys
import tempfile

EXEC = re.compile(r"Trace \d+: 0x[0-9a-f]+ \[[0-9a-f]+/([0-9a-f]+)/")
INSN = re.compile(r"^0x([0-9a-f]+):")


def run_qemu(elf, machine, cpu, log):
    cmd = [
        "qemu-system-arm", "-machine", machine, "-cpu", cpu, "-nographic", "-monitor", "none",
        "-semihosting-config", "enable=on,target=native", "-icount", "shift=0",
        "-kernel", elf, "-d", "in_asm,exec,nochain", "-D", log,
    ]
    subprocess.run(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, timeout=600)


def count(log):
    """Executed instructions per address: each executed block adds one to each of its
    instructions (as its translation listed them)."""
    blocks, execs, cur = {}, collections.Counter(), None
    with open(log, errors="replace") as f:
        for line in f:
            if line.startswith("IN:"):
                cur = []
                continue
            m = INSN.match(line)
            if m and cur is not None:
                cur.append(int(m.group(1), 16))
            for m in EXEC.finditer(line):
                if cur:
                    blocks[cur[0]] = cur
                cur = None
                execs[int(m.group(1), 16)] += 1
    per = collections.Counter()
    for pc, n in execs.items():
        for a in blocks.get(pc, [pc]):
            per[a] += n
    return per


def by_function(elf, per):
    out = subprocess.run(["nm", "-C", "-n", "--defined-only", elf],
                         capture_output=True, text=True, check=True).stdout
    syms = []
    for line in out.splitlines():
        parts = line.split(" ", 2)
        if len(parts) == 3 and parts[1] in "tTwW" and not parts[2].startswith("$"):
            syms.append((int(parts[0], 16) & ~1, parts[2]))
    syms.sort()
    keys = [a for a, _ in syms]
    agg = collections.Counter()
    for a, n in per.items():
        i = bisect.bisect_right(keys, a) - 1
        agg[syms[i][1] if i >= 0 else "?"] += n
    return agg


def by_line(elf, per):
    root = os.path.dirname(os.path.dirname(os.path.abspath(__file__))) + "/"
    items = list(per.items())
    text = "\n".join(hex(a) for a, _ in items)
    out = subprocess.run(["addr2line", "-e", elf, "-f", "-C", "-i", "-a"],
                         input=text, capture_output=True, text=True, check=True).stdout
    agg = collections.Counter()
    for block, (_, n) in zip(out.split("\n0x"), items):
        lines = block.strip().splitlines()[1:]
        frames = list(zip(lines[0::2], lines[1::2]))
        if any("calibrate" in fn for fn, _ in frames):
            continue
        key = next((loc.split(root, 1)[1].split(" ")[0] for _, loc in frames if root in loc),
                   frames[-1][0][:70] if frames else "?")
        agg[key] += n
    return agg


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("elf")
    ap.add_argument("--machine", default="mps2-an386")
    ap.add_argument("--cpu", default="cortex-m4")
    ap.add_argument("--lines", action="store_true", help="by source line, not by function")
    ap.add_argument("--top", type=int, default=30)
    args = ap.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        log = os.path.join(tmp, "qemu.log")
        run_qemu(args.elf, args.machine, args.cpu, log)
        per = count(log)
    agg = by_line(args.elf, per) if args.lines else by_function(args.elf, per)
    total = sum(agg.values())
    print(f"{total} instructions")
    for key, n in agg.most_common(args.top):
        print(f"{100 * n / max(total, 1):6.2f}% {n:10d} {key[:150]}")


if __name__ == "__main__":
    sys.exit(main())
