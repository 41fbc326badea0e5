#!/usr/bin/env python3
"""Benchmark: `posaudit scan` time on a small and on a multi-GB sparse checkpoint.

Scan reads headers and a few sampled rows only, so its time must not grow with the size
of the weights: the ratio large/small is expected near 1. Peak memory (max RSS of the
scan process) is printed for both. Uses only the Python standard library; writes its
files under .bench/ (ignored by git). The large file is sparse: its 8 GiB of weights are
a hole on disk except for the position table, which holds real (invented) values.

Usage: python3 bench/scan_bench.py [path/to/posaudit]   (default: target/release/posaudit)
"""

import json
import math
import os
import random
import statistics
import struct
import subprocess
import sys
import time

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
WORK = os.path.join(ROOT, ".bench")


def write_checkpoint(path, big_bytes):
    """A safetensors file: an invented 2048x1024 F32 position table, then `big_bytes` of
    other weights (zeros, left as a hole in the file)."""
    rows, dim = 2048, 1024
    table_bytes = rows * dim * 4
    tensors = {"model.embed_positions.weight": {"dtype": "F32", "shape": [rows, dim],
                                                "data_offsets": [0, table_bytes]}}
    offset = table_bytes
    layer = 0
    chunk = 256 * 1024 * 1024
    while offset - table_bytes < big_bytes:
        n = min(chunk, big_bytes - (offset - table_bytes))
        tensors[f"model.layers.{layer}.mlp.weight"] = {
            "dtype": "F32", "shape": [n // 4], "data_offsets": [offset, offset + n]}
        offset += n
        layer += 1
    header = json.dumps(tensors, separators=(",", ":")).encode()
    header += b" " * ((8 - len(header) % 8) % 8)
    rng = random.Random(1)
    with open(path, "wb") as f:
        f.write(struct.pack("<Q", len(header)))
        f.write(header)
        # Smooth invented rows: a few slow waves along position.
        phases = [rng.uniform(0, 6.283) for _ in range(dim)]
        row_bytes = bytearray()
        for r in range(rows):
            row_bytes += struct.pack(f"<{dim}f", *[math.sin(r / 300.0 + p) * 0.05 for p in phases])
        f.write(row_bytes)
        f.truncate(8 + len(header) + offset)


def run(binary, path, repeats=7):
    times, peaks = [], []
    for _ in range(repeats):
        start = time.perf_counter()
        proc = subprocess.Popen([binary, "scan", path, "--json"], stdout=subprocess.DEVNULL)
        _, status, usage = os.wait4(proc.pid, 0)
        times.append(time.perf_counter() - start)
        peaks.append(usage.ru_maxrss)  # KiB on Linux
        if status != 0:
            sys.exit(f"scan failed on {path} (status {status})")
    return statistics.median(times), max(peaks)


def main():
    binary = sys.argv[1] if len(sys.argv) > 1 else os.path.join(ROOT, "target", "release", "posaudit")
    os.makedirs(WORK, exist_ok=True)
    small = os.path.join(WORK, "scan_small.safetensors")
    large = os.path.join(WORK, "scan_large.safetensors")
    write_checkpoint(small, 4 * 1024 * 1024)
    write_checkpoint(large, 8 * 1024 * 1024 * 1024)
    t_small, m_small = run(binary, small)
    t_large, m_large = run(binary, large)
    print(f"small checkpoint: {os.path.getsize(small) / 2**20:9.1f} MiB  scan {t_small * 1000:7.1f} ms  peak RSS {m_small / 1024:6.1f} MiB")
    print(f"large checkpoint: {os.path.getsize(large) / 2**20:9.1f} MiB  scan {t_large * 1000:7.1f} ms  peak RSS {m_large / 1024:6.1f} MiB")
    print(f"time ratio large/small: {t_large / t_small:.2f} (expected near 1)")
    print(f"memory ratio large/small: {m_large / m_small:.2f} (expected near 1)")
    os.remove(large)


if __name__ == "__main__":
    main()
