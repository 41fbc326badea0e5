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

mod arrays;
mod globals;
mod machine;

use arrays::{NP_ARRAY, NP_DTYPE, NP_SCALAR, latin1};
pub use arrays::{NdArray, OBJECT_DTYPE, ndarray_of};
pub use globals::{GlobalClass, classify_global};
use machine::{Machine, u64_tuple};

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
    Machine::new(bytes).run()
}

#[cfg(test)]
mod tests;
