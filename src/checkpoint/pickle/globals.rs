//! Which globals the reader models as data, stands in for, or refuses as code-running.

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
