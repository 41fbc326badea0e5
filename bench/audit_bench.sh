#!/usr/bin/env bash
# Whole `posaudit audit PATH --json` against a notebook (safetensors load + f64 numpy SVD)
# on invented 1024x768, 4096x2048 and 8192x4096 F32 tables: times, ratio, peak RSS.
#
#   bench/audit_bench.sh [--sizes 1024x768,4096x2048] [--repeats N]
#
# Builds the release binary, makes the notebook venv at .bench/venv (git-ignored) with the
# pinned packages below, then runs bench/audit_bench.py (see its docstring for details).
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
export OPENBLAS_NUM_THREADS=1 OMP_NUM_THREADS=1 MKL_NUM_THREADS=1
exec "$venv/bin/python" bench/audit_bench.py "$@"
