//! Zip archives as the PyTorch and NumPy (`.npz`) formats use them.
//!
//! Both formats are zip files whose members hold raw tensor bytes. A member that is stored
//! (not compressed) is a plain byte range of the file, so its tensors are read straight
//! from the memory map; a deflated member is inflated when read. This module lists the
//! members with the byte range or the member name, validated against the file's length,
//! so the format modules only deal with their own headers.

use std::collections::HashSet;
use std::io::Read;

use zip::CompressionMethod;

use super::{CheckpointError, SourceFile, Storage, shown};

/// Most members an archive may have (a state dict has one member per storage).
const MAX_MEMBERS: usize = 4_000_000;
/// Largest expansion deflate can achieve (258-byte matches coded in about 2 bits: about
/// 1032:1, common practice), with a little slack.
const MAX_INFLATE_RATIO: u64 = 1100;

/// One member of a zip archive.
#[derive(Debug, Clone)]
pub(crate) struct Member {
    /// The member's name inside the archive.
    pub name: String,
    /// Its uncompressed size in bytes, as the archive declares it.
    pub size: u64,
    /// Where its bytes are: [`Storage::Mapped`] when stored, [`Storage::ZipMember`] when
    /// deflated (with `skip` 0).
    pub storage: Storage,
}

/// Lists an archive's members. Errors name the file and what is wrong with it.
pub(crate) fn members(file: &SourceFile) -> Result<Vec<Member>, CheckpointError> {
    let bytes = file.bytes();
    let mut archive = zip::ZipArchive::new(std::io::Cursor::new(bytes)).map_err(|e| {
        CheckpointError::invalid(
            &file.path,
            format!("not a readable zip archive (truncated or corrupt): {e}"),
        )
    })?;
    if archive.len() > MAX_MEMBERS {
        return Err(CheckpointError::invalid(
            &file.path,
            format!(
                "zip archive has {} members, more than the limit of {MAX_MEMBERS}",
                archive.len()
            ),
        ));
    }
    let mut out = Vec::with_capacity(archive.len());
    let mut seen: HashSet<String> = HashSet::with_capacity(archive.len());
    for i in 0..archive.len() {
        let entry = archive.by_index_raw(i).map_err(|e| {
            CheckpointError::invalid(&file.path, format!("zip member #{i} is unreadable: {e}"))
        })?;
        let name = entry.name().map(|n| n.into_owned()).map_err(|e| {
            CheckpointError::invalid(&file.path, format!("zip member #{i} has a bad name: {e}"))
        })?;
        // Two members of one name: readers differ on which one they take, so a first
        // copy could hide from one reader what another sees. Refused.
        if !seen.insert(name.clone()) {
            return Err(CheckpointError::invalid(
                &file.path,
                format!(
                    "zip archive holds two members named `{}`; posaudit refuses ambiguous archives",
                    shown(&name)
                ),
            ));
        }
        if entry.is_dir() {
            continue;
        }
        if entry.encrypted() {
            return Err(CheckpointError::invalid(
                &file.path,
                format!("zip member `{}` is encrypted", shown(&name)),
            ));
        }
        let size = entry.size();
        let storage = match entry.compression() {
            CompressionMethod::Stored => {
                let start = entry.data_start().ok_or_else(|| {
                    CheckpointError::invalid(
                        &file.path,
                        format!("zip member `{}`: data offset unknown", shown(&name)),
                    )
                })?;
                let end = start.checked_add(size);
                match end {
                    Some(end) if end <= bytes.len() as u64 && entry.compressed_size() == size => {
                        Storage::Mapped {
                            offset: start as usize,
                            len: size as usize,
                        }
                    }
                    _ => {
                        return Err(CheckpointError::invalid(
                            &file.path,
                            format!(
                                "zip member `{}`: bytes {start}..{} lie past the end of the file ({} bytes): truncated",
                                shown(&name),
                                start.saturating_add(size),
                                bytes.len()
                            ),
                        ));
                    }
                }
            }
            CompressionMethod::Deflated => {
                // Deflate expands at most about 1032:1; a larger declared size is a lie
                // that would make the reader allocate it.
                let plausible = entry.compressed_size().saturating_mul(MAX_INFLATE_RATIO);
                if size > plausible.saturating_add(1024) {
                    return Err(CheckpointError::invalid(
                        &file.path,
                        format!(
                            "zip member `{}` declares {size} bytes inflated from {} compressed bytes, more than deflate can expand",
                            shown(&name),
                            entry.compressed_size()
                        ),
                    ));
                }
                Storage::ZipMember {
                    member: name.clone(),
                    skip: 0,
                    size,
                    compressed: entry.compressed_size(),
                }
            }
            other => {
                return Err(CheckpointError::invalid(
                    &file.path,
                    format!(
                        "zip member `{}` uses compression {other}, which posaudit does not read (stored and deflate only)",
                        shown(&name)
                    ),
                ));
            }
        };
        out.push(Member {
            name,
            size,
            storage,
        });
    }
    Ok(out)
}

/// The first `n` bytes of a member (fewer if it is shorter): a slice of the map when it
/// is stored, inflated otherwise. Used to read small headers and pickles.
pub(crate) fn member_prefix(
    file: &SourceFile,
    member: &Member,
    n: usize,
) -> Result<Vec<u8>, CheckpointError> {
    match &member.storage {
        Storage::Mapped { offset, len } => {
            let end = offset.saturating_add((*len).min(n));
            Ok(file.bytes().get(*offset..end).unwrap_or_default().to_vec())
        }
        Storage::ZipMember { member: name, .. } => {
            let mut archive =
                zip::ZipArchive::new(std::io::Cursor::new(file.bytes())).map_err(|e| {
                    CheckpointError::invalid(&file.path, format!("not a readable zip archive: {e}"))
                })?;
            let entry = archive.by_name(name).map_err(|e| {
                CheckpointError::invalid(&file.path, format!("zip member `{}`: {e}", shown(name)))
            })?;
            let mut out = Vec::new();
            entry.take(n as u64).read_to_end(&mut out).map_err(|e| {
                CheckpointError::invalid(&file.path, format!("zip member `{}`: {e}", shown(name)))
            })?;
            Ok(out)
        }
        // Archive members are never varint runs (those are ONNX typed fields).
        Storage::Varints { .. } | Storage::Owned(_) => Err(CheckpointError::invalid(
            &file.path,
            "unexpected storage for an archive member",
        )),
    }
}
