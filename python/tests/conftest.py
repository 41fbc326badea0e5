"""Shared fixtures: the repository, its demo checkpoints and the posaudit binary.

The binary is the reference every document is compared with: `POSAUDIT_BIN`, else the
repository's `target/release/posaudit`, else `target/debug/posaudit` (ci.sh builds the
release one).
"""

import json
import os
import pathlib
import subprocess

import pytest

REPO = pathlib.Path(__file__).resolve().parents[2]
DEMO = REPO / "examples" / "demo" / "checkpoints"


def find_binary() -> pathlib.Path:
    env = os.environ.get("POSAUDIT_BIN")
    candidates = [pathlib.Path(env)] if env else []
    candidates += [REPO / "target" / "release" / "posaudit", REPO / "target" / "debug" / "posaudit"]
    for c in candidates:
        if c.is_file():
            return c
    raise RuntimeError(
        "no posaudit binary: set POSAUDIT_BIN or run `cargo build --release` in the repository"
    )


@pytest.fixture(scope="session")
def binary() -> pathlib.Path:
    return find_binary()


@pytest.fixture
def in_repo(monkeypatch):
    """Run from the repository root, so relative paths in documents match the CLI's."""
    monkeypatch.chdir(REPO)
    return REPO


def run_binary(binary, *args, cwd=None):
    return subprocess.run(
        [str(binary), *map(str, args)], capture_output=True, text=True, cwd=cwd or REPO
    )


def cli_json(binary, *args, cwd=None):
    """The parsed `--json` document of the binary; fails on a non-zero exit."""
    done = run_binary(binary, *args, "--json", cwd=cwd)
    assert done.returncode == 0, done.stderr
    return json.loads(done.stdout)


def cli_error(binary, *args, cwd=None) -> str:
    """The binary's one-line error (exit code 2), without the `posaudit: ` prefix."""
    done = run_binary(binary, *args, cwd=cwd)
    assert done.returncode == 2, (done.returncode, done.stdout, done.stderr)
    lines = done.stderr.strip().splitlines()
    assert len(lines) == 1, done.stderr
    assert lines[0].startswith("posaudit: ")
    return lines[0][len("posaudit: "):]
