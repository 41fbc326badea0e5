#!/usr/bin/env bash
# Side-by-side timing of posaudit's linalg seam against numpy on the same random tables.
#
#   bench/svd_bench.sh [--features lapack] [SIZES...]     (default sizes 1024x768 4096x1024 8192x4096)
#
# Ours: linalg::singular_values + linalg::leading_components(.., 8), release build, one thread
# (POSAUDIT_THREADS overrides). numpy: np.linalg.svd(x, full_matrices=False) from a venv with numpy (PYTHON=...),
# with OPENBLAS_NUM_THREADS=1 (and OMP/MKL likewise) for a fair one-thread comparison.
# Prints one line per size with both times and ratio = ours / numpy (target <= 1.0).
set -euo pipefail
cd "$(dirname "$0")/.."
features=()
if [[ "${1:-}" == "--features" ]]; then features=(--features "$2"); shift 2; fi
sizes=("$@")
[[ ${#sizes[@]} -eq 0 ]] && sizes=(1024x768 4096x1024 8192x4096)
py=${PYTHON:-python3}
tmp=$(mktemp -d)
trap 'rm -rf "$tmp"' EXIT
export OPENBLAS_NUM_THREADS=${OPENBLAS_NUM_THREADS:-1} OMP_NUM_THREADS=${OMP_NUM_THREADS:-1} MKL_NUM_THREADS=${MKL_NUM_THREADS:-1}
cargo build --release --quiet "${features[@]}" --example bench_linalg
ours=$(target/release/examples/bench_linalg "$tmp" "${sizes[@]}")
theirs=$("$py" bench/svd_bench.py "$tmp" "${sizes[@]}")
printf '%-12s %12s %12s %8s\n' size posaudit_s numpy_s ratio
paste -d' ' <(echo "$ours") <(echo "$theirs") | while read -r size a _ b; do
  printf '%-12s %12.3f %12.3f %8.2f\n' "$size" "$a" "$b" "$(echo "$a / $b" | bc -l)"
done
