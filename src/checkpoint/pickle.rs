//! A restricted pickle reader for `torch.save` archives: it never executes anything.
//!
//! A pickle is a program for a stack machine, and `pickle.load` runs it: `GLOBAL` imports
//! any callable and `REDUCE` calls it. Opening an untrusted checkpoint with Python can
//! therefore run arbitrary code. posaudit must be safe to point at any file, so this module
//! interprets the opcodes symbolically:
//!
//! - only the opcodes `torch.save` emits are understood (protocol 2, which torch uses by
//!   default, plus the protocol-4 framing, memo and `STACK_GLOBAL` opcodes); any other
//!   opcode is an error;
//! - `GLOBAL` is checked against an allow-list of names whose meaning we reimplement as
//!   data (`torch._utils._rebuild_tensor_v2` builds a [`TensorRef`] record, `torch.*Storage`
//!   names an element type, `collections.OrderedDict` makes a dict). Any other name, such as
//!   `os.system` or `builtins.eval`, stops the reading with an error naming it;
//! - hard limits bound the work and memory a crafted file can cause: pickle size, number of
//!   operations, memo entries, stack and container nesting depth. Containers are shared
//!   through reference counting, so a memo reference never copies data.
//!
//! Decision (see dependencies.md): `serde-pickle` cannot read torch files (no persistent
//! ids), and `repugnant-pickle` is unmaintained and copies memo entries on each reference.
//! Since refusing to execute pickled code is the promise of this tool, the reader is ours:
//! about 500 lines we can audit, limited to what `torch.save` writes.

use std::cell::RefCell;
use std::collections::HashMap;
use std::rc::Rc;

/// Largest `data.pkl` we accept. A state dict's pickle is a few bytes per tensor plus its
/// names; 256 MiB allows millions of tensors.
pub const MAX_PICKLE_BYTES: usize = 256 << 20;
/// Most opcodes executed.
pub const MAX_OPS: usize = 50_000_000;
/// Most memo entries (a state dict's pickle memoizes a few objects per tensor). A memo
/// entry is one 24-byte value, so the memo stays under about 100 MB.
pub const MAX_MEMO: usize = 4_000_000;
/// Most values put into containers (list, tuple and dict items) over the whole pickle:
/// 10 million 24-byte values, about 240 MB at worst.
pub const MAX_ITEMS: usize = 10_000_000;
/// Deepest stack, and deepest container nesting when flattening.
pub const MAX_DEPTH: usize = 1_000;
/// Most dimensions of one tensor.
pub const MAX_DIMS: usize = 64;
/// Longest string or bytes object.
pub const MAX_STRING: usize = 64 << 20;

/// A tensor as `torch._utils._rebuild_tensor_v2` describes it, without its data.
#[derive(Debug, Clone, PartialEq)]
pub struct TensorRef {
    /// The storage's key: the archive member is `<archive>/data/<key>`.
    pub key: String,
    /// The storage class name, e.g. `FloatStorage`.
    pub storage_type: String,
    /// Elements in the storage, as the persistent id declares.
    pub storage_numel: u64,
    /// Element offset of the tensor in its storage.
    pub offset: u64,
    /// Shape.
    pub size: Vec<u64>,
    /// Element strides.
    pub stride: Vec<u64>,
}

/// A storage as a persistent id names it.
#[derive(Debug, Clone, PartialEq)]
pub struct StorageRef {
    /// Storage class name.
    pub storage_type: Rc<str>,
    /// Key of the archive member.
    pub key: Rc<str>,
    /// Declared element count.
    pub numel: u64,
}

/// A value on the pickle machine's stack.
#[derive(Debug, Clone)]
pub enum Value {
    /// `None`.
    None,
    /// `True` / `False`.
    Bool(bool),
    /// An integer that fits 64 bits.
    Int(i64),
    /// An integer too large for 64 bits (kept opaque).
    BigInt,
    /// A float.
    Float(f64),
    /// A text string.
    Str(Rc<str>),
    /// A bytes object.
    Bytes(Rc<[u8]>),
    /// A tuple.
    Tuple(Rc<Vec<Value>>),
    /// A list (shared: memo references see later appends).
    List(Rc<RefCell<Vec<Value>>>),
    /// A dict in insertion order (shared: memo references see later items).
    Dict(Rc<RefCell<Vec<(Value, Value)>>>),
    /// An allowed global, by its dotted name.
    Global(Rc<str>),
    /// A storage named by a persistent id (boxed so that a value stays 24 bytes).
    Storage(Rc<StorageRef>),
    /// A rebuilt tensor.
    Tensor(Rc<TensorRef>),
    /// A harmless object we do not model (a `torch.device`, a dtype).
    Opaque(Rc<str>),
    /// An object built as inert data: its class name, arguments and state, never called
    /// (a stand-in, or a NumPy array / dtype / scalar read by [`ndarray_of`]).
    Object(Rc<Object>),
    /// The stack mark.
    Mark,
}

/// Dropping a deeply nested value must not recurse once per level (a crafted pickle can
/// nest millions of tuples with a few bytes each): children are moved to a work list.
impl Drop for Value {
    fn drop(&mut self) {
        let mut work = Vec::new();
        take_children(self, &mut work);
        while let Some(mut v) = work.pop() {
            take_children(&mut v, &mut work);
        }
    }
}

/// Moves the children of a container out when this is its last reference.
fn take_children(v: &mut Value, out: &mut Vec<Value>) {
    match v {
        Value::Tuple(rc) => {
            if let Some(items) = Rc::get_mut(rc) {
                out.append(items);
            }
        }
        Value::List(rc) => {
            if let Some(items) = Rc::get_mut(rc) {
                out.append(items.get_mut());
            }
        }
        Value::Dict(rc) => {
            if let Some(items) = Rc::get_mut(rc) {
                for (k, v) in items.get_mut().drain(..) {
                    out.push(k);
                    out.push(v);
                }
            }
        }
        Value::Object(rc) => {
            if let Some(o) = Rc::get_mut(rc) {
                out.push(std::mem::replace(&mut o.args, Value::None));
                out.extend(o.state.get_mut().take());
                for (k, v) in o.items.get_mut().drain(..) {
                    out.push(k);
                    out.push(v);
                }
                out.append(o.list.get_mut());
            }
        }
        _ => {}
    }
}

impl Value {
    fn kind(&self) -> &'static str {
        match self {
            Value::None => "None",
            Value::Bool(_) => "bool",
            Value::Int(_) | Value::BigInt => "int",
            Value::Float(_) => "float",
            Value::Str(_) => "str",
            Value::Bytes(_) => "bytes",
            Value::Tuple(_) => "tuple",
            Value::List(_) => "list",
            Value::Dict(_) => "dict",
            Value::Global(_) => "global",
            Value::Storage(_) => "storage",
            Value::Tensor(_) => "tensor",
            Value::Opaque(_) => "object",
            Value::Object(_) => "object",
            Value::Mark => "mark",
        }
    }
}

/// Globals whose meaning we reimplement as data. Everything else is refused.
fn allowed_global(module: &str, name: &str) -> bool {
    match module {
        "torch._utils" => matches!(
            name,
            "_rebuild_tensor_v2"
                | "_rebuild_tensor"
                | "_rebuild_parameter"
                | "_rebuild_parameter_with_state"
        ),
        "collections" => name == "OrderedDict",
        "torch" => {
            name.ends_with("Storage")
                && name.len() > "Storage".len()
                && name.chars().all(|c| c.is_ascii_alphanumeric() || c == '_')
                || name == "device"
                || is_torch_dtype(name)
        }
        _ => false,
    }
}

fn is_torch_dtype(name: &str) -> bool {
    matches!(
        name,
        "float64"
            | "float32"
            | "float16"
            | "bfloat16"
            | "int64"
            | "int32"
            | "int16"
            | "int8"
            | "uint8"
            | "bool"
    )
}

/// An object the reader does not model, built as inert data: the class it names, the
/// arguments it would be called with, and the state and items it would be given. Nothing
/// is imported or called.
#[derive(Debug)]
pub struct Object {
    /// The dotted global name of its class or factory (`argparse.Namespace`).
    pub class: Rc<str>,
    /// The arguments tuple of `REDUCE` / `NEWOBJ`.
    pub args: Value,
    /// The state `BUILD` gives it (an attribute dict, or a tuple for NumPy objects).
    pub state: RefCell<Option<Value>>,
    /// Items set on it (`SETITEM(S)`, a dict subclass).
    pub items: RefCell<Vec<(Value, Value)>>,
    /// Items appended to it (`APPEND(S)`, a list subclass).
    pub list: RefCell<Vec<Value>>,
}

impl Object {
    fn new(class: Rc<str>, args: Value) -> Self {
        Object {
            class,
            args,
            state: RefCell::new(None),
            items: RefCell::new(Vec::new()),
            list: RefCell::new(Vec::new()),
        }
    }
}

/// A global that was stood in for: its name and how many objects were built from it.
#[derive(Debug, Clone, PartialEq, Eq, serde::Serialize)]
pub struct StandIn {
    /// The dotted global name (`argparse.Namespace`, `__main__.TrainConfig`).
    pub global: String,
    /// Objects built from it (0 when the pickle only refers to it, e.g. as a factory).
    pub count: usize,
    /// True for classes posaudit knows to carry data only (argparse namespaces, paths,
    /// dates, built-in types, NumPy random states); false for any other global, which a
    /// full unpickler would import and run code of (listed as a warning too).
    pub known: bool,
}

/// How the reader treats a global.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum GlobalClass {
    /// Its meaning is reimplemented as data (tensor rebuilds, storages, dicts, NumPy
    /// arrays).
    Modeled,
    /// Built as an inert [`Object`]; `known` as in [`StandIn::known`].
    StandIn {
        /// Known to carry data only.
        known: bool,
    },
    /// It exists to run code or reach the system: the file is refused.
    RunsCode,
}

/// Modules whose every global runs code, reaches the system or loads more pickles.
const CODE_MODULES: &[&str] = &[
    "os",
    "posix",
    "nt",
    "subprocess",
    "_posixsubprocess",
    "runpy",
    "importlib",
    "pty",
    "socket",
    "shutil",
    "webbrowser",
    "sys",
    "ctypes",
    "multiprocessing",
    "code",
    "codeop",
    "marshal",
    "pickle",
    "_pickle",
    "cPickle",
    "dill",
    "cloudpickle",
    "commands",
    "popen2",
    "asyncio",
    "pdb",
    "bdb",
    "timeit",
    "trace",
    "profile",
    "cProfile",
    "io",
    "_io",
    "tempfile",
    "glob",
    "urllib",
    "http",
    "ftplib",
    "smtplib",
    "telnetlib",
    "torch.hub",
    "torch.jit",
    "torch.package",
    "torch.utils.cpp_extension",
    "numpy.f2py",
    "numpy.distutils",
];

/// `module.name` globals outside [`CODE_MODULES`] that run code.
const CODE_GLOBALS: &[(&str, &str)] = &[
    ("operator", "attrgetter"),
    ("operator", "methodcaller"),
    ("codecs", "open"),
    ("torch", "load"),
    ("numpy", "load"),
    ("numpy", "loadtxt"),
    ("numpy", "fromfile"),
];

/// `builtins` names that run code, open files or reach attributes by name.
const CODE_BUILTINS: &[&str] = &[
    "eval",
    "exec",
    "execfile",
    "compile",
    "__import__",
    "getattr",
    "setattr",
    "delattr",
    "open",
    "file",
    "input",
    "raw_input",
    "breakpoint",
    "globals",
    "locals",
    "vars",
    "exit",
    "quit",
    "help",
    "reload",
    "apply",
];

/// `builtins` types whose objects are plain data.
const DATA_BUILTINS: &[&str] = &[
    "int",
    "long",
    "float",
    "complex",
    "str",
    "unicode",
    "bool",
    "list",
    "dict",
    "tuple",
    "set",
    "frozenset",
    "object",
    "slice",
    "range",
    "xrange",
    "bytearray",
    "NoneType",
];

/// True when `module` is `m` or a submodule of it.
fn in_module(module: &str, m: &str) -> bool {
    module == m
        || module
            .strip_prefix(m)
            .is_some_and(|rest| rest.starts_with('.'))
}

/// Sorts a global into [`GlobalClass`].
pub fn classify_global(module: &str, name: &str) -> GlobalClass {
    let builtins = matches!(module, "builtins" | "__builtin__");
    if CODE_MODULES.iter().any(|m| in_module(module, m))
        || CODE_GLOBALS.contains(&(module, name))
        || builtins && CODE_BUILTINS.contains(&name)
    {
        return GlobalClass::RunsCode;
    }
    let numpy_core = matches!(module, "numpy.core.multiarray" | "numpy._core.multiarray");
    if allowed_global(module, name)
        || (module, name) == ("collections", "defaultdict")
        || (module, name) == ("_codecs", "encode")
        || builtins && name == "bytes"
        || numpy_core && matches!(name, "_reconstruct" | "scalar")
        || module == "numpy" && matches!(name, "ndarray" | "dtype")
    {
        return GlobalClass::Modeled;
    }
    let known = builtins && DATA_BUILTINS.contains(&name)
        || (module, name) == ("argparse", "Namespace")
        || matches!(module, "copyreg" | "copy_reg") && name == "_reconstructor"
        || [
            "pathlib",
            "datetime",
            "decimal",
            "fractions",
            "uuid",
            "numpy.random",
        ]
        .iter()
        .any(|m| in_module(module, m))
        || in_module(module, "torch.nn.modules")
        || (module, name) == ("torch", "Size")
        || (module, name) == ("torch.torch_version", "TorchVersion")
        || (module, name) == ("torch.nn.parameter", "Parameter");
    GlobalClass::StandIn { known }
}

/// A NumPy array read from its pickled form (`_reconstruct` + state, or a `scalar`).
#[derive(Debug, Clone)]
pub struct NdArray {
    /// Element type.
    pub dtype: super::Dtype,
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
const NP_ARRAY: &str = "numpy.ndarray";
const NP_SCALAR: &str = "numpy.scalar";
const NP_DTYPE: &str = "numpy.dtype";

/// `(dtype, big_endian)` of a pickled `numpy.dtype` object: its type string (`f4`) from
/// the arguments, its byte order (`<`, `>`, `|`, `=`) from the state; `=` (native) is
/// read as little-endian, the byte order of every machine that writes these files today.
fn np_dtype(v: &Value) -> Result<(super::Dtype, bool), String> {
    let Value::Object(o) = v else {
        return Err(format!(
            "the array's dtype is a {}, not a numpy.dtype",
            v.kind()
        ));
    };
    if &*o.class != NP_DTYPE {
        return Err(format!(
            "the array's dtype is a `{}`",
            super::shown(&o.class)
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
    super::numpy::dtype_of(&format!("{order}{code}"))
}

/// Reads a pickled NumPy array or scalar. `None` when `o` is not one; an error when it
/// is one but its state is not what NumPy writes, or its bytes do not match its shape.
/// Arrays of Python objects (dtype `O`) are `None`: their elements are more pickles.
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
                // A list of Python objects: an object array.
                _ => return Ok(None),
            };
            (rest[1].clone(), shape, fortran, data)
        };
        let (dtype, big_endian) = match np_dtype(&dtype_v) {
            Ok(d) => d,
            Err(e) if e.contains("Python objects") => return Ok(None),
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
fn latin1(s: &str) -> Result<Vec<u8>, String> {
    s.chars()
        .map(|c| {
            u8::try_from(c as u32)
                .map_err(|_| format!("character U+{:04X} is not latin1", c as u32))
        })
        .collect()
}

/// What [`load_with_stand_ins`] returns.
#[derive(Debug)]
pub struct Loaded {
    /// The unpickled value.
    pub value: Value,
    /// The globals stood in for, in the order they first appear.
    pub stand_ins: Vec<StandIn>,
}

/// Reads a `data.pkl` and returns the unpickled value (tensors as [`TensorRef`]s).
///
/// Errors are one lower-case line: the problem and the byte position.
pub fn load(bytes: &[u8]) -> Result<Value, String> {
    load_with_stand_ins(bytes).map(|l| l.value)
}

/// [`load`], also returning the globals that were stood in for.
pub fn load_with_stand_ins(bytes: &[u8]) -> Result<Loaded, String> {
    if bytes.len() > MAX_PICKLE_BYTES {
        return Err(format!(
            "data.pkl is {} bytes, more than the {} MiB limit",
            bytes.len(),
            MAX_PICKLE_BYTES >> 20
        ));
    }
    Machine {
        bytes,
        pos: 0,
        stack: Vec::new(),
        marks: Vec::new(),
        memo: Vec::new(),
        sparse_memo: HashMap::new(),
        items: 0,
        stand_ins: Vec::new(),
        stand_in_index: HashMap::new(),
    }
    .run()
}

struct Machine<'a> {
    bytes: &'a [u8],
    pos: usize,
    stack: Vec<Value>,
    marks: Vec<usize>,
    /// Memo entries 0, 1, 2, ... as `torch.save` writes them (BINPUT with the next index,
    /// or MEMOIZE).
    memo: Vec<Value>,
    /// Memo entries written out of order (a crafted or unusual pickle).
    sparse_memo: HashMap<u64, Value>,
    /// Values put into containers so far ([`MAX_ITEMS`]).
    items: usize,
    /// Globals stood in for, with their object counts.
    stand_ins: Vec<StandIn>,
    /// Position of each stood-in global in `stand_ins`.
    stand_in_index: HashMap<Rc<str>, usize>,
}

impl<'a> Machine<'a> {
    fn take(&mut self, n: usize) -> Result<&'a [u8], String> {
        let end = self
            .pos
            .checked_add(n)
            .filter(|&e| e <= self.bytes.len())
            .ok_or_else(|| {
                format!(
                    "pickle ends early: {n} bytes wanted at byte {} of {}",
                    self.pos,
                    self.bytes.len()
                )
            })?;
        let s = &self.bytes[self.pos..end];
        self.pos = end;
        Ok(s)
    }

    fn u8(&mut self) -> Result<u8, String> {
        Ok(self.take(1)?[0])
    }

    fn u16(&mut self) -> Result<u16, String> {
        let b = self.take(2)?;
        Ok(u16::from_le_bytes([b[0], b[1]]))
    }

    fn u32(&mut self) -> Result<u32, String> {
        let b = self.take(4)?;
        Ok(u32::from_le_bytes([b[0], b[1], b[2], b[3]]))
    }

    fn u64(&mut self) -> Result<u64, String> {
        let b = self.take(8)?;
        let mut a = [0u8; 8];
        a.copy_from_slice(b);
        Ok(u64::from_le_bytes(a))
    }

    fn line(&mut self) -> Result<&'a str, String> {
        let rest = &self.bytes[self.pos..];
        let n = rest
            .iter()
            .take(4096)
            .position(|&b| b == b'\n')
            .ok_or_else(|| format!("unterminated text argument at byte {}", self.pos))?;
        let s = std::str::from_utf8(&rest[..n])
            .map_err(|_| format!("text argument at byte {} is not UTF-8", self.pos))?;
        self.pos += n + 1;
        Ok(s)
    }

    fn sized(&mut self, n: u64) -> Result<&'a [u8], String> {
        let n = usize::try_from(n)
            .ok()
            .filter(|&n| n <= MAX_STRING)
            .ok_or_else(|| {
                format!(
                    "string of {n} bytes at byte {} exceeds the {} MiB limit",
                    self.pos,
                    MAX_STRING >> 20
                )
            })?;
        self.take(n)
    }

    fn text(&mut self, n: u64) -> Result<Value, String> {
        let at = self.pos;
        let b = self.sized(n)?;
        let s = std::str::from_utf8(b).map_err(|_| format!("string at byte {at} is not UTF-8"))?;
        Ok(Value::Str(Rc::from(s)))
    }

    fn push(&mut self, v: Value) -> Result<(), String> {
        if self.stack.len() >= MAX_DEPTH * 1000 {
            return Err(format!("pickle stack exceeds {} entries", MAX_DEPTH * 1000));
        }
        self.stack.push(v);
        Ok(())
    }

    fn pop(&mut self) -> Result<Value, String> {
        let floor = self.marks.last().copied().unwrap_or(0);
        if self.stack.len() <= floor {
            return Err(format!("stack underflow at byte {}", self.pos));
        }
        self.stack
            .pop()
            .ok_or_else(|| format!("stack underflow at byte {}", self.pos))
    }

    fn top(&mut self) -> Result<&mut Value, String> {
        let pos = self.pos;
        let floor = self.marks.last().copied().unwrap_or(0);
        if self.stack.len() <= floor {
            return Err(format!("stack underflow at byte {pos}"));
        }
        self.stack
            .last_mut()
            .ok_or_else(|| format!("stack underflow at byte {pos}"))
    }

    fn pop_mark(&mut self) -> Result<Vec<Value>, String> {
        let m = self
            .marks
            .pop()
            .ok_or_else(|| format!("no mark on the stack at byte {}", self.pos))?;
        if m > self.stack.len() {
            return Err(format!("corrupt mark at byte {}", self.pos));
        }
        Ok(self.stack.split_off(m))
    }

    fn memo_len(&self) -> usize {
        self.memo.len() + self.sparse_memo.len()
    }

    fn memo_put(&mut self, idx: u64) -> Result<(), String> {
        let v = self.top()?.clone();
        let dense = self.memo.len() as u64;
        if idx < dense {
            self.memo[idx as usize] = v;
            return Ok(());
        }
        if self.memo_len() >= MAX_MEMO && !self.sparse_memo.contains_key(&idx) {
            return Err(format!(
                "pickle memo exceeds {MAX_MEMO} entries (the limit) at byte {}",
                self.pos
            ));
        }
        if idx == dense {
            self.sparse_memo.remove(&idx);
            self.memo.push(v);
            // Entries written ahead of order that now continue the dense run.
            while let Some(next) = self.sparse_memo.remove(&(self.memo.len() as u64)) {
                self.memo.push(next);
            }
        } else {
            self.sparse_memo.insert(idx, v);
        }
        Ok(())
    }

    fn memo_get(&mut self, idx: u64) -> Result<(), String> {
        let v = usize::try_from(idx)
            .ok()
            .and_then(|i| self.memo.get(i))
            .or_else(|| self.sparse_memo.get(&idx))
            .cloned()
            .ok_or_else(|| format!("memo entry {idx} read before it was written"))?;
        self.push(v)
    }

    /// Counts `n` values put into containers against [`MAX_ITEMS`].
    fn count_items(&mut self, n: usize) -> Result<(), String> {
        self.items = self.items.saturating_add(n);
        if self.items > MAX_ITEMS {
            return Err(format!(
                "pickle builds more than {MAX_ITEMS} container items (the limit) at byte {}",
                self.pos
            ));
        }
        Ok(())
    }

    fn global(&mut self, module: &str, name: &str) -> Result<(), String> {
        let full: Rc<str> = Rc::from(format!("{module}.{name}"));
        match classify_global(module, name) {
            GlobalClass::RunsCode => {
                return Err(format!(
                    "refuses global `{}` (posaudit never executes pickled code): it exists to run code or reach the system, and loading this file with full unpickling (pickle.load, torch.load with weights_only=False) would run it",
                    super::shown(&full)
                ));
            }
            GlobalClass::Modeled => {}
            GlobalClass::StandIn { known } => {
                if !self.stand_in_index.contains_key(&full) {
                    self.stand_in_index
                        .insert(full.clone(), self.stand_ins.len());
                    self.stand_ins.push(StandIn {
                        global: full.to_string(),
                        count: 0,
                        known,
                    });
                }
            }
        }
        self.push(Value::Global(full))
    }

    /// Calls `func` with `args` as data: a stood-in global builds an inert [`Object`],
    /// a modeled one is applied by [`reduce`].
    fn call(&mut self, func: &Value, args: Value, at: usize) -> Result<Value, String> {
        if let Value::Global(g) = func
            && let Some(&i) = self.stand_in_index.get(g)
        {
            self.stand_ins[i].count += 1;
            return Ok(Value::Object(Rc::new(Object::new(g.clone(), args))));
        }
        reduce(func, &args, at)
    }

    fn run(mut self) -> Result<Loaded, String> {
        let mut ops = 0usize;
        loop {
            ops += 1;
            if ops > MAX_OPS {
                return Err(format!("pickle runs more than {MAX_OPS} operations"));
            }
            let at = self.pos;
            let op = self.u8()?;
            match op {
                // PROTO
                0x80 => {
                    let v = self.u8()?;
                    if v > 5 {
                        return Err(format!("pickle protocol {v} is not supported"));
                    }
                }
                // FRAME: a length prefix only; the content follows inline.
                0x95 => {
                    self.u64()?;
                }
                // STOP
                b'.' => {
                    let value = self.pop()?;
                    let stand_ins = std::mem::take(&mut self.stand_ins)
                        .into_iter()
                        .filter(|s| s.count > 0 || !s.known)
                        .collect();
                    return Ok(Loaded { value, stand_ins });
                }
                b'(' => {
                    if self.marks.len() >= MAX_DEPTH {
                        return Err(format!("more than {MAX_DEPTH} nested marks"));
                    }
                    self.marks.push(self.stack.len());
                }
                b'}' => self.push(Value::Dict(Rc::default()))?,
                b']' => self.push(Value::List(Rc::default()))?,
                b')' => self.push(Value::Tuple(Rc::default()))?,
                b't' => {
                    let items = self.pop_mark()?;
                    self.count_items(items.len())?;
                    self.push(Value::Tuple(Rc::new(items)))?;
                }
                0x85 => {
                    self.count_items(1)?;
                    let a = self.pop()?;
                    self.push(Value::Tuple(Rc::new(vec![a])))?;
                }
                0x86 => {
                    self.count_items(2)?;
                    let b = self.pop()?;
                    let a = self.pop()?;
                    self.push(Value::Tuple(Rc::new(vec![a, b])))?;
                }
                0x87 => {
                    self.count_items(3)?;
                    let c = self.pop()?;
                    let b = self.pop()?;
                    let a = self.pop()?;
                    self.push(Value::Tuple(Rc::new(vec![a, b, c])))?;
                }
                b'l' => {
                    let items = self.pop_mark()?;
                    self.count_items(items.len())?;
                    self.push(Value::List(Rc::new(RefCell::new(items))))?;
                }
                b'd' => {
                    let items = self.pop_mark()?;
                    self.count_items(items.len())?;
                    let dict = pairs(items, at)?;
                    self.push(Value::Dict(Rc::new(RefCell::new(dict))))?;
                }
                // BINPUT, LONG_BINPUT, MEMOIZE
                b'q' => {
                    let i = self.u8()? as u64;
                    self.memo_put(i)?;
                }
                b'r' => {
                    let i = self.u32()? as u64;
                    self.memo_put(i)?;
                }
                0x94 => {
                    let i = self.memo_len() as u64;
                    self.memo_put(i)?;
                }
                // BINGET, LONG_BINGET
                b'h' => {
                    let i = self.u8()? as u64;
                    self.memo_get(i)?;
                }
                b'j' => {
                    let i = self.u32()? as u64;
                    self.memo_get(i)?;
                }
                // SETITEM, SETITEMS
                b's' => {
                    self.count_items(2)?;
                    let v = self.pop()?;
                    let k = self.pop()?;
                    dict_extend(self.top()?, vec![(k, v)], at)?;
                }
                b'u' => {
                    let items = self.pop_mark()?;
                    self.count_items(items.len())?;
                    let items = pairs(items, at)?;
                    dict_extend(self.top()?, items, at)?;
                }
                // APPEND, APPENDS
                b'a' => {
                    self.count_items(1)?;
                    let v = self.pop()?;
                    list_extend(self.top()?, vec![v], at)?;
                }
                b'e' => {
                    let items = self.pop_mark()?;
                    self.count_items(items.len())?;
                    list_extend(self.top()?, items, at)?;
                }
                // GLOBAL (two text lines), STACK_GLOBAL (two strings on the stack)
                b'c' => {
                    let module = self.line()?;
                    let name = self.line()?;
                    self.global(module, name)?;
                }
                0x93 => {
                    let name = self.pop()?;
                    let module = self.pop()?;
                    match (&module, &name) {
                        (Value::Str(m), Value::Str(n)) => self.global(m, n)?,
                        _ => return Err(format!("STACK_GLOBAL at byte {at} needs two strings")),
                    }
                }
                // Strings and bytes.
                b'X' => {
                    let n = self.u32()? as u64;
                    let v = self.text(n)?;
                    self.push(v)?;
                }
                0x8c => {
                    let n = self.u8()? as u64;
                    let v = self.text(n)?;
                    self.push(v)?;
                }
                0x8d => {
                    let n = self.u64()?;
                    let v = self.text(n)?;
                    self.push(v)?;
                }
                b'T' | b'B' => {
                    let n = self.u32()? as u64;
                    let b = self.sized(n)?;
                    self.push(bytes_value(op, b))?;
                }
                b'U' | b'C' => {
                    let n = self.u8()? as u64;
                    let b = self.sized(n)?;
                    self.push(bytes_value(op, b))?;
                }
                0x8e => {
                    let n = self.u64()?;
                    let b = self.sized(n)?;
                    self.push(Value::Bytes(Rc::from(b)))?;
                }
                // Numbers and constants.
                b'J' => {
                    let v = self.u32()? as i32;
                    self.push(Value::Int(v as i64))?;
                }
                b'K' => {
                    let v = self.u8()?;
                    self.push(Value::Int(v as i64))?;
                }
                b'M' => {
                    let v = self.u16()?;
                    self.push(Value::Int(v as i64))?;
                }
                0x8a => {
                    let n = self.u8()? as u64;
                    let b = self.sized(n)?;
                    self.push(long_value(b))?;
                }
                0x8b => {
                    let n = self.u32()? as u64;
                    let b = self.sized(n)?;
                    self.push(long_value(b))?;
                }
                b'G' => {
                    // BINFLOAT is big-endian.
                    let b = self.take(8)?;
                    let mut a = [0u8; 8];
                    a.copy_from_slice(b);
                    self.push(Value::Float(f64::from_be_bytes(a)))?;
                }
                b'N' => self.push(Value::None)?,
                0x88 => self.push(Value::Bool(true))?,
                0x89 => self.push(Value::Bool(false))?,
                // Stack manipulation.
                b'0' => {
                    self.pop()?;
                }
                b'1' => {
                    self.pop_mark()?;
                }
                b'2' => {
                    let v = self.top()?.clone();
                    self.push(v)?;
                }
                // BINPERSID: the persistent id of a storage.
                b'Q' => {
                    let pid = self.pop()?;
                    let v = persistent_storage(&pid, at)?;
                    self.push(v)?;
                }
                // REDUCE, NEWOBJ: call an allowed global with a tuple of arguments.
                b'R' | 0x81 => {
                    let args = self.pop()?;
                    let func = self.pop()?;
                    // OrderedDict(list) copies the list's pairs: count them first.
                    if let (Value::Global(g), Value::Tuple(a)) = (&func, &args)
                        && &**g == "collections.OrderedDict"
                        && let Some(Value::List(l)) = a.first()
                    {
                        let n = l.borrow().len();
                        self.count_items(n.saturating_mul(2))?;
                    }
                    let v = self.call(&func, args, at)?;
                    self.push(v)?;
                }
                // NEWOBJ_EX: class, args, kwargs (the keyword arguments are dropped).
                0x92 => {
                    self.pop()?;
                    let args = self.pop()?;
                    let func = self.pop()?;
                    let v = self.call(&func, args, at)?;
                    self.push(v)?;
                }
                // BUILD: object state. A stand-in keeps it as data; other values (an
                // OrderedDict's `_metadata`, a parameter's hooks) stay as they are: no
                // attribute is ever set.
                b'b' => {
                    let state = self.pop()?;
                    if let Value::Object(o) = self.top()? {
                        *o.state.borrow_mut() = Some(state);
                    }
                }
                // EMPTY_SET, ADDITEMS, FROZENSET: sets are read as lists.
                0x8f => self.push(Value::List(Rc::default()))?,
                0x90 => {
                    let items = self.pop_mark()?;
                    self.count_items(items.len())?;
                    list_extend(self.top()?, items, at)?;
                }
                0x91 => {
                    let items = self.pop_mark()?;
                    self.count_items(items.len())?;
                    self.push(Value::List(Rc::new(RefCell::new(items))))?;
                }
                other => {
                    return Err(format!(
                        "unsupported pickle opcode 0x{other:02x} at byte {at} (not something torch.save writes)"
                    ));
                }
            }
        }
    }
}

fn bytes_value(op: u8, b: &[u8]) -> Value {
    // BINSTRING / SHORT_BINSTRING are Python 2 `str`: treat as text when it decodes.
    if matches!(op, b'T' | b'U')
        && let Ok(s) = std::str::from_utf8(b)
    {
        return Value::Str(Rc::from(s));
    }
    Value::Bytes(Rc::from(b))
}

/// Decodes a little-endian two's-complement integer of any length (LONG1 / LONG4).
fn long_value(b: &[u8]) -> Value {
    let Some(&last) = b.last() else {
        return Value::Int(0);
    };
    let fill = if last & 0x80 != 0 { 0xff } else { 0 };
    if b.len() > 8 && (b[8..].iter().any(|&x| x != fill) || (b[7] & 0x80) != (fill & 0x80)) {
        return Value::BigInt;
    }
    let k = b.len().min(8);
    let mut a = [fill; 8];
    a[..k].copy_from_slice(&b[..k]);
    Value::Int(i64::from_le_bytes(a))
}

fn pairs(items: Vec<Value>, at: usize) -> Result<Vec<(Value, Value)>, String> {
    if !items.len().is_multiple_of(2) {
        return Err(format!("odd number of dict items at byte {at}"));
    }
    let mut out = Vec::with_capacity(items.len() / 2);
    let mut it = items.into_iter();
    while let (Some(k), Some(v)) = (it.next(), it.next()) {
        out.push((k, v));
    }
    Ok(out)
}

fn dict_extend(target: &mut Value, items: Vec<(Value, Value)>, at: usize) -> Result<(), String> {
    match target {
        Value::Dict(d) => {
            d.borrow_mut().extend(items);
            Ok(())
        }
        Value::Object(o) => {
            o.items.borrow_mut().extend(items);
            Ok(())
        }
        other => Err(format!("dict items set on a {} at byte {at}", other.kind())),
    }
}

fn list_extend(target: &mut Value, items: Vec<Value>, at: usize) -> Result<(), String> {
    match target {
        Value::List(l) => {
            l.borrow_mut().extend(items);
            Ok(())
        }
        Value::Object(o) => {
            o.list.borrow_mut().extend(items);
            Ok(())
        }
        other => Err(format!(
            "list items appended to a {} at byte {at}",
            other.kind()
        )),
    }
}

fn as_u64(v: &Value) -> Option<u64> {
    match v {
        Value::Int(i) => u64::try_from(*i).ok(),
        _ => None,
    }
}

fn u64_tuple(v: &Value) -> Option<Vec<u64>> {
    match v {
        Value::Tuple(t) => t.iter().map(as_u64).collect(),
        Value::List(l) => l.borrow().iter().map(as_u64).collect(),
        _ => None,
    }
}

/// `('storage', torch.FloatStorage, key, location, numel)` → a storage value.
fn persistent_storage(pid: &Value, at: usize) -> Result<Value, String> {
    let bad = || format!("persistent id at byte {at} is not a torch storage reference");
    let Value::Tuple(t) = pid else {
        return Err(bad());
    };
    match t.as_slice() {
        [Value::Str(tag), Value::Global(class), key, _location, numel] if &**tag == "storage" => {
            let key: Rc<str> = match key {
                Value::Str(s) => s.clone(),
                Value::Int(i) => Rc::from(i.to_string()),
                _ => return Err(bad()),
            };
            let storage_type = class
                .strip_prefix("torch.")
                .filter(|n| n.ends_with("Storage"))
                .ok_or_else(bad)?;
            Ok(Value::Storage(Rc::new(StorageRef {
                storage_type: Rc::from(storage_type),
                key,
                numel: as_u64(numel).ok_or_else(bad)?,
            })))
        }
        _ => Err(bad()),
    }
}

/// Applies an allowed global to its arguments, as data.
fn reduce(func: &Value, args: &Value, at: usize) -> Result<Value, String> {
    let Value::Global(name) = func else {
        return Err(format!(
            "call of a {} at byte {at} (only allowed globals can be called)",
            func.kind()
        ));
    };
    let empty = Vec::new();
    let args_vec: &Vec<Value> = match args {
        Value::Tuple(t) => t,
        _ => &empty,
    };
    match &**name {
        "torch._utils._rebuild_tensor_v2" | "torch._utils._rebuild_tensor" => {
            let bad = |what: &str| format!("{name} at byte {at}: {what}");
            let [storage, offset, size, stride, ..] = args_vec.as_slice() else {
                return Err(bad("expects (storage, offset, size, stride, ...)"));
            };
            let Value::Storage(storage) = storage else {
                return Err(bad("first argument is not a storage"));
            };
            let StorageRef {
                storage_type,
                key,
                numel,
            } = &**storage;
            let size = u64_tuple(size).ok_or_else(|| bad("size is not a tuple of integers"))?;
            let stride =
                u64_tuple(stride).ok_or_else(|| bad("stride is not a tuple of integers"))?;
            if size.len() != stride.len() {
                return Err(bad("size and stride differ in length"));
            }
            if size.len() > MAX_DIMS {
                return Err(bad(&format!(
                    "{} dimensions, more than the limit of {MAX_DIMS}",
                    size.len()
                )));
            }
            Ok(Value::Tensor(Rc::new(TensorRef {
                key: key.to_string(),
                storage_type: storage_type.to_string(),
                storage_numel: *numel,
                offset: as_u64(offset).ok_or_else(|| bad("offset is not an integer"))?,
                size,
                stride,
            })))
        }
        "torch._utils._rebuild_parameter" | "torch._utils._rebuild_parameter_with_state" => {
            match args_vec.first() {
                Some(t @ Value::Tensor(_)) => Ok(t.clone()),
                _ => Err(format!(
                    "{name} at byte {at}: first argument is not a tensor"
                )),
            }
        }
        "collections.OrderedDict" => {
            // OrderedDict() or OrderedDict([(k, v), ...]).
            let mut items = Vec::new();
            if let Some(Value::List(l)) = args_vec.first() {
                for item in l.borrow().iter() {
                    match item {
                        Value::Tuple(kv) if kv.len() == 2 => {
                            items.push((kv[0].clone(), kv[1].clone()))
                        }
                        _ => return Err(format!("{name} at byte {at}: items are not pairs")),
                    }
                }
            }
            Ok(Value::Dict(Rc::new(RefCell::new(items))))
        }
        // defaultdict(factory): a dict; its items follow as SETITEMS.
        "collections.defaultdict" => Ok(Value::Dict(Rc::default())),
        "_codecs.encode" => match args_vec.as_slice() {
            [Value::Str(s), Value::Str(enc)] if matches!(&**enc, "latin1" | "latin-1") => latin1(s)
                .map(|b| Value::Bytes(Rc::from(b)))
                .map_err(|e| format!("{name} at byte {at}: {e}")),
            [Value::Str(s), Value::Str(enc)] if matches!(&**enc, "utf-8" | "utf8") => {
                Ok(Value::Bytes(Rc::from(s.as_bytes())))
            }
            [Value::Str(s)] => Ok(Value::Bytes(Rc::from(s.as_bytes()))),
            _ => Err(format!(
                "{name} at byte {at}: expects (text, 'latin1') as Python writes bytes"
            )),
        },
        "builtins.bytes" | "__builtin__.bytes" => match args_vec.as_slice() {
            [] => Ok(Value::Bytes(Rc::from(&b""[..]))),
            [Value::Bytes(b)] => Ok(Value::Bytes(b.clone())),
            _ => Ok(Value::Opaque(name.clone())),
        },
        "numpy.core.multiarray._reconstruct" | "numpy._core.multiarray._reconstruct" => Ok(
            Value::Object(Rc::new(Object::new(Rc::from(NP_ARRAY), args.clone()))),
        ),
        "numpy.core.multiarray.scalar" | "numpy._core.multiarray.scalar" => Ok(Value::Object(
            Rc::new(Object::new(Rc::from(NP_SCALAR), args.clone())),
        )),
        "numpy.dtype" => Ok(Value::Object(Rc::new(Object::new(
            Rc::from(NP_DTYPE),
            args.clone(),
        )))),
        other => Ok(Value::Opaque(Rc::from(other))),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn refuses_a_global_outside_the_allow_list() {
        // Protocol 2: GLOBAL 'os\nsystem\n', a one-string tuple, REDUCE, STOP.
        let p = b"\x80\x02cos\nsystem\nq\x00X\x05\x00\x00\x00echo!q\x01\x85q\x02Rq\x03.";
        let err = load(p).unwrap_err();
        assert!(err.contains("refuses global `os.system`"), "{err}");
    }

    /// `pickle.dumps(np.array([1.5, -2.0, 0.25], dtype="<f4"), protocol=2)` with numpy
    /// 2.4.6 (the bytes below are that output); numpy 1.x writes the same pickle with the
    /// module `numpy.core.multiarray` (its old spelling), made here by replacing the
    /// newline-terminated module name of the GLOBAL opcode.
    const NUMPY2_ARRAY: &[u8] = b"\x80\x02cnumpy._core.multiarray\n_reconstruct\nq\x00cnumpy\nndarray\nq\x01K\x00\x85q\x02c_codecs\nencode\nq\x03X\x01\x00\x00\x00bq\x04X\x06\x00\x00\x00latin1q\x05\x86q\x06Rq\x07\x87q\x08Rq\t(K\x01K\x03\x85q\ncnumpy\ndtype\nq\x0bX\x02\x00\x00\x00f4q\x0c\x89\x88\x87q\rRq\x0e(K\x03X\x01\x00\x00\x00<q\x0fNNNJ\xff\xff\xff\xffJ\xff\xff\xff\xffK\x00tq\x10b\x89h\x03X\x0f\x00\x00\x00\x00\x00\xc3\x80?\x00\x00\x00\xc3\x80\x00\x00\xc2\x80>q\x11h\x05\x86q\x12Rq\x13tq\x14b.";

    fn f32s(bytes: &[u8]) -> Vec<f32> {
        bytes
            .chunks_exact(4)
            .map(|c| f32::from_le_bytes([c[0], c[1], c[2], c[3]]))
            .collect()
    }

    #[test]
    fn numpy_arrays_are_read_in_both_module_spellings() {
        let old: Vec<u8> = {
            let s = NUMPY2_ARRAY;
            let from = b"numpy._core.multiarray\n";
            let at = s.windows(from.len()).position(|w| w == from).unwrap();
            [
                &s[..at],
                &b"numpy.core.multiarray\n"[..],
                &s[at + from.len()..],
            ]
            .concat()
        };
        for bytes in [NUMPY2_ARRAY, &old[..]] {
            let loaded = load_with_stand_ins(bytes).unwrap();
            assert!(loaded.stand_ins.is_empty(), "{:?}", loaded.stand_ins);
            let Value::Object(o) = &loaded.value else {
                panic!("{:?}", loaded.value.kind());
            };
            let a = ndarray_of(o).unwrap().unwrap();
            assert_eq!(a.dtype, super::super::Dtype::F32);
            assert_eq!(a.shape, vec![3]);
            assert!(!a.big_endian && !a.fortran);
            assert_eq!(f32s(&a.data), vec![1.5, -2.0, 0.25]);
        }
    }

    #[test]
    fn code_running_globals_are_refused_and_other_unknowns_stood_in() {
        // The globals the pickle documentation's security warning and common practice name
        // as running code, reaching the system or loading more pickles.
        for (m, n) in [
            ("os", "system"),
            ("posix", "system"),
            ("nt", "system"),
            ("subprocess", "Popen"),
            ("subprocess", "check_output"),
            ("builtins", "eval"),
            ("builtins", "exec"),
            ("builtins", "compile"),
            ("builtins", "__import__"),
            ("builtins", "getattr"),
            ("builtins", "open"),
            ("__builtin__", "eval"),
            ("runpy", "_run_code"),
            ("importlib", "import_module"),
            ("importlib.util", "find_spec"),
            ("pty", "spawn"),
            ("socket", "create_connection"),
            ("shutil", "rmtree"),
            ("webbrowser", "open"),
            ("pickle", "loads"),
            ("_pickle", "loads"),
        ] {
            assert_eq!(classify_global(m, n), GlobalClass::RunsCode, "{m}.{n}");
        }
        assert_eq!(
            classify_global("argparse", "Namespace"),
            GlobalClass::StandIn { known: true }
        );
        assert_eq!(
            classify_global("pathlib", "PosixPath"),
            GlobalClass::StandIn { known: true }
        );
        // A module named like a code one but not it (`osmium`) is only unknown.
        assert_eq!(
            classify_global("osmium", "Thing"),
            GlobalClass::StandIn { known: false }
        );
        assert_eq!(
            classify_global("trainer.config", "HParams"),
            GlobalClass::StandIn { known: false }
        );
        assert_eq!(
            classify_global("collections", "defaultdict"),
            GlobalClass::Modeled
        );
    }

    #[test]
    fn an_unknown_class_is_built_as_data_and_counted() {
        // Protocol 2: GLOBAL trainer.Cfg, EMPTY_TUPLE, NEWOBJ, then BUILD with {"lr": 0.5}
        // (byte for byte what Python 3.11 `pickle.dumps(obj, protocol=2)` writes for an
        // instance of a plain class `trainer.Cfg` with `lr = 0.5`), STOP.
        let p = b"\x80\x02ctrainer\nCfg\nq\x00)\x81q\x01}q\x02X\x02\x00\x00\x00lrq\x03G?\xe0\x00\x00\x00\x00\x00\x00sb.";
        let loaded = load_with_stand_ins(p).unwrap();
        assert_eq!(
            loaded.stand_ins,
            vec![StandIn {
                global: "trainer.Cfg".into(),
                count: 1,
                known: false
            }]
        );
        let Value::Object(o) = &loaded.value else {
            panic!("{}", loaded.value.kind());
        };
        assert_eq!(&*o.class, "trainer.Cfg");
        let state = o.state.borrow();
        let Some(Value::Dict(d)) = &*state else {
            panic!("state");
        };
        assert!(
            matches!(d.borrow()[0], (Value::Str(ref k), Value::Float(x)) if &**k == "lr" && x == 0.5)
        );
    }

    #[test]
    fn refuses_stack_global_eval() {
        let p = b"\x80\x04\x8c\x08builtins\x94\x8c\x04eval\x94\x93\x94.";
        let err = load(p).unwrap_err();
        assert!(err.contains("`builtins.eval`"), "{err}");
    }

    #[test]
    fn reads_a_dict_with_a_memoized_value() {
        // {'a': 1, 'b': [1]} written by hand in protocol 2 (opcode table: pickletools docs).
        let p = b"\x80\x02}q\x00(X\x01\x00\x00\x00aK\x01X\x01\x00\x00\x00b]q\x01K\x01au.";
        let v = load(p).unwrap();
        let Value::Dict(d) = &v else {
            panic!("not a dict")
        };
        let d = d.borrow();
        assert_eq!(d.len(), 2);
        assert!(matches!(d[0].1, Value::Int(1)));
        assert!(matches!(&d[1].1, Value::List(l) if l.borrow().len() == 1));
    }

    #[test]
    fn long_integers_decode_two_complement() {
        assert!(matches!(long_value(&[0xff]), Value::Int(-1)));
        assert!(matches!(long_value(&[0x00, 0x01]), Value::Int(256)));
        assert!(matches!(long_value(&[0; 12]), Value::Int(0)));
        assert!(matches!(long_value(&[1; 12]), Value::BigInt));
    }

    #[test]
    fn deep_nesting_drops_without_recursion() {
        // 1.2 million TUPLE1 opcodes wrap an empty tuple 1.2 million levels deep.
        let mut p = b"\x80\x02)".to_vec();
        p.extend(std::iter::repeat_n(0x85u8, 1_200_000));
        p.push(b'.');
        let v = load(&p).unwrap();
        drop(v);
    }

    #[test]
    fn truncated_pickle_is_an_error() {
        assert!(load(b"\x80\x02}q").is_err());
        assert!(load(b"").is_err());
    }
}
