"""Reference values for the non-1-D kinds (src/analyze/{grid,relative,rotary}.rs).

Each quantity is computed here with numpy, in float32 where the published code works in
float32, straight from the formulas named in the project's shared check-values notes:
  * mae_grid      -- fixed 2-D sine-cosine grid with a zero class row (section 2.6),
                     grid built with np.meshgrid(grid_w, grid_h) ('xy' indexing), so the
                     first D/2 columns follow the column index.
  * t5_buckets    -- T5 relative-position bucket (section 5.1), log evaluated in float32.
  * llama31       -- Llama 3.1 scaled inverse frequencies (section 6.6), float32.
Run: python3 tests/reference/kinds.py (numpy in a venv)  (writes kinds.json beside itself).
"""
import json
import pathlib

import numpy as np


def one_axis(dim, pos):
    omega = np.arange(dim // 2, dtype=np.float64) / (dim / 2.0)
    omega = 1.0 / 10000 ** omega
    out = np.einsum("m,d->md", pos.reshape(-1), omega)
    return np.concatenate([np.sin(out), np.cos(out)], axis=1)


def mae_grid(dim, side):
    gh = np.arange(side, dtype=np.float64)
    gw = np.arange(side, dtype=np.float64)
    grid = np.stack(np.meshgrid(gw, gh), axis=0).reshape(2, 1, side, side)
    first = one_axis(dim // 2, grid[0])
    second = one_axis(dim // 2, grid[1])
    emb = np.concatenate([first, second], axis=1)
    return np.concatenate([np.zeros((1, dim)), emb], axis=0)


def t5_bucket(rp, bidirectional, nb=32, max_distance=128):
    rp = np.asarray(rp, dtype=np.int64)
    ret = np.zeros_like(rp)
    if bidirectional:
        nb //= 2
        ret += (rp > 0).astype(np.int64) * nb
        rp = np.abs(rp)
    else:
        rp = -np.minimum(rp, 0)
    max_exact = nb // 2
    small = rp < max_exact
    safe = np.maximum(rp, 1).astype(np.float32)
    large = max_exact + (
        np.log(safe / np.float32(max_exact))
        / np.float32(np.log(max_distance / max_exact))
        * np.float32(nb - max_exact)
    ).astype(np.int64)
    large = np.minimum(large, nb - 1)
    return ret + np.where(small, rp, large)


def llama31(base=500000.0, dim=128, factor=8.0, low=1.0, high=4.0, old=8192.0):
    inv = (1.0 / (np.float32(base) ** (np.arange(0, dim, 2, dtype=np.int64).astype(np.float32) / dim))).astype(np.float32)
    wavelen = (2 * np.pi / inv).astype(np.float32)
    low_wl, high_wl = old / low, old / high
    out = np.where(wavelen > low_wl, inv / factor, inv).astype(np.float32)
    smooth = (old / wavelen - low) / (high - low)
    smoothed = (1 - smooth) * out / factor + smooth * out
    medium = ~(wavelen < high_wl) & ~(wavelen > low_wl)
    return np.where(medium, smoothed, out).astype(np.float32)


def main():
    rps = np.arange(-300, 301)
    doc = {
        "numpy": np.__version__,
        "mae_grid": {"dim": 16, "side": 3, "rows": mae_grid(16, 3).tolist()},
        "t5_buckets": {
            "relative_positions": rps.tolist(),
            "bidirectional": t5_bucket(rps, True).tolist(),
            "causal": t5_bucket(rps, False).tolist(),
        },
        "llama31": {"base": 500000.0, "dim": 128, "inv_freq_f32": [float(x) for x in llama31()]},
    }
    path = pathlib.Path(__file__).with_name("kinds.json")
    path.write_text(json.dumps(doc) + "\n")


if __name__ == "__main__":
    main()
