"""The `posaudit` console command of the wheel runs the same command line as the binary:
same stdout, same stderr, same exit code (0 done, 1 a finding at or above --fail-on,
2 unusable input or arguments)."""

import shutil
import subprocess
import sys

import pytest

import posaudit
from conftest import REPO, run_binary

CASES = [
    (["--help"], 0),
    (["--version"], 0),
    (["audit", "--help"], 0),
    (["scan", "examples/demo/checkpoints/showcase"], 0),
    (["scan", "examples/demo/checkpoints/showcase", "--json"], 0),
    (["audit", "examples/demo/checkpoints/text-extended", "--fail-on", "warning"], 1),
    (["audit", "examples/demo/checkpoints/text-extended", "--fail-on", "error"], 0),
    (["audit", "examples/demo/checkpoints/no-such-folder"], 2),
    (["audit"], 2),
    (["frobnicate"], 2),
    (["compare", "examples/demo/checkpoints/run-a/step-1000"], 2),
]


def console():
    found = shutil.which("posaudit", path=str(__import__("pathlib").Path(sys.executable).parent))
    assert found, "the wheel's posaudit console command is not installed beside this python"
    return found


@pytest.mark.parametrize("args,code", CASES, ids=[" ".join(a) for a, _ in CASES])
def test_console_command_matches_the_binary(binary, args, code):
    ours = subprocess.run([console(), *args], capture_output=True, text=True, cwd=REPO)
    theirs = run_binary(binary, *args)
    assert theirs.returncode == code, theirs.stderr
    assert (ours.returncode, ours.stdout, ours.stderr) == (theirs.returncode, theirs.stdout, theirs.stderr)


def test_run_cli_returns_the_exit_code(capfd):
    assert posaudit.run_cli(["posaudit", "audit", str(REPO / "examples/demo/checkpoints/text-extended"), "--fail-on", "warning", "--json"]) == 1
    assert posaudit.run_cli(["posaudit", "scan", "/no/such/path"]) == 2
    captured = capfd.readouterr()
    assert '"schema": "posaudit/audit/v1"' in captured.out
    assert captured.err.strip().startswith("posaudit: /no/such/path: cannot read")
