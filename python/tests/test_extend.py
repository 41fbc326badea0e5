"""`posaudit extend` output read back by the reference `safetensors` package (numpy
API): every untouched tensor bit-identical to the input's, the edited table equal to
values computed here with numpy (np.interp per column: linear interpolation with
align_corners=True, i.e. new position j at source position j*(t-1)/(N-1)), the
metadata kept, the config updated. Inputs are the invented demo checkpoints."""

import json
import subprocess

import numpy as np
from safetensors import safe_open
from safetensors.numpy import load_file

from conftest import DEMO

TERN = "tern.embeddings.position_embeddings.weight"


def run_extend(binary, *args):
    out = subprocess.run([str(binary), "extend", *map(str, args), "--json"], capture_output=True, text=True)
    assert out.returncode == 0, out.stderr
    return json.loads(out.stdout)


def test_interpolated_table_read_back_by_safetensors(binary, tmp_path):
    src = DEMO / "text-base"
    dst = tmp_path / "tern-4096"
    doc = run_extend(binary, src, "--table", TERN, "--to", 4096, "--method", "interpolate", "--out", dst)
    assert doc["plan"]["source_rows"] == [0, 512]
    old = load_file(src / "model.safetensors")
    new = load_file(dst / "model.safetensors")
    assert set(old) == set(new)
    for name, value in old.items():
        if name in (TERN, "tern.embeddings.position_ids"):
            continue
        assert new[name].dtype == value.dtype and new[name].shape == value.shape
        assert new[name].tobytes() == value.tobytes(), name
    trained = old[TERN][:512].astype(np.float64)
    x = np.arange(4096) * (511 / 4095)
    want = np.stack([np.interp(x, np.arange(512), trained[:, c]) for c in range(64)], axis=1)
    got = new[TERN]
    assert got.shape == (4096, 64) and got.dtype == np.float32
    # One rounding to float32 of values equal up to f64 rounding: within one f32 ULP.
    assert np.all(np.abs(got.astype(np.float64) - want) <= np.spacing(np.abs(want).astype(np.float32)).astype(np.float64))
    assert np.array_equal(new["tern.embeddings.position_ids"], np.arange(4096, dtype=np.int64)[None])
    with safe_open(str(dst / "model.safetensors"), "np") as f:
        meta = f.metadata()
    assert "rows 0..4096 synthesised" in meta["posaudit_extend"]
    assert json.loads((dst / "config.json").read_text())["max_position_embeddings"] == 4096


def test_regenerated_sinusoid_read_back(binary, tmp_path):
    src = DEMO / "encoder-fixed-bf16-angles"
    dst = tmp_path / "whimbrel"
    name = "whimbrel.encoder.embed_positions.weight"
    doc = run_extend(binary, src, "--table", name, "--method", "regenerate", "--out", dst)
    assert "low-precision" not in [f["code"] for f in doc["after"]["findings"]]
    new = load_file(dst / "model.safetensors")
    got = new[name]
    # check-values section 2.1, tensor2tensor get_timing_signal_1d: frequencies
    # exp(-i ln(1e4)/(d/2-1)), sin half then cos half, computed in f64, stored as f32.
    h = 32
    inv = np.exp(-np.arange(h) * np.log(1e4) / (h - 1))
    ang = np.arange(512)[:, None] * inv[None]
    want = np.concatenate([np.sin(ang), np.cos(ang)], axis=1)
    assert np.max(np.abs(got.astype(np.float64) - want)) < 6e-8
    old = load_file(src / "model.safetensors")
    for k, v in old.items():
        if k != name:
            assert new[k].tobytes() == v.tobytes(), k
