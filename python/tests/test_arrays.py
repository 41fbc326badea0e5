"""`audit_array` / `compare_arrays` against the binary on the same values written to a
file by the reference safetensors writer (the `safetensors` package), for every table
of the demo checkpoints, float16 and bfloat16 (ml_dtypes) arrays, strided views, and
bad input."""

import json

import ml_dtypes
import numpy as np
import pytest
from safetensors.numpy import load_file, save_file

import posaudit
from conftest import DEMO, cli_error, cli_json

# Demo checkpoints whose tables numpy can load (the bf16 ones are covered below by casts).
NUMPY_DEMOS = ["encoder-fixed", "showcase", "t5-like", "text-base", "text-extended", "vision-grid"]


def demo_tables():
    out = []
    for demo in NUMPY_DEMOS:
        path = DEMO / demo / "model.safetensors"
        tensors = load_file(path)
        for t in posaudit.scan(path)["tables"]:
            out.append(pytest.param(demo, t["name"], t["kind"], id=f"{demo}:{t['name']}"))
    return out


def kind_for(array, kind):
    # 1-D and integer tables are only taken with their kind stated (see audit_array).
    squeezed = [d for d in array.shape if d != 1]
    return kind if len(squeezed) <= 1 or array.dtype.kind == "i" else None


def file_table(binary, tmp_path, name, array, config=None):
    """The binary's audit of `array` saved alone with the reference writer."""
    folder = tmp_path / "file"
    folder.mkdir(exist_ok=True)
    save_file({name: np.ascontiguousarray(array)}, folder / "model.safetensors")
    if config is not None:
        (folder / "config.json").write_text(json.dumps(config))
    doc = cli_json(binary, "audit", folder / "model.safetensors", "--table", name)
    assert len(doc["tables"]) == 1
    return doc["tables"][0]


def same_table(mem_doc, file_entry, stated_kind):
    assert mem_doc["schema"] == "posaudit/audit/v1"
    assert mem_doc["checkpoint"]["format"] == "memory"
    assert mem_doc["checkpoint"]["path"] == "<array>"
    assert len(mem_doc["tables"]) == 1
    mem = dict(mem_doc["tables"][0])
    ref = dict(file_entry)
    # Only where the table lives differs: the file name, and (when the caller states the
    # kind) the detector's reason.
    assert mem.pop("file") == "<array>"
    ref.pop("file")
    if stated_kind:
        assert mem.pop("why") == f"kind {stated_kind} given by the caller"
        ref.pop("why")
    assert mem == ref


@pytest.mark.parametrize("demo,name,kind", demo_tables())
def test_audit_array_equals_audit_of_the_saved_file(binary, tmp_path, demo, name, kind):
    array = load_file(DEMO / demo / "model.safetensors")[name]
    stated = kind_for(array, kind)
    doc = posaudit.audit_array(array, name=name, kind=stated)
    assert doc["tables"][0]["kind"] == kind
    same_table(doc, file_table(binary, tmp_path, name, array), stated)


def text_table():
    return load_file(DEMO / "text-extended" / "model.safetensors")["tern.embeddings.position_embeddings.weight"]


@pytest.mark.parametrize("dtype", [np.float16, ml_dtypes.bfloat16, np.float64], ids=["f16", "bf16", "f64"])
def test_half_precision_and_f64_arrays(binary, tmp_path, dtype):
    array = text_table().astype(dtype)
    doc = posaudit.audit_array(array, name="wpe")
    expected = {np.float16: "F16", ml_dtypes.bfloat16: "BF16", np.float64: "F64"}[dtype]
    assert doc["tables"][0]["dtype"] == expected
    same_table(doc, file_table(binary, tmp_path, "wpe", array), None)


def test_transposed_array_is_read_through_its_strides(binary, tmp_path):
    table = text_table()
    stored = np.ascontiguousarray(table.T)  # (dim, positions), as a model might hold it
    view = stored.T
    assert not view.flags.c_contiguous and np.shares_memory(view, stored)
    doc = posaudit.audit_array(view, name="wpe")
    same_table(doc, file_table(binary, tmp_path, "wpe", table), None)


def test_row_slices_and_reversed_views(binary, tmp_path):
    table = text_table()
    every_other = table[::2]  # strided rows, no copy
    same_table(posaudit.audit_array(every_other, name="wpe"), file_table(binary, tmp_path, "wpe", every_other), None)
    reversed_rows = table[::-1]  # negative stride: copied once
    same_table(
        posaudit.audit_array(reversed_rows, name="wpe"), file_table(binary, tmp_path, "wpe", reversed_rows), None
    )


def test_big_endian_and_list_input(binary, tmp_path):
    table = text_table()[:64, :32]
    ref = file_table(binary, tmp_path, "wpe", table)
    same_table(posaudit.audit_array(table.astype(">f4"), name="wpe"), ref, None)
    lists = table.astype(np.float64).tolist()
    ref64 = file_table(binary, tmp_path, "wpe", np.asarray(lists))
    same_table(posaudit.audit_array(lists, name="wpe"), ref64, None)


def test_config_dict_gives_the_hints_of_config_json(binary, tmp_path):
    config = json.loads((DEMO / "text-extended" / "config.json").read_text())
    table = text_table()
    doc = posaudit.audit_array(table, name="tern.embeddings.position_embeddings.weight", config=config)
    ref = file_table(binary, tmp_path, "tern.embeddings.position_embeddings.weight", table, config=config)
    # The detector names where each hint came from: the dict is "config", the file
    # "config.json". Everything else, including the hints used, is the same.
    assert "(config.json)" in ref["why"]
    ref["why"] = ref["why"].replace("(config.json)", "(config)")
    same_table(doc, ref, None)
    assert doc["config"]["source"] == "config"


def test_a_stated_kind_is_used():
    table = text_table()
    doc = posaudit.audit_array(table, name="wpe", kind="fixed-sinusoidal")
    entry = doc["tables"][0]
    assert entry["kind"] == "fixed-sinusoidal"
    # A learned table forced to be a sinusoid fits no sine/cosine formula.
    assert entry["sinusoid"] is None
    assert "sinusoid-mismatch" in [f["code"] for f in entry["findings"]]


def test_the_published_sinusoid_is_recognised_from_content():
    # PE(p, 2i) = sin(p / 10000^(2i/d)), PE(p, 2i+1) = cos(...) (Vaswani et al. 2017, §3.5),
    # here in the split layout (all sines, then all cosines), d = 64, 256 positions.
    p = np.arange(256)[:, None]
    angles = p / 10000.0 ** (2 * np.arange(32) / 64)
    table = np.concatenate([np.sin(angles), np.cos(angles)], axis=1)
    entry = posaudit.audit_array(table, name="encoder.pe")["tables"][0]
    assert entry["kind"] == "fixed-sinusoidal"
    fit = entry["sinusoid"]
    assert (fit["base"], fit["layout"], fit["sin_first"], fit["offset"]) == (10000.0, "split", True, 0)
    assert fit["max_abs_error"] < 1e-12


def test_compare_arrays_equals_compare_of_the_saved_files(binary, tmp_path):
    name = "tern.embeddings.position_embeddings.weight"
    steps = [load_file(DEMO / "run-a" / f"step-{s}" / "model.safetensors")[name] for s in (1000, 2000, 4000)]
    # The files are named like the labels: steps and messages call checkpoints by name.
    files = []
    for s, table in zip((1000, 2000, 4000), steps):
        f = tmp_path / f"{s}.safetensors"
        save_file({name: table}, f)
        files.append(f)
    ref = cli_json(binary, "compare", *files, "--table", name)
    doc = posaudit.compare_arrays(steps, name=name, labels=["1000", "2000", "4000"])
    assert [c["path"] for c in doc["checkpoints"]] == ["1000", "2000", "4000"]
    assert {c["format"] for c in doc["checkpoints"]} == {"memory"}
    assert doc["schema"] == "posaudit/compare/v1"
    assert doc["tables"] == ref["tables"]


def test_compare_arrays_out_writes_a_report(tmp_path):
    table = text_table()
    later = table.copy()
    later[:100] *= 1.5
    doc = posaudit.compare_arrays([table, later], name="wpe", out=tmp_path / "r")
    assert json.loads((tmp_path / "r" / "report.json").read_text()) == doc
    md = (tmp_path / "r" / "report.md").read_text()
    for svg in (tmp_path / "r").glob("*.svg"):
        assert svg.name in md


# --- bad input: InputError with one line, never a crash --------------------------------


def one_line(excinfo):
    message = str(excinfo.value)
    assert message and "\n" not in message
    assert isinstance(excinfo.value, ValueError)
    return message


@pytest.mark.parametrize(
    "array,needle",
    [
        (np.linspace(0, 1, 100), "1-D array of 100 values"),
        (np.full((64, 16), np.nan), "no finite value"),
        (np.zeros((64, 16), np.complex128), "element type complex128 is not supported"),
        (np.zeros((64, 16), bool), "element type bool is not supported"),
        (np.array([[object()] * 4] * 20, dtype=object), "element type object is not supported"),
        (np.zeros((64, 16), np.uint8), "element type uint8 is not supported"),
        (np.float32(3.0), "a scalar"),
        (np.zeros((0, 16), np.float32), "holds no values"),
        ([[1.0, 2.0], [3.0]], "not an array"),
        ("text", "element type <U4 is not supported"),
    ],
    ids=["1-d", "nan-only", "complex", "bool", "object", "uint8", "scalar", "empty", "ragged", "str"],
)
def test_bad_arrays_raise_input_error(array, needle):
    with pytest.raises(posaudit.InputError) as e:
        posaudit.audit_array(array, name="wpe")
    assert needle in one_line(e), str(e.value)
    assert str(e.value).startswith("`wpe`: ")


def test_bad_arguments_raise_input_error():
    table = text_table()
    with pytest.raises(posaudit.InputError) as e:
        posaudit.audit_array(table, kind="sideways")
    assert "unknown kind 'sideways'" in one_line(e)
    with pytest.raises(posaudit.InputError) as e:
        posaudit.audit_array(table, config=[1, 2])
    assert one_line(e).startswith("config: expected a dict")
    with pytest.raises(posaudit.InputError) as e:
        posaudit.audit_array(table, fail_on="never")
    one_line(e)
    with pytest.raises(posaudit.InputError) as e:
        posaudit.compare_arrays([table], name="wpe")
    assert "at least two arrays" in one_line(e)
    with pytest.raises(posaudit.InputError) as e:
        posaudit.audit_array(table.astype(np.float32), kind="position-ids")
    assert "position ids must be integers" in one_line(e)


def test_missing_and_broken_files_raise_the_cli_message(binary, tmp_path):
    missing = tmp_path / "nope.safetensors"
    for call, args in [
        (lambda: posaudit.audit(missing), ["audit", missing]),
        (lambda: posaudit.scan(missing), ["scan", missing]),
        (lambda: posaudit.compare([missing, missing]), ["compare", missing, missing]),
    ]:
        with pytest.raises(posaudit.InputError) as e:
            call()
        assert one_line(e) == cli_error(binary, *args)
    broken = tmp_path / "broken.safetensors"
    broken.write_bytes(b"\xff" * 64)
    with pytest.raises(posaudit.InputError) as e:
        posaudit.audit(broken)
    assert one_line(e) == cli_error(binary, "audit", broken)
    with pytest.raises(posaudit.InputError) as e:
        posaudit.audit(DEMO / "text-extended", tables=["no.such.table"])
    assert one_line(e) == cli_error(binary, "audit", DEMO / "text-extended", "--table", "no.such.table")


@pytest.mark.parametrize("kind", posaudit.KINDS)
@pytest.mark.parametrize(
    "shape", [(64, 16), (1, 197, 8), (3, 5), (32,), (1, 1, 8)], ids=lambda s: "x".join(map(str, s))
)
def test_any_stated_kind_on_any_shape_gives_a_document_or_input_error(kind, shape):
    rng = np.random.default_rng(7)  # invented values
    array = rng.normal(0, 0.02, shape)
    if kind == "position-ids":
        array = np.arange(int(np.prod(shape)), dtype=np.int64).reshape(shape)
    try:
        doc = posaudit.audit_array(array, name="t", kind=kind)
    except posaudit.InputError as e:
        assert "\n" not in str(e)
    else:
        assert doc["tables"][0]["kind"] == kind
