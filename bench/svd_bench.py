"""numpy side of bench/svd_bench.sh: times np.linalg.svd(x, full_matrices=False) on the
tables the Rust side wrote, prints `size seconds` lines."""

import sys
import time

import numpy as np

directory, sizes = sys.argv[1], sys.argv[2:]
for size in sizes:
    x = np.load(f"{directory}/table_{size}.npy")
    start = time.perf_counter()
    u, s, vt = np.linalg.svd(x, full_matrices=False)
    secs = time.perf_counter() - start
    print(f"{size} {secs:.4f}", flush=True)
    print(f"{size}: numpy {np.__version__} sigma1 {s[0]:.6f} sigma_min {s[-1]:.6f}", file=sys.stderr)
