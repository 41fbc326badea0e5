"""Reference values for the rotation-invariant similarity in src/compare/similarity.rs.

Writes tests/reference/subspace_fixtures.json: small invented position tables (seeded)
and, for each pair, values computed with numpy/scipy:
  - principal angles with scipy.linalg.subspace_angles between the leading k left
    singular vectors of the column-centred tables (numpy.linalg.svd),
  - k by the rule "smallest k capturing 90% of the centred energy in both tables, capped
    at 32 and at the numerical ranks (sigma > 1e-6 sigma_1)",
  - linear CKA by the published formula (Kornblith et al. 2019),
    ||Y^T X||_F^2 / (||X^T X||_F ||Y^T Y||_F) on centred X, Y,
  - the orthogonal Procrustes residual with scipy.linalg.orthogonal_procrustes,
    narrower table zero-padded, ||A R - B||_F / ||B||_F after centring.
It also simulates the CKA chance level for independent Gaussian tables and records it
beside the formula sqrt(dx dy / ((n+dx)(n+dy))).

Run: python3 tests/reference/subspace_reference.py (numpy and scipy in a venv)
"""

import json
import os

import numpy as np
import scipy
import scipy.linalg

HERE = os.path.dirname(os.path.abspath(__file__))
RNG = np.random.default_rng(20261202)
N = 64


def smooth_table(freqs, phases, dim, noise):
    """Invented position table: sines/cosines of position mixed into `dim` columns plus noise."""
    p = np.arange(N)[:, None]
    feats = []
    for f, ph in zip(freqs, phases):
        feats.append(np.sin(2 * np.pi * f * p / N + ph))
        feats.append(np.cos(2 * np.pi * f * p / N + ph))
    s = np.hstack(feats)
    w = RNG.standard_normal((s.shape[1], dim))
    return s @ w + noise * RNG.standard_normal((N, dim))


def centre(t):
    return t - t.mean(axis=0)


def k_rule(sa, sb, fraction=0.9, k_max=32, rank_cut=1e-6):
    def need(s):
        e = np.cumsum(s**2)
        return int(np.argmax(e >= fraction * e[-1] * (1 - 1e-12)) + 1)

    def rank(s):
        return int(np.sum(s > rank_cut * s[0]))

    k = min(max(need(sa), need(sb)), k_max, rank(sa), rank(sb))
    return k, [need(sa), need(sb)]


def cka(x, y):
    x, y = centre(x), centre(y)
    return float(
        np.linalg.norm(y.T @ x, "fro") ** 2
        / (np.linalg.norm(x.T @ x, "fro") * np.linalg.norm(y.T @ y, "fro"))
    )


def procrustes(a, b):
    d = max(a.shape[1], b.shape[1])
    pa = np.zeros((a.shape[0], d))
    pb = np.zeros((b.shape[0], d))
    pa[:, : a.shape[1]] = centre(a)
    pb[:, : b.shape[1]] = centre(b)
    r, _ = scipy.linalg.orthogonal_procrustes(pa, pb)
    return float(np.linalg.norm(pa @ r - pb) / np.linalg.norm(pb))


def pair_record(name, a, b):
    ua, sa, _ = np.linalg.svd(centre(a), full_matrices=False)
    ub, sb, _ = np.linalg.svd(centre(b), full_matrices=False)
    k, need = k_rule(sa, sb)
    angles = np.sort(scipy.linalg.subspace_angles(ua[:, :k], ub[:, :k]))
    return {
        "name": name,
        "a": a.tolist(),
        "b": b.tolist(),
        "k": k,
        "k_needed": need,
        "principal_angles": angles.tolist(),
        "subspace_similarity": float(np.mean(np.cos(angles) ** 2)),
        "cka": cka(a, b),
        "procrustes_residual": procrustes(a, b),
    }


def simulated_cka_chance(n, dx, dy, trials=200):
    v = [cka(RNG.standard_normal((n, dx)), RNG.standard_normal((n, dy))) for _ in range(trials)]
    return {
        "n": n,
        "dx": dx,
        "dy": dy,
        "trials": trials,
        "mean": float(np.mean(v)),
        "std": float(np.std(v)),
        "formula": float(np.sqrt(dx * dy / ((n + dx) * (n + dy)))),
    }


def main():
    a = smooth_table([1, 2, 3, 4], [0.0, 0.3, 0.7, 1.1], 16, 0.05)
    # shares two frequencies with `a`, the others differ: angles spread over [0, pi/2]
    b = smooth_table([1, 2, 5, 7], [0.2, 0.3, 0.0, 0.5], 16, 0.05)
    c = smooth_table([1, 3, 4, 6], [0.1, 0.6, 1.0, 0.4], 24, 0.2)
    out = {
        "numpy_version": np.__version__,
        "scipy_version": scipy.__version__,
        "seed": 20261202,
        "note": "invented tables; values from numpy.linalg.svd, scipy.linalg.subspace_angles, "
        "scipy.linalg.orthogonal_procrustes and the linear CKA formula",
        "pairs": [pair_record("same-width", a, b), pair_record("different-width", a, c)],
        "cka_chance": [simulated_cka_chance(64, 16, 16), simulated_cka_chance(256, 32, 16)],
    }
    path = os.path.join(HERE, "subspace_fixtures.json")
    with open(path, "w") as f:
        json.dump(out, f, indent=1)
    for p in out["pairs"]:
        print(p["name"], "k", p["k"], p["k_needed"], "sim", p["subspace_similarity"],
              "cka", p["cka"], "procrustes", p["procrustes_residual"])
        print("  angles", np.round(p["principal_angles"], 4))
    print("cka chance", out["cka_chance"])
    print("numpy", np.__version__, "scipy", scipy.__version__)


if __name__ == "__main__":
    main()
