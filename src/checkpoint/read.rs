//! Reading tensors: a tensor or a few rows as f64 (strides, endianness, zip members),
//! integer buffers, and the budget checks before any read.

use std::borrow::Cow;

use ndarray::{Array1, Array2, ArrayD, IxDyn};

use super::*;

impl Checkpoint {
    fn file_of(&self, t: &TensorInfo) -> Result<&SourceFile, CheckpointError> {
        self.files.get(t.file).ok_or_else(|| {
            CheckpointError::invalid(&self.path, format!("tensor `{}` names no file", t.name))
        })
    }

    /// The raw bytes of a tensor's storage: borrowed from the map, or decompressed.
    pub(super) fn storage_bytes<'a>(
        &'a self,
        t: &'a TensorInfo,
    ) -> Result<Cow<'a, [u8]>, CheckpointError> {
        let file = self.file_of(t)?;
        match &t.storage {
            Storage::Mapped { offset, len } => {
                let end = offset.checked_add(*len);
                end.and_then(|end| file.bytes().get(*offset..end))
                    .map(Cow::Borrowed)
                    .ok_or_else(|| {
                        CheckpointError::invalid(
                            &file.path,
                            format!(
                                "tensor `{}`: bytes {offset}..{} lie past the end of the file ({} bytes)",
                                t.name,
                                offset.saturating_add(*len),
                                file.bytes().len()
                            ),
                        )
                    })
            }
            Storage::Owned(bytes) => Ok(Cow::Borrowed(&bytes.0[..])),
            Storage::Varints { offset, len, width } => {
                onnx::decode_varints(file, *offset, *len, *width).map(Cow::Owned)
            }
            Storage::ZipMember { member, skip, .. } => {
                // Inflate only the bytes the tensor can touch, never the declared size.
                let want = t
                    .extent()
                    .and_then(|n| t.dtype.storage_len(n)?.checked_add(*skip))
                    .ok_or_else(|| {
                        CheckpointError::invalid(
                            &file.path,
                            format!("tensor `{}`: its extent overflows", shown(&t.name)),
                        )
                    })?;
                let mut bytes = read_zip_member(file, member, want as u64)?;
                if *skip > bytes.len() {
                    return Err(CheckpointError::invalid(
                        &file.path,
                        format!(
                            "zip member `{}` holds {} bytes, fewer than its {skip}-byte header",
                            shown(member),
                            bytes.len()
                        ),
                    ));
                }
                bytes.drain(..*skip);
                Ok(Cow::Owned(bytes))
            }
        }
    }

    /// Refuses to read `elements` elements of a tensor when that breaks a budget
    /// ([`limits::tensor_problem`]): nothing is allocated or inflated from a declared
    /// size before this check.
    fn check_budget(&self, t: &TensorInfo, elements: usize) -> Result<(), CheckpointError> {
        match limits::tensor_problem(t, elements) {
            None => Ok(()),
            Some(problem) => Err(CheckpointError::invalid(
                &self.file_of(t)?.path,
                format!("tensor `{}`: {problem}", shown(&t.name)),
            )),
        }
    }

    /// Storage element index of the element at C-order flat index `flat`.
    fn storage_index(t: &TensorInfo, flat: usize) -> usize {
        match &t.strides {
            None => t.element_offset + flat,
            Some(strides) => {
                let mut rem = flat;
                let mut idx = t.element_offset;
                for (dim, stride) in t.shape.iter().zip(strides).rev() {
                    if *dim == 0 {
                        return idx;
                    }
                    idx += (rem % dim) * stride;
                    rem /= dim;
                }
                idx
            }
        }
    }

    fn check_readable(&self, t: &TensorInfo, bytes: &[u8]) -> Result<(), CheckpointError> {
        let file = &self.file_of(t)?.path;
        t.dtype.storage_len(1).ok_or_else(|| {
            CheckpointError::invalid(
                file,
                format!(
                    "tensor `{}`: {}",
                    t.name,
                    t.dtype.unsupported_reason().unwrap_or_default()
                ),
            )
        })?;
        if t.numel() == 0 {
            return Ok(());
        }
        // The furthest element any index touches (TensorInfo::extent), in stored bytes.
        let needed = t.extent().and_then(|l| t.dtype.storage_len(l));
        match needed {
            Some(needed) if needed <= bytes.len() => Ok(()),
            _ => Err(CheckpointError::invalid(
                file,
                format!(
                    "tensor `{}` of shape {:?} needs more bytes than its storage holds ({} bytes)",
                    shown(&t.name),
                    t.shape,
                    bytes.len()
                ),
            )),
        }
    }

    /// Reads a whole tensor as f64.
    pub fn read_f64(&self, t: &TensorInfo) -> Result<ArrayD<f64>, CheckpointError> {
        let out = self.read_all(t, |bytes, idx| {
            t.dtype.decode(bytes, idx, t.big_endian).unwrap_or(f64::NAN)
        })?;
        ArrayD::from_shape_vec(IxDyn(&t.shape), out).map_err(|e| {
            CheckpointError::invalid(
                &self.file_of(t).map(|f| f.path.clone()).unwrap_or_default(),
                format!("tensor `{}`: {e}", t.name),
            )
        })
    }

    /// Reads a tensor as a table (rows × last dimension), see [`TensorInfo::as_table_dims`].
    pub fn read_table(&self, t: &TensorInfo) -> Result<Array2<f64>, CheckpointError> {
        let rows: Vec<usize> = (0..t.as_table_dims().map(|d| d.0).unwrap_or(0)).collect();
        self.read_rows(t, &rows)
    }

    /// Reads selected rows of a tensor viewed as a table; out-of-range rows are an error.
    /// Used by the detector's cheap content probe: only these rows are touched.
    pub fn read_rows(
        &self,
        t: &TensorInfo,
        rows: &[usize],
    ) -> Result<Array2<f64>, CheckpointError> {
        let path = self.file_of(t)?.path.clone();
        let (nrows, ncols) = t.as_table_dims().ok_or_else(|| {
            CheckpointError::invalid(&path, format!("tensor `{}` is a scalar", t.name))
        })?;
        self.check_budget(t, rows.len().saturating_mul(ncols))?;
        let bytes = self.storage_bytes(t)?;
        self.check_readable(t, &bytes)?;
        let mut out = Array2::<f64>::zeros((rows.len(), ncols));
        for (i, &r) in rows.iter().enumerate() {
            if r >= nrows {
                return Err(CheckpointError::invalid(
                    &path,
                    format!("tensor `{}`: row {r} out of range ({nrows} rows)", t.name),
                ));
            }
            // Contiguous little-endian floats, the common case: decode the row's bytes in
            // one pass (check_readable proved the whole tensor lies inside `bytes`).
            if t.strides.is_none() && !t.big_endian {
                let start = t.element_offset + r * ncols;
                let mut row = out.row_mut(i);
                if let Some(dst) = row.as_slice_mut()
                    && t.dtype.decode_le_run(&bytes, start, dst)
                {
                    continue;
                }
            }
            for c in 0..ncols {
                let idx = Self::storage_index(t, r * ncols + c);
                out[[i, c]] = t
                    .dtype
                    .decode(&bytes, idx, t.big_endian)
                    .unwrap_or(f64::NAN);
            }
        }
        Ok(out)
    }

    /// Reads an integer tensor exactly, flattened in C order.
    pub fn read_i64(&self, t: &TensorInfo) -> Result<Array1<i64>, CheckpointError> {
        let path = self.file_of(t)?.path.clone();
        if !t.dtype.is_integer() {
            return Err(CheckpointError::invalid(
                &path,
                format!(
                    "tensor `{}` has type {}, expected an integer type",
                    t.name, t.dtype
                ),
            ));
        }
        let out = self.read_all(t, |bytes, idx| {
            t.dtype
                .decode_int(bytes, idx, t.big_endian)
                .unwrap_or(i64::MIN)
        })?;
        Ok(Array1::from(out))
    }

    /// Every element of `t` in C order, decoded by `decode(storage, storage index)`,
    /// after the budget and readability checks (which prove every index is inside the
    /// storage).
    fn read_all<T>(
        &self,
        t: &TensorInfo,
        decode: impl Fn(&[u8], usize) -> T,
    ) -> Result<Vec<T>, CheckpointError> {
        self.check_budget(t, t.numel())?;
        let bytes = self.storage_bytes(t)?;
        self.check_readable(t, &bytes)?;
        Ok((0..t.numel())
            .map(|flat| decode(&bytes, Self::storage_index(t, flat)))
            .collect())
    }
}

/// Decompresses the first `limit` bytes of one member of a zip archive held in `file`
/// (fewer when the member is shorter). The buffer grows with the bytes really inflated,
/// never with the size the archive declares.
fn read_zip_member(
    file: &SourceFile,
    member: &str,
    limit: u64,
) -> Result<Vec<u8>, CheckpointError> {
    use std::io::Read;
    let mut archive = zip::ZipArchive::new(std::io::Cursor::new(file.bytes())).map_err(|e| {
        CheckpointError::invalid(&file.path, format!("not a readable zip archive: {e}"))
    })?;
    let entry = archive.by_name(member).map_err(|e| {
        CheckpointError::invalid(&file.path, format!("zip member `{}`: {e}", shown(member)))
    })?;
    let first = entry.size().min(limit).min(64 << 20) as usize;
    let mut out = Vec::with_capacity(first);
    entry.take(limit).read_to_end(&mut out).map_err(|e| {
        CheckpointError::invalid(&file.path, format!("zip member `{}`: {e}", shown(member)))
    })?;
    Ok(out)
}
