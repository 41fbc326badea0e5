#!/usr/bin/env bash
# Builds the posaudit wheel once, tests it, and checks that it installs and runs in a
# clean venv with no Rust toolchain on PATH. Called by CI; runnable by hand:
#     python/ci.sh
# Venvs, the pip cache and the wheel live outside the repository, under
# $POSAUDIT_PY_CACHE (default ~/.cache/posaudit-python). Prints the build and test times
# and the wheel's size.
set -euo pipefail

HERE="$(cd "$(dirname "${BASH_SOURCE[0]}")" && pwd)"
REPO="$(dirname "$HERE")"
CACHE="${POSAUDIT_PY_CACHE:-$HOME/.cache/posaudit-python}"
PYTHON="${PYTHON:-python3}"
export PIP_CACHE_DIR="$CACHE/pip"
export PIP_DISABLE_PIP_VERSION_CHECK=1

# Pinned versions (numpy 2.5 needs Python >= 3.12; 2.4.6 serves 3.11).
MATURIN="maturin==1.16.0"
TEST_DEPS=(pytest==9.2.0 numpy==2.4.6 safetensors==0.8.0 ml-dtypes==0.6.0)

WORK="$CACHE/ci"
rm -rf "$WORK"
mkdir -p "$WORK/wheel"
start=$(date +%s)

# 1. maturin in its own venv; the wheel built once, in release mode. The Rust build
#    shares the repository's target/ folder, and the reference binary is built there too.
"$PYTHON" -m venv "$WORK/build"
"$WORK/build/bin/pip" install -q "$MATURIN"
(cd "$HERE" && "$WORK/build/bin/maturin" build --release --locked --target-dir "$REPO/target" -o "$WORK/wheel")
(cd "$REPO" && cargo build --release --locked --bin posaudit)
built=$(date +%s)
wheel=$(ls "$WORK"/wheel/posaudit-*.whl)
echo "ci.sh: wheel $(basename "$wheel"), $(du -k "$wheel" | cut -f1) KiB, built in $((built - start)) s"

# 2. Tests against the binary, in a venv with the test dependencies.
"$PYTHON" -m venv "$WORK/test"
"$WORK/test/bin/pip" install -q "${TEST_DEPS[@]}"
"$WORK/test/bin/pip" install -q "$wheel"
(cd "$HERE/tests" && POSAUDIT_BIN="$REPO/target/release/posaudit" "$WORK/test/bin/python" -m pytest -q -p no:cacheprovider .)
tested=$(date +%s)

# 3. The same wheel in a clean venv, with no Rust toolchain on PATH and no NumPy.
"$PYTHON" -m venv "$WORK/clean"
"$WORK/clean/bin/pip" install -q "$wheel"
CLEAN_PATH="$WORK/clean/bin:/usr/local/sbin:/usr/local/bin:/usr/sbin:/usr/bin:/sbin:/bin"
(
    cd "$WORK"
    export PATH="$CLEAN_PATH"
    unset CARGO_HOME RUSTUP_HOME
    if command -v cargo >/dev/null 2>&1 || command -v rustc >/dev/null 2>&1; then
        echo "ci.sh: a Rust toolchain is still on PATH ($(command -v cargo rustc | head -1))" >&2
        exit 1
    fi
    python -c 'import posaudit, sys; d = posaudit.scan(sys.argv[1]); assert d["schema"] == "posaudit/scan/v1"; print("import posaudit", posaudit.__version__, "ok")' \
        "$REPO/examples/demo/checkpoints/showcase"
    posaudit --help >/dev/null
    code=0
    posaudit audit "$REPO/examples/demo/checkpoints/text-extended" --fail-on warning >/dev/null || code=$?
    [ "$code" = 1 ] || { echo "ci.sh: expected exit 1 from --fail-on warning, got $code" >&2; exit 1; }
    echo "posaudit command ok (exit codes 0 and 1 seen)"
)
done_at=$(date +%s)
echo "ci.sh: build $((built - start)) s, tests $((tested - built)) s, clean install $((done_at - tested)) s, total $((done_at - start)) s"
