//! Every format behind the one checkpoint index, checked against files written by the
//! formats' real writers (`fixtures/formats/`, made by `generate.py` with torch, numpy,
//! gguf and safetensors; versions in `PROVENANCE.json`). The tables in them are invented.
//!
//! The reference is `reference.safetensors`, written by the safetensors Python package
//! from the same arrays: every other file must read back bit-identical to it. Bad input
//! must give exit code 2 and one stderr line naming the file and the reason, never a
//! panic; mutated fixtures must give `Ok` or `Err`, never a panic.

use std::collections::BTreeMap;
use std::io::Write;
use std::path::{Path, PathBuf};
use std::process::Command;

use posaudit::checkpoint::{Checkpoint, Dtype, Storage, TensorInfo};

fn fixture(name: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("fixtures/formats")
        .join(name)
}

fn open(name: &str) -> Checkpoint {
    Checkpoint::open(&fixture(name)).unwrap_or_else(|e| panic!("{name}: {e}"))
}

/// The four tables every writer wrote (generate.py, `base`).
const BASE: [&str; 4] = [
    "model.embed_positions.weight",
    "encoder.positional_encoding",
    "model.embed_tokens.weight",
    "position_ids",
];

/// The nine tensors of the torch state dict and the reference copy.
const TORCH: [&str; 9] = [
    "model.embed_positions.weight",
    "encoder.positional_encoding",
    "model.embed_tokens.weight",
    "position_ids",
    "half.embed_positions.weight",
    "bf16.embed_positions.weight",
    "transposed.embed_positions.weight",
    "rows.embed_positions.weight",
    "columns.embed_positions.weight",
];

/// Asserts that `name` in `got` has the reference's shape and dtype and bit-identical
/// values (compared as f64, which holds every stored value exactly).
fn assert_same(reference: &Checkpoint, ref_name: &str, got: &Checkpoint, name: &str) {
    let r = reference.tensor(ref_name).expect(ref_name);
    let t = got
        .tensor(name)
        .unwrap_or_else(|| panic!("{}: no tensor `{name}`", got.path.display()));
    assert_eq!(t.shape, r.shape, "{name}: shape");
    assert_eq!(t.dtype, r.dtype, "{name}: dtype");
    let a = reference.read_f64(r).unwrap();
    let b = got.read_f64(t).unwrap();
    assert_eq!(a.shape(), b.shape(), "{name}");
    let differ = a
        .iter()
        .zip(b.iter())
        .filter(|(x, y)| x.to_bits() != y.to_bits())
        .count();
    assert_eq!(
        differ,
        0,
        "{}: `{name}` differs in {differ} values",
        got.path.display()
    );
    if t.dtype.is_integer() {
        assert_eq!(
            reference.read_i64(r).unwrap(),
            got.read_i64(t).unwrap(),
            "{name}"
        );
    }
}

fn names(c: &Checkpoint) -> Vec<String> {
    let mut n: Vec<String> = c.tensors.iter().map(|t| t.name.clone()).collect();
    n.sort();
    n
}

fn sorted(list: &[&str]) -> Vec<String> {
    let mut n: Vec<String> = list.iter().map(|s| s.to_string()).collect();
    n.sort();
    n
}

#[test]
fn torch_save_files_read_back_identical_to_the_safetensors_copy() {
    let reference = open("reference.safetensors");
    assert_eq!(names(&reference), sorted(&TORCH));
    for file in [
        "torch_state_dict.pt",
        "torch_protocol4.pt",
        "torch_deflated.pt",
    ] {
        let c = open(file);
        assert_eq!(c.format.to_string(), "pytorch");
        assert_eq!(names(&c), sorted(&TORCH), "{file}");
        for name in TORCH {
            assert_same(&reference, name, &c, name);
        }
    }
}

#[test]
fn torch_views_keep_their_offset_and_strides_and_stored_members_are_mapped() {
    let c = open("torch_state_dict.pt");
    let t = |n: &str| c.tensor(n).unwrap().clone();
    // generate.py: `t.t()` of a 64x16 table has strides (1, 16); `t[8:40]` starts 8 rows
    // (128 elements) into the shared storage; `t[:, ::2]` has strides (16, 2).
    assert_eq!(
        t("transposed.embed_positions.weight").strides,
        Some(vec![1, 16])
    );
    let rows = t("rows.embed_positions.weight");
    assert_eq!((rows.element_offset, rows.strides.clone()), (128, None));
    assert_eq!(
        t("columns.embed_positions.weight").strides,
        Some(vec![16, 2])
    );
    assert!(
        c.tensors
            .iter()
            .all(|t| matches!(t.storage, Storage::Mapped { .. })),
        "torch stores members uncompressed"
    );
    let d = open("torch_deflated.pt");
    assert!(
        d.tensors
            .iter()
            .all(|t| matches!(t.storage, Storage::ZipMember { skip: 0, .. }))
    );
}

#[test]
fn nested_and_sharded_torch_checkpoints_flatten_to_the_same_tables() {
    let reference = open("reference.safetensors");
    let nested = open("torch_nested.ckpt");
    for name in BASE {
        assert_same(&reference, name, &nested, &format!("state_dict.{name}"));
    }
    // The optimizer's tensors are listed under their dotted path; non-tensor values
    // (epoch, lr, betas, names) are not tensors and are ignored.
    let mut expected: Vec<String> = BASE.iter().map(|n| format!("state_dict.{n}")).collect();
    expected.push("optimizer_states.0.state.0.step".into());
    expected.push("optimizer_states.0.state.0.exp_avg".into());
    expected.sort();
    assert_eq!(names(&nested), expected);
    assert_eq!(
        nested
            .tensor("optimizer_states.0.state.0.exp_avg")
            .unwrap()
            .shape,
        vec![4, 4]
    );

    let sharded = open("torch_sharded");
    assert_eq!(sharded.files.len(), 2);
    assert_eq!(names(&sharded), sorted(&BASE));
    for name in BASE {
        assert_same(&reference, name, &sharded, name);
    }
    assert!(sharded.warnings.is_empty(), "{:?}", sharded.warnings);
}

#[test]
fn numpy_files_read_back_identical_to_the_safetensors_copy() {
    let reference = open("reference.safetensors");
    for file in ["tables.npz", "tables_compressed.npz"] {
        let c = open(file);
        assert_eq!(c.format.to_string(), "numpy");
        assert_eq!(names(&c), sorted(&BASE), "{file}");
        for name in BASE {
            assert_same(&reference, name, &c, name);
        }
    }
    let stored = open("tables.npz");
    assert!(
        stored
            .tensors
            .iter()
            .all(|t| matches!(t.storage, Storage::Mapped { .. }))
    );
    let deflated = open("tables_compressed.npz");
    // numpy's version-1 headers are padded to a multiple of 64 bytes (numpy.lib.format).
    assert!(deflated.tensors.iter().all(
        |t| matches!(t.storage, Storage::ZipMember { skip, .. } if skip > 0 && skip % 64 == 0)
    ));

    let learned = "model.embed_positions.weight";
    for (file, stem) in [
        ("embed_positions.npy", "embed_positions"),
        ("fortran.npy", "fortran"),
        ("big_endian.npy", "big_endian"),
    ] {
        let c = open(file);
        assert_eq!(names(&c), vec![stem.to_string()]);
        assert_same(&reference, learned, &c, stem);
    }
    let fortran = open("fortran.npy");
    assert_eq!(fortran.tensors[0].strides, Some(vec![1, 64]));
    assert!(open("big_endian.npy").tensors[0].big_endian);

    // >f8 holds the f32 values exactly: same numbers, wider type.
    let wide = open("big_endian_f8.npy");
    let t = &wide.tensors[0];
    assert_eq!(t.dtype, Dtype::F64);
    let a = reference
        .read_f64(reference.tensor(learned).unwrap())
        .unwrap();
    assert_eq!(wide.read_f64(t).unwrap(), a);
}

#[test]
fn gguf_reads_back_identical_and_gives_hints() {
    let reference = open("reference.safetensors");
    let c = open("tables.gguf");
    assert_eq!(c.format.to_string(), "gguf");
    for name in BASE {
        assert_same(&reference, name, &c, name);
    }
    assert_same(
        &reference,
        "half.embed_positions.weight",
        &c,
        "half.embed_positions.weight",
    );
    // Q8_0 is listed, with the row-major shape of the array that was quantized (16x64),
    // and reads dequantized (value-for-value checks against gguf.quants: gguf_quants.rs).
    let q = c.tensor("quantized.transposed_positions.weight").unwrap();
    assert_eq!(q.shape, vec![16, 64]);
    assert_eq!(q.dtype.to_string(), "Q8_0");
    assert!(matches!(q.dtype, Dtype::Quantized(_)));
    assert_eq!(c.read_f64(q).unwrap().shape(), &[16, 64]);
    // Q8_0: blocks of 32 values in 34 bytes (gguf GGML_QUANT_SIZES): 1024 / 32 * 34.
    assert!(matches!(q.storage, Storage::Mapped { len: 1088, .. }));

    // generate.py wrote these keys through GGUFWriter's add_* methods.
    let h = c.config.as_ref().expect("hints");
    assert!(h.source.contains("GGUF metadata"));
    assert_eq!(h.model_type.as_deref(), Some("llama"));
    let max = h.max_positions.as_ref().unwrap();
    assert_eq!((max.value, max.key.as_str()), (64, "llama.context_length"));
    assert_eq!(h.hidden_size.as_ref().unwrap().value, 16);
    assert_eq!(h.num_heads.as_ref().unwrap().value, 2);
    assert_eq!(h.rope_theta.as_ref().unwrap().value, 10000.0);
    assert_eq!(
        h.rope_scaling.as_ref().unwrap().value,
        serde_json::json!({"rope_type": "linear", "factor": 2.0,
                           "original_max_position_embeddings": 32})
    );
}

fn run(args: &[&str]) -> (i32, String, String) {
    let out = Command::new(env!("CARGO_BIN_EXE_posaudit"))
        .args(args)
        .output()
        .expect("run posaudit");
    (
        out.status.code().unwrap_or(-1),
        String::from_utf8_lossy(&out.stdout).into_owned(),
        String::from_utf8_lossy(&out.stderr).into_owned(),
    )
}

/// `scan --json` tables as name → (kind, shape, dtype).
fn scan_tables(path: &Path) -> BTreeMap<String, (String, String, String)> {
    let (code, stdout, stderr) = run(&["scan", path.to_str().unwrap(), "--json"]);
    assert_eq!(code, 0, "{}: {stderr}", path.display());
    let doc: serde_json::Value = serde_json::from_str(&stdout).unwrap();
    doc["tables"]
        .as_array()
        .unwrap()
        .iter()
        .map(|t| {
            (
                t["name"].as_str().unwrap().to_string(),
                (
                    t["kind"].to_string(),
                    t["shape"].to_string(),
                    t["dtype"].to_string(),
                ),
            )
        })
        .collect()
}

#[test]
fn scan_finds_the_same_tables_in_every_format() {
    let reference = scan_tables(&fixture("reference.safetensors"));
    // The detector must find the learned, sinusoid and position-id tables at least.
    assert!(reference.len() >= 3, "{reference:?}");
    let restricted = |names: &[&str]| -> BTreeMap<_, _> {
        reference
            .iter()
            .filter(|(n, _)| names.contains(&n.as_str()))
            .map(|(n, v)| (n.clone(), v.clone()))
            .collect()
    };
    for file in [
        "torch_state_dict.pt",
        "torch_protocol4.pt",
        "torch_deflated.pt",
    ] {
        assert_eq!(scan_tables(&fixture(file)), reference, "{file}");
    }
    for file in ["torch_sharded", "tables.npz", "tables_compressed.npz"] {
        assert_eq!(scan_tables(&fixture(file)), restricted(&BASE), "{file}");
    }
    let mut gguf_names = BASE.to_vec();
    gguf_names.push("half.embed_positions.weight");
    // The Q8_0 copy (generate.py quantizes the transposed learned table) is named as a
    // position table and dequantized, so it is listed as one, with its stored type.
    let mut gguf_expected = restricted(&gguf_names);
    gguf_expected.insert(
        "quantized.transposed_positions.weight".to_string(),
        (
            "\"learned-absolute\"".to_string(),
            "[16,64]".to_string(),
            "\"Q8_0\"".to_string(),
        ),
    );
    assert_eq!(scan_tables(&fixture("tables.gguf")), gguf_expected);
}

/// Runs `scan` on a bad file: exit 2, one stderr line naming the file and `reason`.
fn assert_refused(path: &Path, reason: &str) {
    let (code, _, stderr) = run(&["scan", path.to_str().unwrap()]);
    assert_eq!(code, 2, "{}: {stderr}", path.display());
    assert_eq!(stderr.trim_end().lines().count(), 1, "{stderr}");
    assert!(
        stderr.contains(&path.display().to_string()),
        "names the file: {stderr}"
    );
    assert!(stderr.contains(reason), "expected `{reason}` in: {stderr}");
    assert!(!stderr.contains("panicked"), "{stderr}");
}

fn write(dir: &Path, name: &str, bytes: &[u8]) -> PathBuf {
    let p = dir.join(name);
    std::fs::write(&p, bytes).unwrap();
    p
}

/// A torch-like zip archive with the given `archive/data.pkl`, stored uncompressed.
fn torch_zip(pickle: &[u8]) -> Vec<u8> {
    let mut buf = std::io::Cursor::new(Vec::new());
    let mut z = zip::ZipWriter::new(&mut buf);
    let opts =
        zip::write::SimpleFileOptions::default().compression_method(zip::CompressionMethod::Stored);
    z.start_file("archive/data.pkl", opts).unwrap();
    z.write_all(pickle).unwrap();
    z.start_file("archive/version", opts).unwrap();
    z.write_all(b"3\n").unwrap();
    z.finish().unwrap();
    buf.into_inner()
}

#[test]
fn a_pickle_calling_os_system_is_refused_and_nothing_runs() {
    let dir = tempfile::tempdir().unwrap();
    let marker = dir.path().join("pwned");
    let cmd = format!("touch {}", marker.display());
    // Protocol 2 (opcodes from the pickletools documentation): GLOBAL os.system, the
    // command as a BINUNICODE string, TUPLE1, REDUCE, STOP. Python's pickle.load would run
    // the command.
    let mut p = b"\x80\x02cos\nsystem\nq\x00X".to_vec();
    p.extend_from_slice(&(cmd.len() as u32).to_le_bytes());
    p.extend_from_slice(cmd.as_bytes());
    p.extend_from_slice(b"q\x01\x85q\x02Rq\x03.");
    let path = write(dir.path(), "evil.pt", &torch_zip(&p));
    assert_refused(
        &path,
        "refuses global `os.system` (posaudit never executes pickled code)",
    );
    assert!(!marker.exists(), "the pickled command must not run");

    // Protocol 4's STACK_GLOBAL names the callable with two strings on the stack.
    let p4 = b"\x80\x04\x95\x1c\x00\x00\x00\x00\x00\x00\x00\x8c\x08builtins\x94\x8c\x04eval\x94\x93\x94\x8c\x011\x94\x85\x94R\x94.";
    let path = write(dir.path(), "evil4.pt", &torch_zip(p4));
    assert_refused(&path, "refuses global `builtins.eval`");
}

#[test]
fn a_truncated_zip_is_refused() {
    let dir = tempfile::tempdir().unwrap();
    let bytes = std::fs::read(fixture("torch_state_dict.pt")).unwrap();
    let path = write(dir.path(), "cut.pt", &bytes[..bytes.len() / 2]);
    assert_refused(&path, "not a readable zip archive");
}

#[test]
fn wrong_magic_is_refused() {
    let dir = tempfile::tempdir().unwrap();
    let path = write(dir.path(), "x.gguf", b"GGUX\x03\x00\x00\x00rest of a file");
    assert_refused(&path, "wrong magic");
    let path = write(dir.path(), "x.npy", b"\x93NUMPX\x01\x00rest");
    assert_refused(&path, "wrong magic");
}

#[test]
fn the_legacy_torch_format_gets_a_clear_message() {
    assert_refused(
        &fixture("torch_legacy.pt"),
        "legacy (pre-1.6) torch.save format is not supported; re-save with torch>=1.6",
    );
}

fn gguf_header(n_tensors: u64, n_kv: u64) -> Vec<u8> {
    let mut b = b"GGUF".to_vec();
    b.extend_from_slice(&3u32.to_le_bytes());
    b.extend_from_slice(&n_tensors.to_le_bytes());
    b.extend_from_slice(&n_kv.to_le_bytes());
    b
}

#[test]
fn a_gguf_with_an_absurd_tensor_count_is_refused() {
    let dir = tempfile::tempdir().unwrap();
    let mut b = gguf_header(1 << 60, 0);
    b.extend_from_slice(&[0; 64]);
    let path = write(dir.path(), "count.gguf", &b);
    assert_refused(&path, "tensor count 1152921504606846976 is absurd");
}

#[test]
fn a_gguf_with_an_absurd_string_length_is_refused() {
    let dir = tempfile::tempdir().unwrap();
    let mut b = gguf_header(0, 1);
    b.extend_from_slice(&(1u64 << 62).to_le_bytes());
    b.extend_from_slice(b"general.architecture");
    let path = write(dir.path(), "string.gguf", &b);
    assert_refused(&path, "declares a string of 4611686018427387904 bytes");
}

#[test]
fn gguf_and_npy_data_past_the_end_are_refused() {
    let dir = tempfile::tempdir().unwrap();
    let g = std::fs::read(fixture("tables.gguf")).unwrap();
    let path = write(dir.path(), "short.gguf", &g[..g.len() - 100]);
    assert_refused(&path, "lie past the end of the file");
    let n = std::fs::read(fixture("embed_positions.npy")).unwrap();
    let path = write(dir.path(), "short.npy", &n[..n.len() - 100]);
    assert_refused(&path, "lies past the end");
}

#[test]
fn an_npz_with_an_object_array_is_refused() {
    assert_refused(&fixture("object.npz"), "array of Python objects");
}

/// xorshift64*: a small deterministic generator (Vigna, "An experimental exploration of
/// Marsaglia's xorshift generators, scrambled", 2016).
struct Rng(u64);

impl Rng {
    fn next(&mut self) -> u64 {
        self.0 ^= self.0 >> 12;
        self.0 ^= self.0 << 25;
        self.0 ^= self.0 >> 27;
        self.0.wrapping_mul(0x2545_f491_4f6c_dd1d)
    }

    fn below(&mut self, n: usize) -> usize {
        (self.next() % n.max(1) as u64) as usize
    }
}

fn open_and_read_all(path: &Path) {
    if let Ok(c) = Checkpoint::open(path) {
        for t in &c.tensors {
            let _ = c.read_f64(t);
            let _ = c.read_rows(t, &[0, 1]);
            let _: Option<&TensorInfo> = c.tensor(&t.name);
        }
    }
}

#[test]
fn mutated_fixtures_never_panic() {
    let dir = tempfile::tempdir().unwrap();
    let mut rng = Rng(0x9e37_79b9_7f4a_7c15);
    let mut opened = 0usize;
    let mut total = 0usize;
    for file in [
        "torch_state_dict.pt",
        "torch_protocol4.pt",
        "torch_deflated.pt",
        "torch_nested.ckpt",
        "embed_positions.npy",
        "fortran.npy",
        "tables.npz",
        "tables_compressed.npz",
        "tables.gguf",
    ] {
        let original = std::fs::read(fixture(file)).unwrap();
        let ext = Path::new(file).extension().unwrap().to_str().unwrap();
        for i in 0..300 {
            let mut b = original.clone();
            match i % 3 {
                // Flip a few bytes anywhere.
                0 => {
                    for _ in 0..1 + rng.below(4) {
                        let at = rng.below(b.len());
                        b[at] ^= 1 << rng.below(8);
                    }
                }
                // Cut the file.
                1 => b.truncate(rng.below(b.len())),
                // Overwrite bytes in the first 512 (headers) with random values.
                _ => {
                    for _ in 0..1 + rng.below(8) {
                        let at = rng.below(b.len().min(512));
                        b[at] = rng.next() as u8;
                    }
                }
            }
            let path = dir.path().join(format!("m{i}.{ext}"));
            std::fs::write(&path, &b).unwrap();
            let result = std::panic::catch_unwind(|| open_and_read_all(&path));
            assert!(result.is_ok(), "{file}: mutation {i} panicked");
            opened += Checkpoint::open(&path).is_ok() as usize;
            total += 1;
        }
    }
    eprintln!("{opened} of {total} mutated files opened");
    // Both outcomes occur: the mutations are neither all harmless nor all fatal.
    assert!(opened > 0 && opened < total, "{opened} of {total} opened");
}

#[test]
fn mutated_pickles_never_panic() {
    use std::io::Read;
    let bytes = std::fs::read(fixture("torch_state_dict.pt")).unwrap();
    let mut archive = zip::ZipArchive::new(std::io::Cursor::new(bytes)).unwrap();
    let mut pkl = Vec::new();
    archive
        .by_name("torch_state_dict/data.pkl")
        .unwrap()
        .read_to_end(&mut pkl)
        .unwrap();
    assert!(posaudit::checkpoint::pickle::load(&pkl).is_ok());
    let mut rng = Rng(0x2545_f491_4f6c_dd1d);
    let mut ok = 0;
    for i in 0..600 {
        let mut b = pkl.clone();
        if i % 2 == 0 {
            for _ in 0..1 + rng.below(3) {
                let at = rng.below(b.len());
                b[at] = rng.next() as u8;
            }
        } else {
            b.truncate(rng.below(b.len()));
        }
        let r = std::panic::catch_unwind(|| posaudit::checkpoint::pickle::load(&b).is_ok());
        assert!(r.is_ok(), "mutation {i} panicked");
        ok += r.unwrap() as usize;
    }
    eprintln!("{ok} of 600 mutated pickles loaded");
}

#[test]
fn a_folder_with_one_checkpoint_file_opens_it_and_two_are_ambiguous() {
    let dir = tempfile::tempdir().unwrap();
    std::fs::copy(fixture("tables.gguf"), dir.path().join("tables.gguf")).unwrap();
    let c = Checkpoint::open(dir.path()).unwrap();
    assert_eq!(c.format.to_string(), "gguf");
    assert_eq!(c.tensors.len(), 6);
    std::fs::copy(fixture("tables.npz"), dir.path().join("tables.npz")).unwrap();
    let e = Checkpoint::open(dir.path()).unwrap_err().to_string();
    assert!(e.contains("2 candidate checkpoint files"), "{e}");
}

#[test]
fn torch_shards_without_their_index_open_together() {
    let dir = tempfile::tempdir().unwrap();
    for shard in [
        "pytorch_model-00001-of-00002.bin",
        "pytorch_model-00002-of-00002.bin",
    ] {
        std::fs::copy(
            fixture(&format!("torch_sharded/{shard}")),
            dir.path().join(shard),
        )
        .unwrap();
    }
    let reference = open("reference.safetensors");
    let c = Checkpoint::open(dir.path()).unwrap();
    assert_eq!(c.files.len(), 2);
    assert_eq!(names(&c), sorted(&BASE));
    for name in BASE {
        assert_same(&reference, name, &c, name);
    }
}
