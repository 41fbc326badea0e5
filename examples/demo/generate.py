"""Writes posaudit's demo checkpoints: an INVENTED scenario, invented numbers.

Nothing here was trained and nothing comes from a real model. A small invented team
builds five invented model families (all names are made up):

  tern      a text model with a learned 2048-row position table, trained on 512-token
            sequences; a later run trains rows 512..1024; a smaller sibling is saved
            four times during one run, and a second run uses another seed
  whimbrel  an encoder with a fixed sine/cosine table (one copy computed with bf16 angles)
  kittiwake a small vision model with a learned 12x12 patch grid plus a class row
  dunlin    a rotary model whose context was extended with a wavelength ramp; one copy
            has its stored inverse frequencies cast to bf16
  godwit    an encoder with a 32-bucket bidirectional relative-position bias table

"Trained" tables are built, not trained: a few smooth waves along position (trained
position tables are smooth and low-rank) plus a little noise. Rows that never received
a gradient are the initializer's N(0, 0.02^2) draws (initializer_range 0.02 is common
practice), shrunk by weight decay where the invented run uses it.

Every intended property is asserted below with numpy, and the published formulas used
(sinusoids, T5 buckets, Llama-3.1-style frequency scaling, low-precision angles) are
first checked against the worked values of the project's check-values file (section
numbers cited beside each check).

Run through generate.sh, which makes the virtual environment with pinned versions.
Re-running rewrites the same bytes (fixed seeds; versions in PROVENANCE.json).
"""

import hashlib
import json
import math
import os
import platform
import shutil

import ml_dtypes
import numpy as np
import safetensors
from safetensors.numpy import save_file

HERE = os.path.dirname(os.path.abspath(__file__))
OUT = os.path.join(HERE, "checkpoints")
SEED = 20261202
BF16 = ml_dtypes.bfloat16

# Component seeds: one stream per invented model, so changing one leaves the others alone.
SEEDS = {
    "tern": [SEED, 1],
    "tern-small-run-a": [SEED, 2],
    "tern-small-run-b": [SEED, 3],
    "whimbrel": [SEED, 4],
    "kittiwake": [SEED, 5],
    "dunlin": [SEED, 6],
    "godwit": [SEED, 7],
}

INIT_STD = 0.02  # initializer_range of every invented config (common practice)
# One key only: the writer keeps metadata in a hash map, so several keys come out in
# varying order and the files would not be byte-identical between runs.
META = {"data": "invented by examples/demo/generate.py"}


# ---------------------------------------------------------------------------------------
# Building blocks
# ---------------------------------------------------------------------------------------

def orthonormal(rng, d, k):
    """d x k matrix with orthonormal columns (QR of a Gaussian matrix, signs fixed)."""
    q, r = np.linalg.qr(rng.normal(size=(d, k)))
    return q * np.sign(np.diag(r))[None, :]


def waves(rng, rows, d, wavelengths, rms):
    """A smooth, low-rank table: one helix (cos, sin pair) per wavelength, in random
    orthonormal directions, amplitudes falling with frequency, scaled to a row RMS."""
    k = len(wavelengths)
    basis = orthonormal(rng, d, 2 * k)
    p = np.arange(rows, dtype=np.float64)[:, None]
    lam = np.asarray(wavelengths, dtype=np.float64)[None, :]
    phase = rng.uniform(0.0, 2 * np.pi, size=(1, k))
    amp = 1.0 / np.sqrt(1.0 + np.arange(k))[None, :]
    ang = 2 * np.pi * p / lam + phase
    out = (amp * np.cos(ang)) @ basis[:, 0::2].T + (amp * np.sin(ang)) @ basis[:, 1::2].T
    return out * (rms / np.sqrt(np.mean(out**2)))


def geometric(lo, hi, k):
    return list(np.geomspace(lo, hi, k))


def neighbour_cosines(x):
    a, b = x[:-1].astype(np.float64), x[1:].astype(np.float64)
    return np.sum(a * b, axis=1) / (np.linalg.norm(a, axis=1) * np.linalg.norm(b, axis=1))


def f32(x):
    return np.asarray(x, dtype=np.float64).astype(np.float32)


def decay_factor(lr, wd, steps):
    """Decoupled weight decay over `steps` steps, (1 - lr*wd)^steps, as one float32 factor."""
    return np.float32((1.0 - lr * wd) ** steps)


# ---------------------------------------------------------------------------------------
# Published formulas, each checked against the check-values file first
# ---------------------------------------------------------------------------------------

def sinusoid(n, d, base=10000.0, layout="interleaved", exponent="2i/d", positions=None):
    """Sine/cosine table. exponent "2i/d": w_i = base^(-2i/d) (Vaswani 2017 §3.5);
    "i/(d/2-1)": w_i = base^(-i/(d/2-1)) (log-timescale convention, check-values §2.1).
    `positions` and the returned angle function allow low-precision variants."""
    h = d // 2
    i = np.arange(h, dtype=np.float64)
    w = base ** (-(2 * i / d if exponent == "2i/d" else i / (h - 1)))
    pos = np.arange(n, dtype=np.float64) if positions is None else positions
    return arrange(np.outer(pos, w), layout)


def arrange(angles, layout):
    n, h = angles.shape
    out = np.zeros((n, 2 * h))
    if layout == "interleaved":
        out[:, 0::2], out[:, 1::2] = np.sin(angles), np.cos(angles)
    else:
        out[:, :h], out[:, h:] = np.sin(angles), np.cos(angles)
    return out


def low_precision_angles(n, d, dtype, layout, exponent, base=10000.0):
    """Angles computed in a low-precision dtype: angle = round(round(pos) * round(w)),
    then sin/cos (check-values §7.2 procedure)."""
    h = d // 2
    i = np.arange(h, dtype=np.float64)
    w = base ** (-(2 * i / d if exponent == "2i/d" else i / (h - 1)))
    pos = np.arange(n, dtype=np.float64).astype(dtype).astype(np.float64)
    wl = w.astype(np.float32).astype(dtype).astype(np.float64)
    ang = (pos[:, None] * wl[None, :]).astype(np.float32).astype(dtype).astype(np.float64)
    return arrange(ang, layout)


def check_sinusoid_formulas():
    # check-values §1.2: exact rows for d=8 with w = [1, 0.1, 0.01, 0.001] (base 10^4).
    t = sinusoid(3, 8)
    ref1 = [0.841470985, 0.540302306, 0.099833417, 0.995004165, 0.009999833, 0.99995, 0.001, 0.9999995]
    assert np.allclose(t[0], [0, 1, 0, 1, 0, 1, 0, 1]) and np.allclose(t[1], ref1, atol=1e-9)
    # check-values §1.3: every row of an exact table has norm sqrt(d/2).
    assert np.allclose(np.linalg.norm(sinusoid(100, 768), axis=1), math.sqrt(384))
    # check-values §7.2: Vaswani d=768 with angles computed in bf16 / f16, max abs error
    # against the exact table over the first 64, 128, 256, 512, 2048 positions.
    exact = sinusoid(2048, 768)
    for dtype, ref in ((BF16, [0.214, 0.423, 0.861, 1.94, 2.0]), (np.float16, [0.026, 0.059, 0.117, 0.233, 0.905])):
        err = np.abs(low_precision_angles(2048, 768, dtype, "interleaved", "2i/d") - exact).max(axis=1)
        got = [err[:k].max() for k in (64, 128, 256, 512, 2048)]
        assert np.allclose(got, ref, rtol=0.02, atol=0.002), (dtype, got, ref)


def t5_bucket(rp, bidirectional=True, nb=32, max_distance=128):
    """T5 relative-position bucket (check-values §5.1), log evaluated in float32."""
    ret = 0
    if bidirectional:
        nb //= 2
        ret += nb if rp > 0 else 0
        rp = abs(rp)
    else:
        rp = -min(rp, 0)
    max_exact = nb // 2
    if rp < max_exact:
        return ret + rp
    v = np.float32(math.log(np.float32(rp) / np.float32(max_exact))) / np.float32(
        math.log(max_distance / max_exact)
    ) * np.float32(nb - max_exact)
    return ret + min(max_exact + int(v), nb - 1)


def check_t5_buckets():
    # check-values §5.1, bidirectional table (32 buckets, max distance 128).
    ref = {-1000: 15, -128: 15, -64: 14, -32: 12, -16: 10, -9: 8, -8: 8, -7: 7, -1: 1, 0: 0,
           1: 17, 7: 23, 8: 24, 9: 24, 15: 25, 16: 26, 31: 27, 32: 28, 63: 29, 64: 30, 127: 31, 128: 31}
    for rp, b in ref.items():
        assert t5_bucket(rp) == b, (rp, t5_bucket(rp), b)
    used = {t5_bucket(rp) for rp in range(-2000, 2001)}
    assert set(range(32)) - used == {16}  # §5.1: bucket 16 is never produced


def inv_freq(base, head_dim):
    """1 / base^(2i/head_dim), i = 0..head_dim/2-1 (check-values §6.1), in float64."""
    return 1.0 / base ** (np.arange(0, head_dim, 2, dtype=np.float64) / head_dim)


def llama3_scaling(freqs, factor, low_freq_factor, high_freq_factor, old_context):
    """Wavelength-ramp scaling (check-values §6.6). Returns (new freqs, class per index:
    0 kept, 1 smoothed, 2 divided by factor)."""
    low_wl, high_wl = old_context / low_freq_factor, old_context / high_freq_factor
    out, cls = [], []
    for f in freqs:
        wl = 2 * math.pi / f
        if wl < high_wl:
            out.append(f), cls.append(0)
        elif wl > low_wl:
            out.append(f / factor), cls.append(2)
        else:
            s = (old_context / wl - low_freq_factor) / (high_freq_factor - low_freq_factor)
            out.append((1 - s) * f / factor + s * f), cls.append(1)
    return np.array(out), np.array(cls)


def check_rotary_formulas():
    # check-values §6.1, head_dim 128.
    f = inv_freq(1e4, 128)
    assert f[0] == 1.0 and abs(f[1] - 0.86596432) < 1e-8 and abs(f[63] - 1.1547820e-4) < 1e-11
    # check-values §7.3: bf16 of the f32 frequencies, first six values.
    b = f32(f).astype(BF16).astype(np.float64)[:6]
    assert list(b) == [1.0, 0.8671875, 0.75, 0.6484375, 0.5625, 0.486328125]
    # check-values §6.6: theta 5e5, head_dim 128, factor 8, 1, 4, 8192 -> 29 / 6 / 29 split.
    base = inv_freq(5e5, 128)
    new, cls = llama3_scaling(base, 8.0, 1.0, 4.0, 8192)
    assert [int((cls == c).sum()) for c in (0, 1, 2)] == [29, 6, 29] and list(np.where(cls == 1)[0]) == list(range(29, 35))
    div = base[29:35] / new[29:35]
    assert np.allclose(div, [1.207484, 1.553415, 2.026313, 2.694530, 3.684253, 5.257327], atol=2e-6)
    assert abs(new[63] - 3.0689e-7) < 1e-11


# ---------------------------------------------------------------------------------------
# The invented models
# ---------------------------------------------------------------------------------------

def tern(rng):
    """tern-lm: 2048-row learned table, width 64. Stage 1 trains on 512-token sequences;
    the extended run trains rows 512..1024 on a few longer sequences. The table is
    excluded from weight decay (common practice), so never-used rows stay bit-identical."""
    n, d = 2048, 64
    init = rng.normal(0.0, INIT_STD, size=(n, d))
    s1 = waves(rng, 512, d, geometric(48, 1536, 6), rms=0.08)
    base = init.copy()
    base[:512] = s1 + 0.25 * init[:512]
    base = f32(base)

    ext = base.astype(np.float64)
    ext[:512] += waves(rng, 512, d, geometric(64, 1024, 3), rms=0.006)  # slow drift
    p = np.arange(512, 1024, dtype=np.float64)
    strength = 0.6 + 0.4 * (0.5 + 0.5 * np.cos(np.pi * (p - 512) / 511))  # 1 -> 0.6
    s2 = waves(rng, 512, d, geometric(40, 1024, 5), rms=0.06)
    ext[512:1024] = strength[:, None] * s2 + (1 - 0.75 * strength)[:, None] * init[512:1024]
    ext = f32(ext)
    ext[1024:] = base[1024:]

    # Self-checks of the intended properties.
    nb = neighbour_cosines(base)
    assert nb[:511].min() > 0.9, nb[:511].min()
    noise = nb[512:]
    assert abs(noise.mean()) < 0.02 and abs(noise.std() * math.sqrt(d) - 1) < 0.1  # ~N(0, 1/d), §8.2
    assert abs(base[512:].std() / INIT_STD - 1) < 0.02
    assert np.array_equal(ext[1024:], base[1024:])
    ne = neighbour_cosines(ext)
    assert ne[:511].min() > 0.9 and ne[512:600].min() > 0.9
    snr = np.linalg.norm(strength[:, None] * s2, axis=1) / np.linalg.norm((1 - 0.75 * strength)[:, None] * init[512:1024], axis=1)
    assert snr[:64].mean() > 2 * snr[-64:].mean() and ne[960:1023].min() > 0.6  # fades, still trained
    assert ne[511] < 0.5  # rows 511 and 512 come from different phases: a sharp step
    return base, ext


def tern_small_runs(rng_a, rng_b):
    """tern-lm-small, 1024 x 64, saved at steps 1000/2000/4000/8000. Unpacked documents of
    up to 768 tokens: rows past 256 are seen less and less, rows 768.. never. AdamW with
    lr 6e-4 and weight decay 0.1 shrinks every row by (1 - lr*wd) per step; the never-used
    rows change only by that factor (applied once per saving interval, in float32)."""
    n, d, lr, wd = 1024, 64, 6e-4, 0.1
    init = rng_a.normal(0.0, INIT_STD, size=(n, d))
    s = waves(rng_a, n, d, geometric(40, 1024, 6), rms=0.08)
    p = np.arange(n, dtype=np.float64)
    strength = np.where(p < 256, 1.0, 0.15 + 0.85 * (0.5 + 0.5 * np.cos(np.pi * (p - 256) / 511)))
    strength[768:] = 0.0
    growth = {1000: 0.55, 2000: 0.8, 4000: 0.93, 8000: 1.0}
    drift = {1000: 0.012, 2000: 0.006, 4000: 0.003, 8000: 0.0}
    tables, prev, prev_step, factors = {}, None, 0, {}
    for step in (1000, 2000, 4000, 8000):
        g = growth[step] * strength
        dr = waves(rng_a, n, d, geometric(30, 600, 4), rms=drift[step]) if drift[step] > 0 else 0.0
        x = (1.0 - lr * wd) ** step * (1 - 0.75 * g)[:, None] * init + g[:, None] * (s + dr)
        x = f32(x)
        f = decay_factor(lr, wd, step - prev_step)
        src = f32(init) if prev is None else prev
        x[768:] = src[768:] * f  # float32 product, rounded once
        factors[step] = float(f)
        tables[step], prev, prev_step = x, x, step

    # Run b: another seed. Trained geometry is the same up to a rotation of the embedding
    # space (plus small noise); its never-used rows are its own init, decayed.
    q = orthonormal(rng_b, d, d)
    init_b = rng_b.normal(0.0, INIT_STD, size=(n, d))
    xb = tables[8000].astype(np.float64) @ q + rng_b.normal(0.0, 0.002, size=(n, d))
    xb = f32(xb)
    xb[768:] = f32(init_b[768:]) * decay_factor(lr, wd, 8000)

    # Self-checks.
    steps = sorted(tables)
    change = []
    for a, b in zip(steps, steps[1:]):
        ta, tb = tables[a].astype(np.float64), tables[b].astype(np.float64)
        c = (tb[768:] * ta[768:]).sum() / (ta[768:] ** 2).sum()  # one common scale factor
        assert abs(c - factors[b]) < 1e-7, (c, factors[b])
        rel = np.linalg.norm(tb[768:] - factors[b] * ta[768:], axis=1) / np.linalg.norm(tb[768:], axis=1)
        assert rel.max() <= 2.0**-23, rel.max()  # within float32 rounding of one product
        assert np.array_equal(tables[b][768:], tables[a][768:] * np.float32(factors[b]))
        change.append(np.linalg.norm(tb[:256] - ta[:256], axis=1).mean())
    assert change[0] > change[1] > change[2], change  # rows move less over time
    x8 = tables[8000].astype(np.float64)
    assert neighbour_cosines(x8)[:255].min() > 0.9
    assert abs(neighbour_cosines(x8)[768:].mean()) < 0.03
    cos_ab = np.sum(x8[:768] * xb[:768], axis=1) / (np.linalg.norm(x8[:768], axis=1) * np.linalg.norm(xb[:768], axis=1))
    assert np.abs(cos_ab).mean() < 0.25, np.abs(cos_ab).mean()  # per-row cosine near 0
    ga, gb = x8[:768] @ x8[:768].T, xb[:768].astype(np.float64) @ xb[:768].astype(np.float64).T
    cka = (ga * gb).sum() / (np.linalg.norm(ga) * np.linalg.norm(gb))
    assert cka > 0.99, cka  # same geometry: rotation-invariant similarity high
    return tables, xb, factors, {"lr": lr, "weight_decay": wd}


def whimbrel(rng):
    """whimbrel encoder: fixed 512 x 64 sine/cosine table, split halves, log-timescale
    frequencies; one copy computed with bf16 angles and saved as float32."""
    n, d = 512, 64
    exact64 = sinusoid(n, d, layout="split", exponent="i/(d/2-1)")
    exact = f32(exact64)
    low = low_precision_angles(n, d, BF16, "split", "i/(d/2-1)")
    low = f32(low.astype(BF16).astype(np.float64))  # bf16 results, saved as float32
    err = np.abs(low.astype(np.float64) - exact64).max(axis=1)
    prof = [err[:k].max() for k in (64, 128, 256, 512)]
    # Orders of magnitude of check-values §7.2 (bf16: 0.214, 0.423, 0.861, 1.94).
    for got, ref in zip(prof, (0.214, 0.423, 0.861, 1.94)):
        assert ref / 4 < got < ref * 2, (prof,)
    assert prof[0] < prof[1] < prof[2] < prof[3]  # grows with position
    assert prof[0] > 20 * 2.0**-9  # far above the bf16 storage half-ULP (1.95e-3, §7.2)
    assert np.abs(exact.astype(np.float64) - exact64).max() < 1e-7
    assert np.allclose(np.linalg.norm(exact64, axis=1), math.sqrt(d / 2))  # §1.3
    extra = {
        "whimbrel.encoder.embed_tokens.weight": f32(rng.normal(0, INIT_STD, (128, d))),
        "whimbrel.encoder.layers.0.self_attn_layer_norm.weight": f32(1 + rng.normal(0, 0.05, d)),
        "whimbrel.encoder.layers.0.self_attn.k_proj.weight": f32(rng.normal(0, INIT_STD, (d, d))),
    }
    return exact, low, prof, extra


def kittiwake(rng):
    """kittiwake vision model: 96 px images, 8 px patches, a 12 x 12 grid plus a class
    row, width 64, stored as float16 with shape (1, 145, 64)."""
    side, d = 12, 64
    sy = waves(rng, side, d, [30.0, 14.0, 9.0], rms=0.05)
    sx = waves(rng, side, d, [28.0, 13.0, 8.0], rms=0.05)
    init = rng.normal(0.0, INIT_STD, size=(side * side + 1, d))
    grid = (sy[:, None, :] + sx[None, :, :]).reshape(side * side, d) + 0.25 * init[1:]
    cls = rng.normal(0.0, 0.06, size=(1, d))
    table = np.concatenate([cls, grid])[None].astype(np.float16)
    g = table[0, 1:].astype(np.float64).reshape(side, side, d)
    right = np.sum(g[:, :-1] * g[:, 1:], -1) / (np.linalg.norm(g[:, :-1], axis=-1) * np.linalg.norm(g[:, 1:], axis=-1))
    down = np.sum(g[:-1] * g[1:], -1) / (np.linalg.norm(g[:-1], axis=-1) * np.linalg.norm(g[1:], axis=-1))
    assert right.min() > 0.7 and down.min() > 0.7, (right.min(), down.min())
    c = table[0, 0].astype(np.float64)
    cc = g.reshape(-1, d) @ c / (np.linalg.norm(g.reshape(-1, d), axis=1) * np.linalg.norm(c))
    assert np.abs(cc).max() < 0.6  # the class row is not part of the grid
    extra = {
        "kittiwake.vision.embeddings.patch_embedding.weight": f32(rng.normal(0, INIT_STD, (d, 3, 8, 8))),
        "kittiwake.vision.embeddings.class_embedding": f32(rng.normal(0, INIT_STD, d)),
        "kittiwake.vision.encoder.layers.0.layer_norm1.weight": f32(1 + rng.normal(0, 0.05, d)),
        "kittiwake.vision.encoder.layers.0.self_attn.q_proj.weight": f32(rng.normal(0, INIT_STD, (d, d))),
    }
    return table, extra


def dunlin(rng):
    """dunlin rotary model: head_dim 64, theta 1e4, context extended from 2048 to 16384
    with the wavelength-ramp scaling (factor 8, low 1, high 4)."""
    head_dim, theta = 64, 1e4
    scaling = {"rope_type": "llama3", "factor": 8.0, "low_freq_factor": 1.0,
               "high_freq_factor": 4.0, "original_max_position_embeddings": 2048}
    base = inv_freq(theta, head_dim)
    new, cls = llama3_scaling(base, 8.0, 1.0, 4.0, 2048)
    split = [int((cls == c).sum()) for c in (0, 1, 2)]
    # Hand derivation for head_dim 64, theta 1e4, old context 2048: wavelengths below
    # 512 are kept (i <= 15), above 2048 divided (i >= 21), five smoothed between.
    assert split == [16, 5, 11] and list(np.where(cls == 1)[0]) == [16, 17, 18, 19, 20], split
    assert np.allclose(new[21:], base[21:] / 8) and np.array_equal(new[:16], base[:16])
    stored = f32(new)
    low = stored.astype(BF16)
    rel = np.abs(low.astype(np.float64) / stored - 1)
    assert 1e-3 < rel.max() <= 2.0**-8  # bf16 rounding, half-ULP relative bound
    hidden = 128
    extra = {
        "dunlin.embed_tokens.weight": f32(rng.normal(0, INIT_STD, (64, hidden))),
        "dunlin.layers.0.input_layernorm.weight": f32(1 + rng.normal(0, 0.05, hidden)),
        "dunlin.layers.0.self_attn.q_proj.weight": f32(rng.normal(0, INIT_STD, (hidden, hidden))),
    }
    return stored, low, scaling, split, extra


def godwit(rng):
    """godwit encoder: T5-style relative bias, 32 buckets, 8 heads, bidirectional, max
    distance 128. Bucket 16 is unreachable and keeps its N(0, 64^-0.5) init (§5.1)."""
    nb, heads, d_model = 32, 8, 64
    dist = {}
    for rp in range(-128, 129):
        dist.setdefault(t5_bucket(rp), []).append(rp)
    rep = {b: float(np.mean(v)) for b, v in dist.items()}
    assert 16 not in rep
    l = lambda x: math.log1p(abs(x))
    heads_fn = [
        lambda x: -0.9 * l(x),
        lambda x: -1.2 * l(x) if x <= 0 else -2.5 * l(x),
        lambda x: 0.6 * l(x),
        lambda x: 3.0 * math.exp(-((x + 1) ** 2) / 2) - 0.3 * l(x),
        lambda x: 3.0 * math.exp(-((x - 1) ** 2) / 2) - 0.3 * l(x),
        lambda x: 1.0 - 0.5 * l(x),
        lambda x: -1.6 * l(x),
        lambda x: 0.3 * l(x) - (0.8 if x == 0 else 0.0),
    ]
    init_std = d_model**-0.5
    table = np.zeros((nb, heads))
    for b in range(nb):
        if b == 16:
            table[b] = rng.normal(0.0, init_std, heads)
        else:
            table[b] = [f(rep[b]) for f in heads_fn] + rng.normal(0.0, 0.03, heads)
    table = f32(table)
    row = table[16].astype(np.float64)
    rms, mean = math.sqrt((row**2).mean()), row.mean()
    assert 0.5 < rms / init_std < 1.5 and abs(mean) < 2 * init_std / math.sqrt(heads), (rms, mean)
    extra = {
        "godwit.encoder.embed_tokens.weight": f32(rng.normal(0, INIT_STD, (128, d_model))),
        "godwit.encoder.block.0.layer.0.layer_norm.weight": f32(1 + rng.normal(0, 0.05, d_model)),
        "godwit.encoder.block.0.layer.0.SelfAttention.q.weight": f32(rng.normal(0, INIT_STD, (d_model, d_model))),
    }
    return table, extra


# ---------------------------------------------------------------------------------------
# Writing
# ---------------------------------------------------------------------------------------

def write(name, tensors, config):
    folder = os.path.join(OUT, name)
    os.makedirs(folder)
    save_file({k: np.ascontiguousarray(v) for k, v in tensors.items()},
              os.path.join(folder, "model.safetensors"), metadata=META)
    with open(os.path.join(folder, "config.json"), "w") as f:
        json.dump(config, f, indent=2, sort_keys=True)
        f.write("\n")


def tern_extra(rng, d=64):
    return {
        "tern.embeddings.word_embeddings.weight": f32(rng.normal(0, INIT_STD, (128, d))),
        "tern.layers.0.attn_norm.weight": f32(1 + rng.normal(0, 0.05, d)),
        "tern.layers.0.attn.qkv.weight": f32(rng.normal(0, INIT_STD, (d, 3 * d))),
    }


def main():
    check_sinusoid_formulas()
    check_t5_buckets()
    check_rotary_formulas()

    if os.path.isdir(OUT):
        shutil.rmtree(OUT)
    os.makedirs(OUT)
    rngs = {k: np.random.default_rng(v) for k, v in SEEDS.items()}

    tern_cfg = {"model_type": "tern", "max_position_embeddings": 2048, "hidden_size": 64,
                "num_attention_heads": 4, "initializer_range": INIT_STD}
    base, ext = tern(rngs["tern"])
    t_extra = tern_extra(rngs["tern"])
    ids = np.arange(2048, dtype=np.int64)[None, :]
    write("text-base", {"tern.embeddings.position_embeddings.weight": base,
                        "tern.embeddings.position_ids": ids, **t_extra}, tern_cfg)
    write("text-extended", {"tern.embeddings.position_embeddings.weight": ext, **t_extra}, tern_cfg)

    small_cfg = dict(tern_cfg, model_type="tern", max_position_embeddings=1024)
    runs, run_b, factors, optim = tern_small_runs(rngs["tern-small-run-a"], rngs["tern-small-run-b"])
    s_extra = tern_extra(rngs["tern-small-run-a"])
    for step, table in runs.items():
        write(f"run-a/step-{step}", {"tern.embeddings.position_embeddings.weight": table, **s_extra}, small_cfg)
    write("run-b/step-8000", {"tern.embeddings.position_embeddings.weight": run_b, **s_extra}, small_cfg)

    whimbrel_cfg = {"model_type": "whimbrel", "max_position_embeddings": 512, "hidden_size": 64,
                  "num_attention_heads": 4, "initializer_range": INIT_STD}
    exact, low, prof, p_extra = whimbrel(rngs["whimbrel"])
    write("encoder-fixed", {"whimbrel.encoder.embed_positions.weight": exact, **p_extra}, whimbrel_cfg)
    write("encoder-fixed-bf16-angles", {"whimbrel.encoder.embed_positions.weight": low, **p_extra}, whimbrel_cfg)

    kit_cfg = {"model_type": "kittiwake", "hidden_size": 64, "num_attention_heads": 4,
               "image_size": 96, "patch_size": 8, "initializer_range": INIT_STD}
    grid, k_extra = kittiwake(rngs["kittiwake"])
    write("vision-grid", {"kittiwake.vision.embeddings.position_embeddings": grid, **k_extra}, kit_cfg)

    stored, low_rope, scaling, split, d_extra = dunlin(rngs["dunlin"])
    dun_cfg = {"model_type": "dunlin", "max_position_embeddings": 16384, "hidden_size": 128,
               "num_attention_heads": 2, "head_dim": 64, "rope_theta": 10000.0,
               "rope_scaling": scaling, "initializer_range": INIT_STD}
    rope = lambda v: {f"dunlin.layers.{i}.self_attn.rotary_emb.inv_freq": v for i in (0, 1)}
    write("rotary-extended", {**rope(stored), **d_extra}, dun_cfg)
    write("rotary-extended-bf16", {**rope(low_rope), **d_extra}, dun_cfg)

    rel, g_extra = godwit(rngs["godwit"])
    god_cfg = {"model_type": "godwit", "hidden_size": 64, "num_attention_heads": 8,
               "relative_attention_num_buckets": 32, "relative_attention_max_distance": 128,
               "initializer_range": INIT_STD}
    rel_name = "godwit.encoder.block.0.layer.0.SelfAttention.relative_attention_bias.weight"
    write("t5-like", {rel_name: rel, **g_extra}, god_cfg)

    # One checkpoint holding one table of each kind, for the README's first command.
    show_cfg = {"model_type": "tern-showcase", "max_position_embeddings": 2048, "hidden_size": 64,
                "num_attention_heads": 8, "head_dim": 64, "initializer_range": INIT_STD,
                "rope_theta": 10000.0, "rope_scaling": scaling,
                "relative_attention_num_buckets": 32, "relative_attention_max_distance": 128,
                "image_size": 96, "patch_size": 8, "max_source_positions": 512}
    write("showcase", {
        "tern.embeddings.position_embeddings.weight": base,
        "tern.embeddings.position_ids": ids,
        "whimbrel.encoder.embed_positions.weight": low,
        "kittiwake.vision.embeddings.position_embeddings": grid,
        rel_name: rel,
        "dunlin.layers.0.self_attn.rotary_emb.inv_freq": stored,
        **t_extra,
    }, show_cfg)

    files = {}
    for root, _, names in sorted(os.walk(OUT)):
        for n in sorted(names):
            path = os.path.join(root, n)
            with open(path, "rb") as f:
                files[os.path.relpath(path, HERE)] = hashlib.sha256(f.read()).hexdigest()
    prov = {
        "data": "invented: built from formulas and seeded random numbers, nothing trained",
        "seed": SEED,
        "component_seeds": SEEDS,
        "python": platform.python_version(),
        "numpy": np.__version__,
        "safetensors": safetensors.__version__,
        "ml_dtypes": ml_dtypes.__version__,
        "writer": "safetensors (Python) save_file",
        "run_a_optimizer": optim,
        "run_a_never_used_rows_scale_since_previous_save (step 1000: since init)": {str(k): v for k, v in factors.items()},
        "whimbrel_bf16_angle_max_abs_error": {"pos<64": prof[0], "pos<128": prof[1], "pos<256": prof[2], "pos<512": prof[3]},
        "dunlin_frequency_split_kept_smoothed_divided": split,
        "files_sha256": files,
        "note": "byte-identical on re-run with these versions on one machine; numpy's sin/cos "
                "may differ in the last bit between CPUs, so other machines may differ slightly",
    }
    with open(os.path.join(HERE, "PROVENANCE.json"), "w") as f:
        json.dump(prov, f, indent=2, sort_keys=True)
        f.write("\n")


if __name__ == "__main__":
    main()
