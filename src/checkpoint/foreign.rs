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

/// Recognises a file of another kind given under a weight file's name (by its magic
/// number or content, never its name) and says what it is: a Git LFS pointer, HDF5, a
/// TensorFlow checkpoint index, a plain pickle where no pickle is expected, or text.
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
