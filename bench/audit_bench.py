#!/usr/bin/env python3
"""Benchmark: the whole `posaudit audit PATH --json` against a notebook doing the same job.

For each size (rows x dim) it writes an invented F32 position table into a safetensors
file and measures, side by side in one run (the runs alternate, so noise from other users
of the machine hits both sides alike):

- posaudit: the release binary, `posaudit audit FILE --json`, wall time of the whole
  process (open, detect, every analysis, JSON out) and its peak RSS (`os.wait4`,
  `ru_maxrss`). Default of one linear-algebra thread.
- notebook: what a user's notebook does with the same table, timed inside a fresh Python
  process after its imports: `safetensors.numpy.load_file(FILE)[name]`, then
  `np.linalg.svd(table.astype(np.float64), full_matrices=False)`. The audit works in f64,
  so the notebook side converts to f64 too: like with like. numpy runs single-threaded
  (OPENBLAS_NUM_THREADS=1, OMP_NUM_THREADS=1, MKL_NUM_THREADS=1).

It prints the median times, the ratio posaudit/notebook (target <= 1.0), the audit time of
1024x768 (target < 0.3 s) and the audit's peak RSS against the table's f64 size (target
<= 4x + 64 MiB). Targets are reported, never asserted: the exit code is 0 whenever both
sides ran.

The invented table: the first three quarters of the rows are smooth waves along position
(two sines per column with random periods and phases) plus N(0, 0.002^2) noise; the last
quarter is an untrained tail of N(0, 0.02^2) noise. The generator uses only the Python
standard library (struct + json header, array for the raw little-endian floats), so it needs
nothing installed; numpy and safetensors are needed only by the notebook side.

Usage (normally through bench/audit_bench.sh, which builds and makes the venv):
    python bench/audit_bench.py [--sizes 1024x768,4096x2048] [--repeats N] [--binary PATH]
"""

import argparse
import array
import json
import math
import os
import random
import statistics
import struct
import subprocess
import sys
import tempfile
import time

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
WORK = os.path.join(ROOT, ".bench", "audit")
TABLE_NAME = "model.embed_positions.weight"
GENERATOR_VERSION = 1  # bump when the invented data changes, so cached files are rewritten
DEFAULT_SIZES = "1024x768,4096x2048,8192x4096"
ONE_THREAD = {"OPENBLAS_NUM_THREADS": "1", "OMP_NUM_THREADS": "1", "MKL_NUM_THREADS": "1"}


def parse_size(text):
    rows, dim = text.lower().split("x")
    rows, dim = int(rows), int(dim)
    if rows < 2 or dim < 1:
        raise argparse.ArgumentTypeError(f"bad size {text!r}")
    return rows, dim


def write_table(path, rows, dim, seed=20261202):
    """Writes the invented table (see the module doc) as a one-tensor safetensors file."""
    rng = random.Random(seed + rows * 100003 + dim)
    trained = rows * 3 // 4
    # Per column: two waves with periods between rows/8 and 2*rows, random phases.
    two_pi = 2.0 * math.pi
    w1 = [two_pi / rng.uniform(rows / 8, 2 * rows) for _ in range(dim)]
    w2 = [two_pi / rng.uniform(rows / 8, 2 * rows) for _ in range(dim)]
    p1 = [rng.uniform(0, two_pi) for _ in range(dim)]
    p2 = [rng.uniform(0, two_pi) for _ in range(dim)]
    a1 = [rng.uniform(0.02, 0.06) for _ in range(dim)]
    a2 = [rng.uniform(0.005, 0.02) for _ in range(dim)]
    cols = list(zip(w1, p1, a1, w2, p2, a2))
    nbytes = rows * dim * 4
    header = {TABLE_NAME: {"dtype": "F32", "shape": [rows, dim], "data_offsets": [0, nbytes]}}
    blob = json.dumps(header, separators=(",", ":")).encode()
    blob += b" " * ((8 - len(blob) % 8) % 8)
    gauss, sin = rng.gauss, math.sin
    fd, tmp = tempfile.mkstemp(dir=os.path.dirname(path), suffix=".part")
    with os.fdopen(fd, "wb") as f:
        f.write(struct.pack("<Q", len(blob)))
        f.write(blob)
        for r in range(rows):
            if r < trained:
                row = array.array("f", [a * sin(r * w + p) + b * sin(r * v + q) + gauss(0.0, 0.002)
                                        for w, p, a, v, q, b in cols])
            else:
                row = array.array("f", [gauss(0.0, 0.02) for _ in range(dim)])
            if sys.byteorder != "little":
                row.byteswap()
            row.tofile(f)
    os.replace(tmp, path)


def table_file(rows, dim):
    path = os.path.join(WORK, f"table_{rows}x{dim}_v{GENERATOR_VERSION}.safetensors")
    if not os.path.exists(path):
        start = time.perf_counter()
        print(f"# writing {path} ...", file=sys.stderr, flush=True)
        write_table(path, rows, dim)
        print(f"# written in {time.perf_counter() - start:.1f} s", file=sys.stderr, flush=True)
    return path


def run_audit(binary, path, out_path):
    """One `posaudit audit PATH --json`; returns (seconds, peak RSS in bytes)."""
    with open(out_path, "wb") as out:
        start = time.perf_counter()
        proc = subprocess.Popen([binary, "audit", path, "--json", "--threads", "1"], stdout=out)
        _, status, usage = os.wait4(proc.pid, 0)
        secs = time.perf_counter() - start
    code = os.waitstatus_to_exitcode(status)
    if code not in (0, 1):
        sys.exit(f"posaudit audit failed on {path} (exit code {code})")
    return secs, usage.ru_maxrss * 1024  # ru_maxrss is in KiB on Linux


def check_audit_output(out_path, rows, dim):
    """The audit must have analysed our table (otherwise the timing means nothing)."""
    with open(out_path) as f:
        doc = json.load(f)
    tables = [t for t in doc.get("tables", []) if t.get("name") == TABLE_NAME]
    if not tables:
        sys.exit(f"posaudit did not audit {TABLE_NAME}: {[t.get('name') for t in doc.get('tables', [])]}")
    t = tables[0]
    if t.get("shape") != [rows, dim] or t.get("spectrum") is None:
        sys.exit(f"unexpected audit of {TABLE_NAME}: shape {t.get('shape')}, spectrum {t.get('spectrum') is not None}")
    return t.get("kind"), t.get("verdict")


NOTEBOOK = r"""
import json, resource, sys, time
import numpy as np
from safetensors.numpy import load_file
path, name = sys.argv[1], sys.argv[2]
start = time.perf_counter()
table = load_file(path)[name]
loaded = time.perf_counter()
u, s, vt = np.linalg.svd(table.astype(np.float64), full_matrices=False)
done = time.perf_counter()
print(json.dumps({"load_s": loaded - start, "svd_s": done - loaded, "total_s": done - start,
                  "dtype": str(table.dtype), "sigma1": float(s[0]),
                  "maxrss": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024}))
"""


def run_notebook(python, path):
    env = dict(os.environ, **ONE_THREAD)
    out = subprocess.run([python, "-c", NOTEBOOK, path, TABLE_NAME], env=env,
                         capture_output=True, text=True)
    if out.returncode != 0:
        sys.exit(f"notebook side failed on {path}:\n{out.stderr}")
    return json.loads(out.stdout)


BLAS_INFO = r"""
import json, numpy, safetensors, threadpoolctl
info = [{k: d.get(k) for k in ("internal_api", "version", "num_threads", "threading_layer", "architecture")}
        for d in threadpoolctl.threadpool_info() if d.get("user_api") == "blas"]
print(json.dumps({"numpy": numpy.__version__, "safetensors": safetensors.__version__,
                  "threadpoolctl": threadpoolctl.__version__, "blas": info}))
"""


def describe_notebook(python):
    env = dict(os.environ, **ONE_THREAD)
    out = subprocess.run([python, "-c", BLAS_INFO], env=env, capture_output=True, text=True)
    if out.returncode != 0:
        sys.exit(f"notebook python unusable ({python}):\n{out.stderr}")
    return json.loads(out.stdout)


def default_repeats(rows, dim):
    n = rows * dim
    return 5 if n <= 1 << 20 else 3 if n <= 1 << 24 else 1


def mib(nbytes):
    return nbytes / 2**20


def main():
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--sizes", default=DEFAULT_SIZES,
                    help=f"comma-separated ROWSxDIM list (default {DEFAULT_SIZES})")
    ap.add_argument("--repeats", type=int, default=None,
                    help="runs per side and size (default 5 / 3 / 1 by size); medians are printed")
    ap.add_argument("--binary", default=os.path.join(ROOT, "target", "release", "posaudit"))
    ap.add_argument("--python", default=sys.executable, help="python with numpy and safetensors")
    args = ap.parse_args()
    sizes = [parse_size(s) for s in args.sizes.split(",") if s.strip()]
    if not os.access(args.binary, os.X_OK):
        sys.exit(f"no posaudit binary at {args.binary}: run cargo build --release first")
    os.makedirs(WORK, exist_ok=True)

    info = describe_notebook(args.python)
    print(f"posaudit: {args.binary} (release, default 1 linear-algebra thread)")
    print(f"notebook: numpy {info['numpy']}, safetensors {info['safetensors']}, "
          f"threadpoolctl {info['threadpoolctl']}; f32 table -> astype(float64) -> "
          f"np.linalg.svd(full_matrices=False); env {' '.join(f'{k}=1' for k in ONE_THREAD)}")
    for b in info["blas"] or [{"internal_api": "none found by threadpoolctl"}]:
        print("notebook BLAS: " + ", ".join(f"{k}={v}" for k, v in b.items()))
    print(f"machine: {os.cpu_count()} logical CPUs (shared; medians of alternating runs)")
    print()

    rows_out = []
    for rows, dim in sizes:
        path = table_file(rows, dim)
        repeats = args.repeats or default_repeats(rows, dim)
        out_path = os.path.join(WORK, f"audit_{rows}x{dim}.json")
        audit_t, audit_rss, nb_t, nb_svd, nb_load, nb_rss = [], [], [], [], [], []
        for i in range(repeats):
            secs, rss = run_audit(args.binary, path, out_path)
            audit_t.append(secs)
            audit_rss.append(rss)
            nb = run_notebook(args.python, path)
            nb_t.append(nb["total_s"])
            nb_svd.append(nb["svd_s"])
            nb_load.append(nb["load_s"])
            nb_rss.append(nb["maxrss"])
            print(f"# {rows}x{dim} run {i + 1}/{repeats}: audit {secs:.3f} s, notebook {nb['total_s']:.3f} s",
                  file=sys.stderr, flush=True)
        kind, verdict = check_audit_output(out_path, rows, dim)
        f64 = rows * dim * 8
        r = {
            "size": f"{rows}x{dim}", "repeats": repeats, "kind": kind, "verdict": verdict,
            "audit_s": statistics.median(audit_t), "audit_min_s": min(audit_t),
            "notebook_s": statistics.median(nb_t), "notebook_min_s": min(nb_t),
            "notebook_load_s": statistics.median(nb_load), "notebook_svd_s": statistics.median(nb_svd),
            "audit_rss": max(audit_rss), "notebook_rss": max(nb_rss), "f64_bytes": f64,
            "rss_budget": 4 * f64 + 64 * 2**20,
        }
        r["ratio"] = r["audit_s"] / r["notebook_s"]
        rows_out.append(r)

    print(f"{'size':<11} {'runs':>4} {'audit_s':>9} {'notebook_s':>10} {'(load+svd)':>15} "
          f"{'ratio':>6} {'audit_RSS_MiB':>13} {'f64_MiB':>8} {'RSS/f64':>7} {'budget_MiB':>10} {'nb_RSS_MiB':>10}")
    for r in rows_out:
        print(f"{r['size']:<11} {r['repeats']:>4} {r['audit_s']:>9.3f} {r['notebook_s']:>10.3f} "
              f"{r['notebook_load_s']:>6.3f}+{r['notebook_svd_s']:<8.3f} {r['ratio']:>6.2f} "
              f"{mib(r['audit_rss']):>13.1f} {mib(r['f64_bytes']):>8.1f} {r['audit_rss'] / r['f64_bytes']:>7.2f} "
              f"{mib(r['rss_budget']):>10.1f} {mib(r['notebook_rss']):>10.1f}")
    print()
    for r in rows_out:
        print(f"{r['size']}: audit found kind {r['kind']!r}, verdict: {r['verdict']}")
    print()
    print("targets:")
    for r in rows_out:
        ok = r["ratio"] <= 1.0
        print(f"  {r['size']}: ratio posaudit/notebook {r['ratio']:.2f} <= 1.0: {'met' if ok else 'MISSED'}")
    for r in rows_out:
        if r["size"] == "1024x768":
            ok = r["audit_s"] < 0.3
            print(f"  1024x768: whole audit {r['audit_s']:.3f} s < 0.3 s: {'met' if ok else 'MISSED'}")
    for r in rows_out:
        ok = r["audit_rss"] <= r["rss_budget"]
        print(f"  {r['size']}: audit peak RSS {mib(r['audit_rss']):.1f} MiB <= 4 x {mib(r['f64_bytes']):.1f} + 64 "
              f"= {mib(r['rss_budget']):.1f} MiB: {'met' if ok else 'MISSED'}")


if __name__ == "__main__":
    main()
