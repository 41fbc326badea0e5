//! Files of another kind under a weight file's name, recognised before any reader runs.

use super::*;

/// The first line of every Git LFS pointer file (the Git LFS specification, "The pointer").
const LFS_SPEC: &[u8] = b"version https://git-lfs.github.com/spec/v1";
/// The HDF5 format signature (HDF5 File Format Specification, "Format Signature").
const HDF5_MAGIC: &[u8] = b"\x89HDF\r\n\x1a\n";
/// The last 8 bytes of a LevelDB-style table, the layout of a TensorFlow checkpoint's
/// `.index` file (LevelDB `table_format.md`: `kTableMagicNumber` 0xdb4775248b80fb57,
/// stored little-endian).
const TABLE_MAGIC: [u8; 8] = 0xdb4775248b80fb57u64.to_le_bytes();

/// Binary versions of a CTranslate2 `model.bin` that carry the specification name
/// (`ModelSpec._serialize` in the `ctranslate2` package, `CURRENT_BINARY_VERSION` 6; a
/// little margin above it for later versions).
const CT2_VERSIONS: std::ops::RangeInclusive<u32> = 2..=8;

/// The specification name of a CTranslate2 `model.bin`, when `bytes` start like one.
///
/// Layout (`ctranslate2/specs/model_spec.py`, `ModelSpec._serialize`, little-endian):
///
/// ```text
/// u32 binary_version | u16 len(name) + 1 | name (UTF-8) | 0 | u32 revision | u32 variables | ...
/// ```
///
/// The name of a model specification is an identifier (`TransformerSpec`,
/// `WhisperSpec`), so a name of 1..=128 ASCII letters, digits or `_` followed by its NUL
/// is asked for; other bytes give `None`.
fn ctranslate2_spec(bytes: &[u8]) -> Option<(u32, &str)> {
    let version = u32::from_le_bytes(bytes.get(..4)?.try_into().ok()?);
    if !CT2_VERSIONS.contains(&version) {
        return None;
    }
    let len = u16::from_le_bytes(bytes.get(4..6)?.try_into().ok()?) as usize;
    if !(2..=129).contains(&len) {
        return None;
    }
    let field = bytes.get(6..6 + len)?;
    let (name, nul) = field.split_at(len - 1);
    if nul != [0] || !name.iter().all(|b| b.is_ascii_alphanumeric() || *b == b'_') {
        return None;
    }
    // The revision and the variable count follow the name.
    bytes.get(6 + len..6 + len + 8)?;
    Some((version, std::str::from_utf8(name).ok()?))
}

/// Recognises a file of another kind given under a weight file's name (by its magic
/// number or content, never its name) and says what it is: a Git LFS pointer, HDF5, a
/// TensorFlow checkpoint index, a CTranslate2 `model.bin`, a plain pickle where no pickle is expected, or text.
/// `None` when the file may be what its name says (its reader then checks it).
pub(super) fn foreign_format(bytes: &[u8], expected: Option<Format>) -> Option<String> {
    if bytes.starts_with(LFS_SPEC) {
        let size = std::str::from_utf8(&bytes[..bytes.len().min(1024)])
            .ok()
            .and_then(|t| t.lines().find_map(|l| l.strip_prefix("size ")))
            .map(|n| format!(" (the real file has {} bytes)", shown(n.trim())))
            .unwrap_or_default();
        return Some(format!(
            "is a Git LFS pointer, not the weights{size}: fetch them (git lfs pull)"
        ));
    }
    if bytes.starts_with(HDF5_MAGIC) {
        return Some(
            "is an HDF5 file (Keras / TensorFlow .h5 weights), a format posaudit does not read: convert it to safetensors".into(),
        );
    }
    if bytes.len() >= 48 && bytes[bytes.len() - 8..] == TABLE_MAGIC {
        return Some(
            "is a TensorFlow checkpoint index (a LevelDB-style table naming the variables in .data-* shards), a format posaudit does not read: convert the checkpoint to safetensors".into(),
        );
    }
    if let Some((version, spec)) = ctranslate2_spec(bytes) {
        return Some(format!(
            "is a CTranslate2 model (binary version {version}, specification {spec}), a format posaudit does not read: audit the checkpoint it was converted from"
        ));
    }
    let pickle_start = bytes.len() >= 2 && bytes[0] == 0x80 && (2..=5).contains(&bytes[1]);
    if pickle_start && expected != Some(Format::Pytorch) {
        return Some(
            "is a Python pickle, not the format its name says (a pickle is read only as a torch.save .bin/.pt/.pth/.ckpt file)".into(),
        );
    }
    let head = &bytes[..bytes.len().min(512)];
    let text = match std::str::from_utf8(head) {
        Ok(t) => Some(t),
        // A multi-byte character cut at the end of the sample.
        Err(e) if e.valid_up_to() + 4 > head.len() => {
            std::str::from_utf8(&head[..e.valid_up_to()]).ok()
        }
        Err(_) => None,
    };
    if let Some(t) = text
        && !t.trim().is_empty()
        && t.chars()
            .all(|c| !c.is_control() || matches!(c, '\n' | '\r' | '\t'))
    {
        let first = t.lines().find(|l| !l.trim().is_empty()).unwrap_or("");
        return Some(format!(
            "is a text file, not a checkpoint (it starts with `{}`)",
            limits::shown_max(first.trim(), 60)
        ));
    }
    None
}
