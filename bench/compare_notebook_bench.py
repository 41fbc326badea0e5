#!/usr/bin/env python3
"""Whole `posaudit compare A B --json` against the notebook reference, in one run.

Notebook (what a person does by hand, numpy + safetensors): load both tables, per-row
change ||b_i - a_i||, row cosines, top-32 principal angles between the leading left
singular subspaces of the centred tables (two thin numpy.linalg.svd calls, angles from
the SVD of Q_a^T Q_b), and linear CKA. Both sides in f64, each in its own process (peak
RSS from os.wait4). Tables: two invented 2048x1024 F32 checkpoints (smooth waves on the
first 1536 rows, an N(0, 0.02^2) tail decayed by 0.999 between them), cached in
.bench/compare-notebook/. posaudit runs with --threads 1 and with all cores; runs
alternate and medians are printed (the machine is shared). Then a 20-checkpoint run
(the same two tables alternating) for peak RSS against the 2-checkpoint run and
against 4x two tables' f64 size + 64 MiB.

Targets (issue 17): compare time <= 0.3x the notebook; RSS constant in the number of
checkpoints and <= 4x two tables' f64 size + 64 MiB. Benchmarks print ratios; no
timed test. Usage: bench/compare_notebook_bench.sh [--repeats N] [--run 20]
"""

import argparse
import os
import statistics
import subprocess
import sys
import time

import numpy as np
from safetensors.numpy import save_file

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
WORK = os.path.join(ROOT, ".bench", "compare-notebook")
N, D, TRAINED = 2048, 1024, 1536

NOTEBOOK = r'''
import sys, numpy as np
from safetensors.numpy import load_file
a = next(iter(load_file(sys.argv[1]).values())).astype(np.float64)
b = next(iter(load_file(sys.argv[2]).values())).astype(np.float64)
change = np.linalg.norm(b - a, axis=1)
cos = (a * b).sum(1) / (np.linalg.norm(a, axis=1) * np.linalg.norm(b, axis=1))
ac, bc = a - a.mean(0), b - b.mean(0)
ua = np.linalg.svd(ac, full_matrices=False)[0][:, :32]
ub = np.linalg.svd(bc, full_matrices=False)[0][:, :32]
angles = np.arccos(np.clip(np.linalg.svd(ua.T @ ub, compute_uv=False), -1, 1))
cka = np.linalg.norm(bc.T @ ac) ** 2 / (np.linalg.norm(ac.T @ ac) * np.linalg.norm(bc.T @ bc))
print(change.mean(), cos.mean(), angles.max(), cka)
'''


def tables():
    os.makedirs(WORK, exist_ok=True)
    pa, pb = os.path.join(WORK, "A.safetensors"), os.path.join(WORK, "B.safetensors")
    if not (os.path.exists(pa) and os.path.exists(pb)):
        rng = np.random.default_rng(1)
        p = np.arange(N)[:, None]
        freqs = rng.uniform(0.5, 60, size=D // 2)
        phase = rng.uniform(0, 2 * np.pi, size=D // 2)
        a = np.zeros((N, D), np.float32)
        a[:, 0::2] = 0.05 * np.sin(2 * np.pi * freqs * p / N + phase)
        a[:, 1::2] = 0.05 * np.cos(2 * np.pi * freqs * p / N + phase)
        a += rng.normal(0, 0.002, (N, D)).astype(np.float32)
        a[TRAINED:] = rng.normal(0, 0.02, (N - TRAINED, D))
        b = a.copy()
        b[:TRAINED] += rng.normal(0, 1e-3, (TRAINED, D)).astype(np.float32)
        b[TRAINED:] *= np.float32(0.999)
        save_file({"model.embed_positions.weight": a}, pa)
        save_file({"model.embed_positions.weight": b}, pb)
    return pa, pb


def measure(cmd, env=None):
    start = time.perf_counter()
    proc = subprocess.Popen(cmd, stdout=subprocess.DEVNULL, env=env)
    _, status, usage = os.wait4(proc.pid, 0)
    if status != 0:
        sys.exit(f"failed: {' '.join(cmd)}")
    return time.perf_counter() - start, usage.ru_maxrss / 1024.0  # MiB


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--run", type=int, default=20)
    ap.add_argument("--binary", default=os.path.join(ROOT, "target", "release", "posaudit"))
    args = ap.parse_args()
    pa, pb = tables()
    cores = os.cpu_count() or 1
    sides = {
        "notebook": [sys.executable, "-c", NOTEBOOK, pa, pb],
        "posaudit 1 thread": [args.binary, "compare", pa, pb, "--json", "--threads", "1"],
        f"posaudit {cores} threads": [args.binary, "compare", pa, pb, "--json",
                                      "--threads", str(cores)],
    }
    times = {k: [] for k in sides}
    rss = {k: 0.0 for k in sides}
    for _ in range(args.repeats):
        for name, cmd in sides.items():
            t, m = measure(cmd)
            times[name].append(t)
            rss[name] = max(rss[name], m)
    med = {k: statistics.median(v) for k, v in times.items()}
    print(f"tables: 2 x {N}x{D} F32, notebook numpy {np.__version__}")
    for name in sides:
        print(f"{name:24s} median {med[name]:6.2f} s   peak RSS {rss[name]:7.1f} MiB   "
              f"time ratio to notebook {med[name] / med['notebook']:.2f} (target <= 0.3)")
    two = 2 * N * D * 8 / 2**20
    run = [pa if i % 2 == 0 else pb for i in range(args.run)]
    t, m = measure([args.binary, "compare", *run, "--json"])
    base = rss[f"posaudit {cores} threads"]
    print(f"{args.run}-checkpoint run: {t:.1f} s, peak RSS {m:.1f} MiB; ratio to the "
          f"2-checkpoint run {m / base:.2f} (target ~1); budget 4 x {two:.0f} MiB + 64 MiB "
          f"= {4 * two + 64:.0f} MiB: {'within' if m <= 4 * two + 64 else 'OVER'}")


if __name__ == "__main__":
    main()
