"""Reference values for posaudit's spectrum, neighbour and linalg tests, from numpy.

Run with a Python that has numpy (a venv outside the repository):

    python3 tests/reference/spectrum_reference.py

It writes tests/reference/data/spectrum_reference.json. Large tables are not stored:
they are defined by formulas that the Rust tests rebuild exactly the same way
(the Vaswani sinusoid, and a Gaussian table from a splitmix64 stream through
Box-Muller). Only the small 64x48 table is stored. Singular values come from
np.linalg.svd (LAPACK gesdd), the reference for "a direct SVD".
"""

import json
import math
import platform
import sys
from pathlib import Path

import numpy as np

OUT = Path(__file__).resolve().parent / "data" / "spectrum_reference.json"
MASK64 = (1 << 64) - 1


def vaswani(n, d):
    """Vaswani et al. 2017 section 3.5: PE(p, 2i) = sin(p w_i), PE(p, 2i+1) = cos(p w_i),
    w_i = 10000^(-2i/d). Same operations as the Rust tests: w = 10000**(-(2i)/d)."""
    t = np.zeros((n, d))
    for i in range(d // 2):
        w = 10000.0 ** (-(2.0 * i) / d)
        ang = np.arange(n, dtype=np.float64) * w
        t[:, 2 * i] = np.sin(ang)
        t[:, 2 * i + 1] = np.cos(ang)
    return t


def splitmix_gaussian(n, d, seed):
    """Invented deterministic Gaussian table: splitmix64 (Steele, Lea, Flood 2014) gives
    u = ((z >> 11) + 0.5) / 2^53 in (0, 1); Box-Muller x = sqrt(-2 ln u1) cos(2 pi u2).
    Row-major order, two uniforms per value. The Rust tests implement the same stream."""
    state = seed & MASK64
    out = np.empty(n * d)
    for k in range(n * d):
        us = []
        for _ in range(2):
            state = (state + 0x9E3779B97F4A7C15) & MASK64
            z = state
            z = ((z ^ (z >> 30)) * 0xBF58476D1CE4E5B9) & MASK64
            z = ((z ^ (z >> 27)) * 0x94D049BB133111EB) & MASK64
            z = z ^ (z >> 31)
            us.append(((z >> 11) + 0.5) / 2.0**53)
        out[k] = math.sqrt(-2.0 * math.log(us[0])) * math.cos(2.0 * math.pi * us[1])
    return out.reshape(n, d)


def erank(s):
    """Roy & Vetterli 2007: p = s / sum(s), exp(-sum p ln p)."""
    s = s[s > 0]
    p = s / s.sum()
    return float(np.exp(-(p * np.log(p)).sum()))


def energy(s, ks=(1, 2, 4, 8, 16, 32)):
    e = s**2
    out = []
    for k in ks:
        k = min(k, len(s))
        if out and out[-1][0] == k:
            continue
        out.append([k, float(e[:k].sum() / e.sum())])
    return out


def locality(t, kmax):
    nrm = np.linalg.norm(t, axis=1)
    u = t / nrm[:, None]
    return [float(np.mean(np.sum(u[:-k] * u[k:], axis=1))) for k in range(1, kmax + 1)]


def describe(t):
    s = np.linalg.svd(t, compute_uv=False)
    c = t - t.mean(axis=0)
    sc = np.linalg.svd(c, compute_uv=False)
    return {
        "shape": list(t.shape),
        "singular_values": s.tolist(),
        "effective_rank": erank(s),
        "centred_singular_values": sc.tolist(),
        "centred_effective_rank": erank(sc),
        "centred_energy_top_k": energy(sc),
    }


def main():
    doc = {
        "generator": "tests/reference/spectrum_reference.py",
        "numpy": np.__version__,
        "python": platform.python_version(),
        "blas": "numpy's bundled LAPACK (np.linalg.svd -> gesdd)",
        "tables": {},
    }
    v = vaswani(512, 768)
    entry = describe(v)
    entry["formula"] = "vaswani(512, 768)"
    entry["locality_mean_cosine_k1_to_10"] = locality(v, 10)
    doc["tables"]["vaswani_512x768"] = entry

    g = splitmix_gaussian(512, 768, seed=20261202)
    entry = describe(g)
    entry["formula"] = "splitmix_gaussian(512, 768, seed=20261202)"
    entry["first_values"] = g[0, :4].tolist()
    doc["tables"]["gaussian_512x768"] = entry

    rng = np.random.default_rng(7)
    r = rng.standard_normal((64, 48)) * np.linspace(1.0, 1e-3, 48)  # graded columns
    entry = describe(r)
    u, s, vt = np.linalg.svd(r, full_matrices=False)
    # sign convention of posaudit's linalg: largest-magnitude entry of each left vector > 0
    for j in range(3):
        if u[np.argmax(np.abs(u[:, j])), j] < 0:
            u[:, j] *= -1
            vt[j] *= -1
    entry["table"] = r.tolist()
    entry["left_vectors_top3"] = u[:, :3].T.tolist()
    entry["right_vectors_top3"] = vt[:3].tolist()
    doc["tables"]["random_64x48"] = entry

    OUT.parent.mkdir(parents=True, exist_ok=True)
    OUT.write_text(json.dumps(doc, indent=1) + "\n")
    print(f"wrote {OUT} ({OUT.stat().st_size} bytes) with numpy {np.__version__}", file=sys.stderr)


if __name__ == "__main__":
    main()
