//! NumPy arrays, dtypes and scalars as NumPy pickles them, read as tensors.

use super::*;

/// A NumPy array read from its pickled form (`_reconstruct` + state, or a `scalar`).
#[derive(Debug, Clone)]
pub struct NdArray {
    /// Element type.
    pub dtype: crate::checkpoint::Dtype,
    /// Elements stored big-endian.
    pub big_endian: bool,
    /// Shape (empty for a scalar).
    pub shape: Vec<usize>,
    /// Column-major element order.
    pub fortran: bool,
    /// The elements' bytes.
    pub data: Rc<[u8]>,
}

/// Class tags of the NumPy objects [`ndarray_of`] reads.
pub(super) const NP_ARRAY: &str = "numpy.ndarray";
pub(super) const NP_SCALAR: &str = "numpy.scalar";
pub(super) const NP_DTYPE: &str = "numpy.dtype";

/// `(dtype, big_endian)` of a pickled `numpy.dtype` object: its type string (`f4`) from
/// the arguments, its byte order (`<`, `>`, `|`, `=`) from the state; `=` (native) is
/// read as little-endian, the byte order of every machine that writes these files today.
fn np_dtype(v: &Value) -> Result<(crate::checkpoint::Dtype, bool), String> {
    let Value::Object(o) = v else {
        return Err(format!(
            "the array's dtype is a {}, not a numpy.dtype",
            v.kind()
        ));
    };
    if &*o.class != NP_DTYPE {
        return Err(format!(
            "the array's dtype is a `{}`",
            crate::checkpoint::shown(&o.class)
        ));
    }
    let code = match &o.args {
        Value::Tuple(t) => match t.first() {
            Some(Value::Str(s)) => s.clone(),
            _ => return Err("numpy.dtype without a type string".into()),
        },
        _ => return Err("numpy.dtype without arguments".into()),
    };
    let order = match &*o.state.borrow() {
        Some(Value::Tuple(t)) => match t.get(1) {
            Some(Value::Str(s)) => s.to_string(),
            _ => String::new(),
        },
        _ => String::new(),
    };
    let order = if order == "=" { "<" } else { &order };
    crate::checkpoint::numpy::dtype_of(&format!("{order}{code}"))
}

/// The element type given to a NumPy array of Python objects (dtype `O`): its elements
/// are more pickles, never read, so the array is listed as skipped with
/// [`crate::checkpoint::Dtype::unsupported_reason`].
pub const OBJECT_DTYPE: &str = "object";

/// Reads a pickled NumPy array or scalar. `None` when `o` is not one; an error when it
/// is one but its state is not what NumPy writes, or its bytes do not match its shape.
/// An array of Python objects (dtype `O`, its data a list) comes back with its shape,
/// no bytes and the element type [`OBJECT_DTYPE`]; an object scalar is `None`.
pub fn ndarray_of(o: &Object) -> Option<Result<NdArray, String>> {
    let class = &*o.class;
    if class != NP_ARRAY && class != NP_SCALAR {
        return None;
    }
    let result = (|| -> Result<Option<NdArray>, String> {
        let (dtype_v, shape, fortran, data) = if class == NP_SCALAR {
            // scalar(dtype, bytes)
            let Value::Tuple(a) = &o.args else {
                return Err("numpy scalar without arguments".into());
            };
            match a.as_slice() {
                [d, Value::Bytes(b)] => (d.clone(), Vec::new(), false, b.clone()),
                [_, _] => return Ok(None),
                _ => return Err("numpy scalar expects (dtype, bytes)".into()),
            }
        } else {
            // _reconstruct(ndarray, (0,), b'b') then BUILD((version,) shape, dtype,
            // is_fortran, data).
            let state = o.state.borrow();
            let Some(Value::Tuple(t)) = &*state else {
                return Err("numpy array without its state".into());
            };
            let rest = match t.as_slice() {
                [Value::Int(_), rest @ ..] if rest.len() == 4 => rest,
                rest if rest.len() == 4 => rest,
                _ => {
                    return Err(
                        "numpy array state is not (version, shape, dtype, fortran, data)".into(),
                    );
                }
            };
            let shape = u64_tuple(&rest[0])
                .ok_or("numpy array shape is not a tuple of integers")?
                .into_iter()
                .map(|d| usize::try_from(d).map_err(|_| format!("dimension {d} is too large")))
                .collect::<Result<Vec<_>, _>>()?;
            if shape.len() > MAX_DIMS {
                return Err(format!(
                    "numpy array of {} dimensions, more than the limit of {MAX_DIMS}",
                    shape.len()
                ));
            }
            let fortran = matches!(rest[2], Value::Bool(true) | Value::Int(1));
            let data = match &rest[3] {
                Value::Bytes(b) => b.clone(),
                Value::Str(s) => Rc::from(latin1(s)?),
                // A list of Python objects: an object array, listed but not read.
                _ => {
                    return Ok(Some(NdArray {
                        dtype: crate::checkpoint::Dtype::Other {
                            name: OBJECT_DTYPE.into(),
                        },
                        big_endian: false,
                        shape,
                        fortran,
                        data: Rc::from(Vec::new()),
                    }));
                }
            };
            (rest[1].clone(), shape, fortran, data)
        };
        let (dtype, big_endian) = match np_dtype(&dtype_v) {
            Ok(d) => d,
            // An object scalar: its value is a pickle of its own.
            Err(e) if e.contains("Python objects") && class == NP_SCALAR => return Ok(None),
            Err(e) if e.contains("Python objects") => (
                crate::checkpoint::Dtype::Other {
                    name: OBJECT_DTYPE.into(),
                },
                false,
            ),
            Err(e) => return Err(e),
        };
        let numel = shape
            .iter()
            .try_fold(1usize, |a, &b| a.checked_mul(b))
            .ok_or("numpy array shape overflows")?;
        if let Some(size) = dtype.size()
            && numel.checked_mul(size) != Some(data.len())
        {
            return Err(format!(
                "numpy array of shape {shape:?} and {size}-byte elements holds {} bytes",
                data.len()
            ));
        }
        Ok(Some(NdArray {
            dtype,
            big_endian,
            shape,
            fortran,
            data,
        }))
    })();
    result.transpose()
}

/// The bytes of a `latin1` text (each character one byte), as `_codecs.encode(s,
/// 'latin1')` gives them; protocol-2 pickles written by Python 3 carry bytes this way.
pub(super) fn latin1(s: &str) -> Result<Vec<u8>, String> {
    s.chars()
        .map(|c| {
            u8::try_from(c as u32)
                .map_err(|_| format!("character U+{:04X} is not latin1", c as u32))
        })
        .collect()
}
