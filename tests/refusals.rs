//! Files of another kind under a weight file's name are refused with a message naming
//! what they are (exit 2, one line), and names taken from a damaged file reach the
//! terminal escaped and shortened.
//!
//! Sources: the Git LFS specification (docs/spec.md: a pointer is the line
//! `version https://git-lfs.github.com/spec/v1`, then `oid sha256:<hex>` and
//! `size <bytes>`); the HDF5 File Format Specification (the 8-byte format signature
//! `\x89HDF\r\n\x1a\n`); LevelDB's `table_format.md` (a table, the layout of a TensorFlow
//! checkpoint `.index`, ends with the magic 0xdb4775248b80fb57, little-endian); the bytes
//! of `pickle.dumps({"pos": [1.0, 2.0]}, protocol=4)` from Python 3.11.7; the pickletools
//! documentation for the GLOBAL opcode; the CTranslate2 `model.bin` layout as the
//! `ctranslate2` package writes it (`python/ctranslate2/specs/model_spec.py`,
//! `ModelSpec._serialize`: u32 binary version (`CURRENT_BINARY_VERSION` = 6), the spec name
//! as u16 length + 1, UTF-8 bytes and a NUL, u32 revision, u32 variable count, then per
//! variable its name, u8 rank, u32 dims, u8 dtype id (0 = float32), u32 byte count and
//! the bytes; then u32 alias count).

mod common;

use std::io::Write;
use std::path::{Path, PathBuf};

use common::{assert_input_error, posaudit};

fn write(dir: &Path, name: &str, bytes: &[u8]) -> PathBuf {
    let p = dir.join(name);
    std::fs::write(&p, bytes).unwrap();
    p
}

fn refused(path: &Path, problem: &str) -> String {
    let run = posaudit(&["scan", path.to_str().unwrap()]);
    let name = path.file_name().unwrap().to_str().unwrap();
    assert_input_error(&run, name, problem);
    run.stderr
}

#[test]
fn a_git_lfs_pointer_says_to_fetch_the_weights() {
    let dir = tempfile::tempdir().unwrap();
    let pointer = "version https://git-lfs.github.com/spec/v1\noid sha256:4d7a214614ab2935c943f9e0ff69d22eadbb8f32b1258daaa5e2ca24d17e2393\nsize 12345\n";
    for name in ["model.safetensors", "pytorch_model.bin", "model.gguf"] {
        let p = write(dir.path(), name, pointer.as_bytes());
        let err = refused(&p, "is a Git LFS pointer, not the weights");
        assert!(err.contains("(the real file has 12345 bytes)"), "{err}");
        assert!(err.contains("fetch them (git lfs pull)"), "{err}");
    }
}

#[test]
fn other_formats_are_named_by_their_magic() {
    let dir = tempfile::tempdir().unwrap();
    let mut h5 = b"\x89HDF\r\n\x1a\n".to_vec();
    h5.extend_from_slice(&[0u8; 120]);
    let p = write(dir.path(), "model.safetensors", &h5);
    refused(&p, "is an HDF5 file (Keras / TensorFlow .h5 weights)");

    let mut index = vec![0u8; 200];
    let n = index.len();
    index[n - 8..].copy_from_slice(&0xdb4775248b80fb57u64.to_le_bytes());
    let p = write(dir.path(), "model.bin", &index);
    refused(&p, "is a TensorFlow checkpoint index");

    let pickle = b"\x80\x04\x95 \x00\x00\x00\x00\x00\x00\x00}\x94\x8c\x03pos\x94]\x94(G?\xf0\x00\x00\x00\x00\x00\x00G@\x00\x00\x00\x00\x00\x00\x00es.";
    let p = write(dir.path(), "weights.safetensors", pickle);
    refused(&p, "is a Python pickle, not the format its name says");
    // Under a torch name, a bare pickle is the torch reader's own message.
    let p = write(dir.path(), "weights.pt", pickle);
    refused(&p, "a bare pickle, not a torch.save zip archive");

    let p = write(
        dir.path(),
        "model.safetensors",
        b"<!DOCTYPE html>\n<html><body>Sign in to download</body></html>\n",
    );
    refused(
        &p,
        "is a text file, not a checkpoint (it starts with `<!DOCTYPE html>`)",
    );
}

/// A CTranslate2 `model.bin` laid out as `ModelSpec._serialize` writes it (see the
/// module docs), holding one float32 variable.
fn ctranslate2_model_bin() -> Vec<u8> {
    fn string(out: &mut Vec<u8>, s: &str) {
        out.extend_from_slice(&(s.len() as u16 + 1).to_le_bytes());
        out.extend_from_slice(s.as_bytes());
        out.push(0);
    }
    let mut out = Vec::new();
    out.extend_from_slice(&6u32.to_le_bytes()); // binary version
    string(&mut out, "TransformerSpec");
    out.extend_from_slice(&1u32.to_le_bytes()); // revision
    out.extend_from_slice(&1u32.to_le_bytes()); // one variable
    string(&mut out, "encoder/position_encodings/encodings");
    out.push(2); // rank
    for dim in [4u32, 2] {
        out.extend_from_slice(&dim.to_le_bytes());
    }
    out.push(0); // float32
    out.extend_from_slice(&32u32.to_le_bytes());
    for i in 0..8 {
        out.extend_from_slice(&(i as f32).to_le_bytes());
    }
    out.extend_from_slice(&0u32.to_le_bytes()); // no aliases
    out
}

#[test]
fn a_ctranslate2_model_is_read_and_a_newer_version_is_named() {
    // The layout `ModelSpec._serialize` writes (binary version 6) is read: its variable is
    // listed with the stored shape and type.
    let dir = tempfile::tempdir().unwrap();
    let bin = ctranslate2_model_bin();
    let p = write(dir.path(), "model.bin", &bin);
    let run = posaudit(&["scan", p.to_str().unwrap(), "--json"]);
    assert_eq!(run.code, 0, "{}", run.stderr);
    let doc: serde_json::Value = serde_json::from_str(&run.stdout).unwrap();
    assert_eq!(doc["checkpoint"]["format"], "ctranslate2");
    assert_eq!(doc["checkpoint"]["tensors"], 1);
    // A converted model's folder (model.bin beside config.json and a vocabulary) too.
    write(dir.path(), "config.json", b"{\"unk_token\": \"<unk>\"}\n");
    write(dir.path(), "shared_vocabulary.txt", b"<unk>\n<s>\n</s>\n");
    let run = posaudit(&["scan", dir.path().to_str().unwrap(), "--json"]);
    assert_eq!(run.code, 0, "{}", run.stderr);
    // A later binary version than the library's current one is named, not misread.
    let mut newer = bin.clone();
    newer[..4].copy_from_slice(&7u32.to_le_bytes());
    let p = write(dir.path(), "newer.bin", &newer);
    let err = refused(
        &p,
        "CTranslate2 model: binary version 7 is newer than the versions posaudit reads",
    );
    assert!(!err.contains("pickle"), "{err}");
    // A byte count that disagrees with the shape is one line naming the variable.
    let mut bad = bin.clone();
    let at = bad.len() - 4 - 32 - 4;
    bad[at..at + 4].copy_from_slice(&28u32.to_le_bytes());
    let p = write(dir.path(), "bad.bin", &bad);
    refused(
        &p,
        "declares 28 bytes, but its shape [4, 2] of F32 needs 32",
    );
    // The same bytes cut inside the spec name are no longer recognised as one.
    let p = write(dir.path(), "cut.bin", &bin[..12]);
    let run = posaudit(&["scan", p.to_str().unwrap()]);
    assert_eq!(run.code, 2, "{}", run.stderr);
    assert!(!run.stderr.contains("CTranslate2"), "{}", run.stderr);
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
fn a_damaged_name_is_printed_escaped_and_shortened() {
    // GLOBAL `subprocess` + a name holding an escape sequence and 4000 letters: refused
    // (the module runs code), and the name is not echoed raw.
    let name = format!("\x1b[2J{}", "A".repeat(4000));
    let mut p = b"\x80\x02csubprocess\n".to_vec();
    p.extend_from_slice(name.as_bytes());
    p.extend_from_slice(b"\n.");
    let dir = tempfile::tempdir().unwrap();
    let path = write(dir.path(), "damaged.pt", &torch_zip(&p));
    let err = refused(&path, "refuses global `subprocess.");
    assert!(!err.contains('\x1b'), "raw escape reached the terminal");
    assert!(err.contains("\\u{1b}[2J"), "{err}");
    assert!(err.len() < 1000, "{} bytes: {err}", err.len());
}
