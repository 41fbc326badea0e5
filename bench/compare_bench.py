#!/usr/bin/env python3
"""Benchmark: `posaudit compare` over ten checkpoints of one 2048x1024 F32 position table.

`compare` visits checkpoints one at a time and keeps per table at most the previous and
the current version plus the first (for first->last): its peak memory must stay of the
order of a few tables, whatever the number of checkpoints. This script writes ten
safetensors checkpoints of an invented run (each step trains a growing prefix of rows and
only decays the rest by 0.999, as decoupled weight decay does without gradient), runs the
release binary with --json and with --out, and prints the wall time, the peak RSS (from
os.wait4) and the ratio of peak RSS to the f64 size of two tables (2 x 2048 x 1024 x 8 B
= 32 MiB). Uses only the Python standard library; files go under .bench/ (ignored by git).

Usage: python3 bench/compare_bench.py [path/to/posaudit] [checkpoints]
       (defaults: target/release/posaudit, 10)
"""

import json
import os
import random
import struct
import subprocess
import sys
import time
from array import array

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
WORK = os.path.join(ROOT, ".bench", "compare")
ROWS, DIM = 2048, 1024
NAME = "model.embed_positions.weight"


def write_safetensors(path, values):
    """One F32 tensor `NAME` of shape (ROWS, DIM) from a flat array('f')."""
    nbytes = len(values) * 4
    header = json.dumps({NAME: {"dtype": "F32", "shape": [ROWS, DIM],
                                "data_offsets": [0, nbytes]}}, separators=(",", ":")).encode()
    header += b" " * ((8 - len(header) % 8) % 8)
    with open(path, "wb") as f:
        f.write(struct.pack("<Q", len(header)))
        f.write(header)
        if sys.byteorder != "little":
            values = array("f", values)
            values.byteswap()
        values.tofile(f)


def write_run(count):
    """Invented run: step s trains rows [0, 2048*(s+1)/count) with a small random update
    and decays the other rows by 0.999 (no gradient)."""
    os.makedirs(WORK, exist_ok=True)
    rng = random.Random(7)
    table = array("f", (rng.gauss(0.0, 0.02) for _ in range(ROWS * DIM)))
    paths = []
    for s in range(count):
        path = os.path.join(WORK, f"step{s:02d}.safetensors")
        if s > 0:
            trained = ROWS * s // count
            updates = [rng.gauss(0.0, 1e-3) for _ in range(DIM)]
            for r in range(ROWS):
                base = r * DIM
                if r < trained:
                    shift = rng.randrange(DIM)
                    for j in range(DIM):
                        table[base + j] += updates[(j + shift) % DIM]
                else:
                    for j in range(DIM):
                        table[base + j] *= 0.999
        write_safetensors(path, table)
        paths.append(path)
    return paths


def run(binary, args):
    start = time.perf_counter()
    proc = subprocess.Popen([binary, "compare", *args], stdout=subprocess.DEVNULL)
    _, status, usage = os.wait4(proc.pid, 0)
    elapsed = time.perf_counter() - start
    if status != 0:
        sys.exit(f"compare failed (status {status})")
    return elapsed, usage.ru_maxrss  # KiB on Linux


def main():
    binary = sys.argv[1] if len(sys.argv) > 1 else os.path.join(ROOT, "target", "release", "posaudit")
    count = int(sys.argv[2]) if len(sys.argv) > 2 else 10
    paths = write_run(count)
    two_tables_mib = 2 * ROWS * DIM * 8 / 2**20
    print(f"{count} checkpoints of a {ROWS}x{DIM} F32 table ({os.path.getsize(paths[0]) / 2**20:.1f} MiB each)")
    for label, extra in (("--json", ["--json"]), ("--out", ["--out", os.path.join(WORK, "report")])):
        t, peak = run(binary, [*paths, *extra])
        print(f"compare {label:6}: {t:6.2f} s  peak RSS {peak / 1024:7.1f} MiB  "
              f"= {peak / 1024 / two_tables_mib:4.2f} x two tables' f64 size ({two_tables_mib:.0f} MiB)")


if __name__ == "__main__":
    main()
