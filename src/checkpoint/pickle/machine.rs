//! The opcode interpreter: a stack machine that builds values and never calls anything.

use super::*;

pub(super) struct Machine<'a> {
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
    /// A machine at the start of `bytes`, with empty stack and memo.
    pub(super) fn new(bytes: &'a [u8]) -> Self {
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
    }

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
                    crate::checkpoint::shown(&full)
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

    pub(super) fn run(mut self) -> Result<Loaded, String> {
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
pub(super) fn long_value(b: &[u8]) -> Value {
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

pub(super) fn u64_tuple(v: &Value) -> Option<Vec<u64>> {
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
