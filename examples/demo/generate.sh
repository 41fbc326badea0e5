#!/usr/bin/env bash
# Regenerates posaudit's demo checkpoints (invented data) byte for byte.
# Makes its own virtual environment in examples/demo/.venv (not committed) with pinned
# versions; PyTorch is not needed.
set -euo pipefail
here=$(cd "$(dirname "$0")" && pwd)
venv="$here/.venv"
if [ ! -x "$venv/bin/python" ]; then
  python3 -m venv "$venv"
fi
"$venv/bin/pip" install -q "numpy==2.4.6" "safetensors==0.8.0" "ml_dtypes==0.7.0"
"$venv/bin/python" "$here/generate.py"
echo "demo checkpoints written under $here/checkpoints (hashes in $here/PROVENANCE.json)"
echo "generate.py rewrote checkpoints/ from scratch: re-create the edited ones (text-base-4096, vision-grid-16x16) with POSAUDIT_BLESS_DEMO=1 cargo test --test demo_edits"
