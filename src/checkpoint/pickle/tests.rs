use super::machine::long_value;
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
        assert_eq!(a.dtype, crate::checkpoint::Dtype::F32);
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
