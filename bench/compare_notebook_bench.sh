#!/usr/bin/env bash
# `posaudit compare A B --json` (1 thread and all cores) against the notebook reference
# (safetensors + numpy) on two 2048x1024 F32 checkpoints, plus a 20-checkpoint run for
# peak RSS; prints ratios. See bench/compare_notebook_bench.py. Uses the pinned venv of
# bench/audit_bench.sh (.bench/venv).
set -euo pipefail
cd "$(dirname "$0")/.."
pins=(numpy==2.4.6 safetensors==0.8.0 threadpoolctl==3.8.0)
venv=.bench/venv
cargo build --release --quiet
if [[ ! -x $venv/bin/python || "$(cat $venv/.pins 2>/dev/null)" != "${pins[*]}" ]]; then
  rm -rf "$venv"
  python3 -m venv "$venv"
  "$venv/bin/pip" install --quiet --disable-pip-version-check "${pins[@]}"
  echo "${pins[*]}" > "$venv/.pins"
fi
exec "$venv/bin/python" bench/compare_notebook_bench.py "$@"
