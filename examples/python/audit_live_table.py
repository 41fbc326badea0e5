"""Audit a position table held in memory, the way a notebook holds a model.

Copy this into a notebook cell (or run `python examples/python/audit_live_table.py`).
It needs only NumPy and the posaudit package (`pip install ./python`, see the README).

The table is INVENTED: a 1024-position, 64-wide learned table whose first 700 rows were
"trained" (smooth waves in position, like a real trained table) and whose last 324 rows
still hold their N(0, 0.02^2) initial values, as when a model declares 1024 positions but
was only trained on sequences of 700 tokens. With a real model you would pass its weight
instead, for example:

    table = model.transformer.wpe.weight.detach().cpu().numpy()   # PyTorch
"""

import pathlib
import tempfile

import numpy as np

import posaudit

# --- an invented in-memory table (replace with your model's weight) ----------------------
rng = np.random.default_rng(0)
positions, dim, trained = 1024, 64, 700
table = rng.normal(0.0, 0.02, (positions, dim)).astype(np.float32)  # the initialiser
p = np.arange(trained)[:, None]
freqs = 1.0 / (30.0 * 1.6 ** np.arange(dim // 2))
waves = np.concatenate([np.sin(p * freqs), np.cos(p * freqs)], axis=1)
table[:trained] = (0.1 * waves + rng.normal(0.0, 0.002, (trained, dim))).astype(np.float32)

# --- audit it ------------------------------------------------------------------------------
out = pathlib.Path(tempfile.mkdtemp(prefix="posaudit-live-"))
report = posaudit.audit_array(
    table,
    name="transformer.wpe.weight",
    config={"max_position_embeddings": positions, "initializer_range": 0.02},
    out=out,  # writes report.md, report.json and the SVG plots it links
)

entry = report["tables"][0]
print(f"{entry['name']}: {entry['kind']}, shape {entry['shape']}")
print("verdict:", entry["verdict"])
for f in entry["findings"]:
    print(f"  {f['severity']:8} {f['code']:18} rows {f['positions']}: {f['message']}")
untrained = entry["untrained"]
if untrained:
    print("untrained tail starts at row", untrained["first"], "-", untrained["count"], "rows")
print("worst finding:", posaudit.worst(report))

# --- the report folder and a plot to look at -----------------------------------------------
plots = sorted(out.glob("*.svg"))
print("report:", out / "report.md")
print("plots:", ", ".join(p.name for p in plots))
print("look at:", out / "t01-norms.svg" if (out / "t01-norms.svg").exists() else plots[0])
# In a notebook, show one:  from IPython.display import SVG; SVG(filename=str(plots[0]))

# --- gate on it, as `--fail-on warning` does ----------------------------------------------
try:
    posaudit.audit_array(table, name="transformer.wpe.weight", fail_on="warning")
except posaudit.FindingsError as e:
    print(f"fail_on='warning' raised: {e}")
