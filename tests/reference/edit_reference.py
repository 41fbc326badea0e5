"""Reference values for `posaudit extend`'s resampling (src/edit/resample.rs), computed
with torch.nn.functional.interpolate in float64 on CPU. Writes edit_reference.json
beside this script with the inputs, the outputs and the library versions.

Run in its own venv with torch, numpy (e.g. ~/.cache/posaudit-train-venv):

    ~/.cache/posaudit-train-venv/bin/python tests/reference/edit_reference.py

Conventions (the ones src/edit/resample.rs implements):
- 1-D tables (positions x dim) are resampled along position with align_corners=True:
  `mode="linear"` on the (1, dim, positions) tensor; cubic as `mode="bicubic"` on the
  (1, dim, 1, positions) tensor (height 1 -> 1, so only the position axis is resampled).
- 2-D grids (h*w rows, row-major) are resized as (1, dim, h, w) with
  `mode="bilinear"` / `mode="bicubic"`, align_corners=False, antialias=False.
Inputs are invented (seeded numpy draws)."""

import json
import os

import numpy as np
import torch
import torch.nn.functional as F

torch.use_deterministic_algorithms(True)
rng = np.random.default_rng(18)


def one_d(t, d, n, mode):
    src = rng.standard_normal((t, d))
    x = torch.from_numpy(src.T.copy())[None]  # (1, d, t)
    if mode == "linear":
        y = F.interpolate(x, size=n, mode="linear", align_corners=True)[0].T
    else:
        y = F.interpolate(x[:, :, None, :], size=(1, n), mode="bicubic", align_corners=True)[0, :, 0, :].T
    return {"mode": mode, "rows": t, "dim": d, "to": n, "input": src.tolist(), "output": y.numpy().tolist()}


def grid(h, w, d, h2, w2, mode):
    src = rng.standard_normal((h * w, d))
    x = torch.from_numpy(src.reshape(h, w, d).transpose(2, 0, 1).copy())[None]  # (1, d, h, w)
    y = F.interpolate(x, size=(h2, w2), mode=mode, align_corners=False, antialias=False)
    out = y[0].numpy().transpose(1, 2, 0).reshape(h2 * w2, d)
    return {"mode": mode, "height": h, "width": w, "dim": d, "to": [h2, w2], "input": src.tolist(), "output": out.tolist()}


cases = {
    "one_d": [
        one_d(7, 3, 20, "linear"),
        one_d(7, 3, 4, "linear"),
        one_d(9, 2, 31, "cubic"),
        one_d(9, 2, 5, "cubic"),
    ],
    "grid": [
        grid(4, 5, 3, 8, 7, "bilinear"),
        grid(4, 5, 3, 3, 3, "bilinear"),
        grid(5, 4, 2, 9, 11, "bicubic"),
        grid(6, 6, 2, 4, 5, "bicubic"),
    ],
    "versions": {"torch": torch.__version__, "numpy": np.__version__},
}
path = os.path.join(os.path.dirname(os.path.abspath(__file__)), "edit_reference.json")
with open(path, "w") as f:
    json.dump(cases, f)
    f.write("\n")
print("wrote", path)
