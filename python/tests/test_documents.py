"""Every API call on the demo checkpoints returns the document the binary prints with
`--json` (both parsed and compared whole), and `out=` writes the same folder as `--out`."""

import filecmp
import json
import pathlib

import pytest

import posaudit
from conftest import DEMO, cli_error, cli_json

# Every demo checkpoint (relative to the repository root, as the demo reports use them).
SINGLE = sorted(
    str(p.relative_to(DEMO.parents[2]))
    for p in DEMO.iterdir()
    if (p / "model.safetensors").is_file()
)
RUN_A = [f"examples/demo/checkpoints/run-a/step-{s}" for s in (1000, 2000, 4000, 8000)]
RUN_B = "examples/demo/checkpoints/run-b/step-8000"


def test_the_demo_set_is_there():
    assert len(SINGLE) >= 8, SINGLE


@pytest.mark.parametrize("path", SINGLE)
def test_scan_equals_cli(binary, in_repo, path):
    assert posaudit.scan(path) == cli_json(binary, "scan", path)


@pytest.mark.parametrize("path", SINGLE + [RUN_A[0]])
def test_audit_equals_cli(binary, in_repo, path):
    assert posaudit.audit(path) == cli_json(binary, "audit", path)


def test_scan_and_audit_with_a_forced_table_equal_cli(binary, in_repo):
    path = "examples/demo/checkpoints/showcase"
    names = [t["name"] for t in posaudit.scan(path)["tables"]]
    assert names
    assert posaudit.scan(path, tables=names[:1]) == cli_json(binary, "scan", path, "--table", names[0])
    assert posaudit.audit(path, tables=[names[0]]) == cli_json(
        binary, "audit", path, "--table", names[0]
    )


def test_file_picks_a_weight_file_of_the_folder_as_the_cli_does(binary, in_repo, tmp_path):
    # A folder with two weight files (the conventional name and an EMA copy), as the
    # folder tests of the binary build it; both files are demo checkpoints.
    import shutil

    shutil.copy(f"{SINGLE[0]}/model.safetensors", tmp_path / "model.safetensors")
    shutil.copy(f"{SINGLE[1]}/model.safetensors", tmp_path / "model_ema.safetensors")
    folder = str(tmp_path)
    picked = posaudit.audit(folder, file="model_ema.safetensors")
    assert picked == cli_json(binary, "audit", folder, "--file", "model_ema.safetensors")
    assert picked["checkpoint"]["folder"]["files"] == ["model_ema.safetensors"]
    assert picked["checkpoint"]["folder"]["named"] is True
    assert posaudit.scan(folder, file="model_ema.safetensors") == cli_json(
        binary, "scan", folder, "--file", "model_ema.safetensors"
    )
    default = posaudit.audit(folder)
    assert default["checkpoint"]["folder"]["files"] == ["model.safetensors"]
    assert default["checkpoint"]["folder"]["named"] is False
    with pytest.raises(posaudit.InputError) as e:
        posaudit.audit(folder, file="missing.safetensors")
    assert str(e.value) == cli_error(binary, "audit", folder, "--file", "missing.safetensors")


@pytest.mark.parametrize(
    "paths", [RUN_A[:2], RUN_A, [RUN_A[-1], RUN_B]], ids=["two-steps", "run-a", "two-runs"]
)
def test_compare_equals_cli(binary, in_repo, paths):
    assert posaudit.compare(paths) == cli_json(binary, "compare", *paths)


def same_folder(a: pathlib.Path, b: pathlib.Path):
    names_a = sorted(p.name for p in a.iterdir())
    names_b = sorted(p.name for p in b.iterdir())
    assert names_a == names_b
    assert "report.md" in names_a and "report.json" in names_a
    assert any(n.endswith(".svg") for n in names_a)
    match, mismatch, errors = filecmp.cmpfiles(a, b, names_a, shallow=False)
    assert mismatch == [] and errors == [], (mismatch, errors)


def test_audit_out_writes_the_cli_folder(binary, in_repo, tmp_path):
    path = "examples/demo/checkpoints/text-extended"
    doc = posaudit.audit(path, out=tmp_path / "py")
    cli_json(binary, "audit", path, "--out", tmp_path / "cli")
    same_folder(tmp_path / "py", tmp_path / "cli")
    assert json.loads((tmp_path / "py" / "report.json").read_text()) == doc


def test_compare_out_writes_the_cli_folder(binary, in_repo, tmp_path):
    doc = posaudit.compare(RUN_A, out=tmp_path / "py")
    cli_json(binary, "compare", *RUN_A, "--out", tmp_path / "cli")
    same_folder(tmp_path / "py", tmp_path / "cli")
    assert json.loads((tmp_path / "py" / "report.json").read_text()) == doc


def test_fail_on_raises_with_the_complete_report(binary, in_repo):
    path = "examples/demo/checkpoints/text-extended"
    doc = posaudit.audit(path)
    level = posaudit.worst(doc)
    # The demo's extended table has an untrained tail: a warning (README demo).
    assert level == "warning"
    with pytest.raises(posaudit.FindingsError) as e:
        posaudit.audit(path, fail_on="warning")
    assert e.value.report == doc and e.value.level == "warning"
    # `--fail-on error` passes on the same file, as the binary's exit code 0 says.
    assert posaudit.audit(path, fail_on="error") == doc


def test_worst_reads_summary_and_compare_findings():
    assert posaudit.worst({"summary": {"error": 0, "warning": 0, "info": 0}}) is None
    assert posaudit.worst({"summary": {"error": 1, "warning": 0, "info": 3}}) == "error"
    compare_doc = {"tables": [{"findings": [{"severity": "info"}, {"severity": "warning"}]}]}
    assert posaudit.worst(compare_doc) == "warning"
