#!/usr/bin/env bash
# Runs tests/reference/real_checkpoints.py in its own virtual environment (outside the
# repository) with pinned versions, on the real checkpoints that .ci/real-checkpoints.sh
# downloads, and writes tests/reference/real_checkpoints.json.
set -euo pipefail
here="$(cd "$(dirname "$0")" && pwd)"
venv="${HOME}/.cache/posaudit-ref-venv"
if [ ! -x "$venv/bin/python" ]; then
  python3 -m venv "$venv"
fi
"$venv/bin/pip" install -q "numpy==2.4.6" "safetensors==0.8.0" "gguf==0.19.0"
# shellcheck source=/dev/null
POSAUDIT_CI_LARGE="${POSAUDIT_CI_LARGE:-1}" . "$here/../../.ci/real-checkpoints.sh"
"$venv/bin/python" "$here/real_checkpoints.py" "$here/real_checkpoints.json"
