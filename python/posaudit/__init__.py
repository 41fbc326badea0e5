"""posaudit from Python: find and analyse the position tables of transformer checkpoints.

The functions return the same documents as the command line's ``--json`` (plain ``dict``
and ``list`` values, parsed from the JSON text the Rust library writes), so whatever a
pipeline reads from ``posaudit audit PATH --json`` it reads from ``posaudit.audit(PATH)``.
The analysis runs in the Rust library with the GIL released.

Files::

    >>> import posaudit
    >>> report = posaudit.audit("examples/demo/checkpoints/text-extended")
    >>> [(t["name"], t["kind"]) for t in report["tables"]]
    [('tern.embeddings.position_embeddings.weight', 'learned-absolute')]
    >>> posaudit.worst(report)
    'warning'

Tables held in memory (a NumPy array, or anything ``numpy.asarray`` accepts with the
array interface, e.g. ``model.transformer.wpe.weight.detach().cpu().numpy()``)::

    >>> import numpy as np
    >>> table = np.random.default_rng(0).normal(0, 0.02, (512, 64))   # invented: noise rows...
    >>> table[:300] = np.cos(np.arange(300)[:, None] / (20.0 * 1.5 ** np.arange(64)))  # ...and smooth ones
    >>> posaudit.audit_array(table, name="wpe")["tables"][0]["verdict"]
    'trained rows 0..300, untrained tail from row 300 (212 rows)'

Errors: an input that cannot be used raises :class:`InputError` (a ``ValueError``) whose
message is the command line's one line (naming the file or table and the problem). The
``fail_on`` argument (``"warning"`` or ``"error"``) raises :class:`FindingsError` after the
report is complete (and ``out`` written) when a finding at or above that level exists, as
``--fail-on`` exits with code 1; :func:`worst` tells the most severe level of a document.
"""

from __future__ import annotations

import json
import os
import sys
from typing import Any, Dict, List, Optional, Sequence, Tuple, Union

from . import _native
from ._native import InputError

__all__ = [
    "InputError",
    "FindingsError",
    "scan",
    "audit",
    "compare",
    "audit_array",
    "compare_arrays",
    "worst",
    "run_cli",
    "KINDS",
    "__version__",
]

__version__: str = _native.__version__

#: The kinds of table (contract strings), for ``audit_array(kind=...)``.
KINDS: Tuple[str, ...] = tuple(_native.KINDS)

_LEVELS = ("info", "warning", "error")

PathLike = Union[str, "os.PathLike[str]"]


class FindingsError(Exception):
    """A finding at or above ``fail_on`` exists (the command line's exit code 1).

    The complete document is in :attr:`report`, the level reached in :attr:`level`::

        try:
            posaudit.audit("ckpt/", fail_on="warning")
        except posaudit.FindingsError as e:
            print(e.level, e.report["summary"])
    """

    def __init__(self, message: str, report: Dict[str, Any], level: str) -> None:
        super().__init__(message)
        self.report = report
        self.level = level


def worst(report: Dict[str, Any]) -> Optional[str]:
    """The most severe finding level of a document: ``"error"``, ``"warning"``, ``"info"``
    or ``None`` when there is no finding.

    Audit documents are read from their ``summary`` counts (what ``--fail-on`` uses);
    compare documents from the findings of every table::

        >>> posaudit.worst({"summary": {"error": 0, "warning": 2, "info": 1}})
        'warning'
    """
    summary = report.get("summary")
    if isinstance(summary, dict):
        for level in reversed(_LEVELS):
            if summary.get(level, 0):
                return level
        return None
    found = [
        f.get("severity")
        for t in report.get("tables", [])
        for f in t.get("findings", [])
        if f.get("severity") in _LEVELS
    ]
    if not found:
        return None
    return max(found, key=_LEVELS.index)


def _fail_on_level(fail_on: Optional[str]) -> Optional[str]:
    if fail_on is None:
        return None
    if fail_on not in ("warning", "error"):
        raise InputError(f"fail_on: expected 'warning' or 'error', got {fail_on!r}")
    return fail_on


def _gate(report: Dict[str, Any], fail_on: Optional[str]) -> Dict[str, Any]:
    if fail_on is None:
        return report
    level = worst(report)
    if level is not None and _LEVELS.index(level) >= _LEVELS.index(fail_on):
        raise FindingsError(
            f"a finding at level {level} exists (fail_on={fail_on!r})", report, level
        )
    return report


def _names(tables: Optional[Union[str, Sequence[str]]]) -> List[str]:
    if tables is None:
        return []
    if isinstance(tables, str):
        return [tables]
    return [str(t) for t in tables]


def _path(p: Optional[PathLike]) -> Optional[str]:
    return None if p is None else os.fspath(p)


def _file(name: Optional[str]) -> Optional[str]:
    if name is None:
        return None
    if not isinstance(name, str):
        raise InputError(f"file must be the name of a file in the folder, got {type(name).__name__}")
    return name


def scan(
    path: PathLike,
    tables: Optional[Union[str, Sequence[str]]] = None,
    file: Optional[str] = None,
) -> Dict[str, Any]:
    """The position tables of a checkpoint (``posaudit scan PATH --json``).

    ``path`` is a checkpoint file or a folder holding one; ``tables`` names tensors to
    classify even if the detector passed them over (``--table``); ``file`` names the
    weight file of the folder to read instead of the one posaudit would choose
    (``--file NAME``)::

        >>> doc = posaudit.scan("examples/demo/checkpoints/showcase")
        >>> doc["schema"]
        'posaudit/scan/v1'
    """
    return json.loads(_native.scan_json(os.fspath(path), _names(tables), _file(file)))


def audit(
    path: PathLike,
    tables: Optional[Union[str, Sequence[str]]] = None,
    out: Optional[PathLike] = None,
    fail_on: Optional[str] = None,
    file: Optional[str] = None,
) -> Dict[str, Any]:
    """Analyse every position table of a checkpoint (``posaudit audit PATH --json``).

    ``file`` reads that weight file of the folder ``path`` (``--file NAME``). ``out`` writes the same report folder as ``--out`` (``report.md``, its SVG plots,
    ``report.json``). ``fail_on="warning"`` or ``"error"`` raises :class:`FindingsError`
    when a finding at or above that level exists (after ``out`` is written)::

        >>> doc = posaudit.audit("examples/demo/checkpoints/text-extended", out="report")
        >>> [f["code"] for f in doc["tables"][0]["findings"]][:1]
        ['untrained-tail']
    """
    level = _fail_on_level(fail_on)
    doc = json.loads(
        _native.audit_json(os.fspath(path), _names(tables), _path(out), _file(file))
    )
    return _gate(doc, level)


def compare(
    paths: Sequence[PathLike],
    tables: Optional[Union[str, Sequence[str]]] = None,
    out: Optional[PathLike] = None,
    fail_on: Optional[str] = None,
) -> Dict[str, Any]:
    """How the tables moved between two or more checkpoints, oldest first
    (``posaudit compare PATH PATH... --json``).

    ``fail_on`` raises :class:`FindingsError` when a compare finding at or above that
    level exists (checked with :func:`worst`)::

        >>> run = "examples/demo/checkpoints/run-a"
        >>> doc = posaudit.compare([f"{run}/step-1000", f"{run}/step-8000"])
        >>> doc["tables"][0]["steps"][0]["from"], doc["tables"][0]["steps"][0]["to"]
        (0, 1)
    """
    if isinstance(paths, (str, os.PathLike)):
        raise InputError("compare needs a list of at least two checkpoints, got one path")
    level = _fail_on_level(fail_on)
    doc = json.loads(
        _native.compare_json([os.fspath(p) for p in paths], _names(tables), _path(out))
    )
    return _gate(doc, level)


# ---------------------------------------------------------------------------------------
# Tables held in memory


def _numpy():
    try:
        import numpy
    except ImportError as e:  # pragma: no cover - depends on the environment
        raise InputError("audit_array needs NumPy: pip install numpy") from e
    return numpy


def _describe(array: Any, name: str, kind: Optional[str], keep: list) -> tuple:
    """The native description of one array: (name, kind, address, bytes, dtype, shape,
    element strides or None, big-endian). The array (or its copy) is appended to
    ``keep``, which the caller holds until the native call returns."""
    np = _numpy()
    if not isinstance(name, str) or not name:
        raise InputError("name: expected a non-empty string")
    if kind is not None and kind not in KINDS:
        raise InputError(f"`{name}`: unknown kind {kind!r}; expected one of {', '.join(KINDS)}")
    try:
        arr = np.asarray(array)
    except (ValueError, TypeError) as e:
        raise InputError(f"`{name}`: not an array: {' '.join(str(e).split())}") from None
    dt = arr.dtype
    if dt.name == "bfloat16" and dt.itemsize == 2:  # ml_dtypes.bfloat16
        code = "BF16"
    elif dt.kind == "f" and dt.itemsize in (8, 4, 2):
        code = {8: "F64", 4: "F32", 2: "F16"}[dt.itemsize]
    elif dt.kind == "i" and dt.itemsize in (8, 4):
        code = {8: "I64", 4: "I32"}[dt.itemsize]
    else:
        raise InputError(
            f"`{name}`: element type {dt} is not supported; expected float64, float32, "
            "float16, bfloat16 (ml_dtypes), or int64/int32 for position ids"
        )
    if arr.ndim == 0:
        raise InputError(f"`{name}`: a scalar, expected a table (positions x dim)")
    if arr.size == 0:
        raise InputError(f"`{name}`: array of shape {tuple(arr.shape)} holds no values")
    squeezed = [d for d in arr.shape if d != 1] if arr.ndim > 1 else list(arr.shape)
    if len(squeezed) <= 1 and kind not in ("rotary-frequencies", "position-ids"):
        raise InputError(
            f"`{name}`: 1-D array of {arr.size} values; a position table has one row per "
            "position (positions x dim); pass kind='rotary-frequencies' for stored rotary "
            "inverse frequencies or kind='position-ids' for an index buffer"
        )
    if code.startswith("I") and kind not in (None, "position-ids"):
        raise InputError(f"`{name}`: integer array given as kind {kind!r}; only position-ids are integers")
    if code.startswith("F") or code == "BF16":
        if kind == "position-ids":
            raise InputError(f"`{name}`: position ids must be integers, got {dt}")
    if code.startswith("F") or code == "BF16":
        if not np.isfinite(arr).any():
            raise InputError(
                f"`{name}`: no finite value (all {arr.size} values are NaN or infinite); "
                "nothing to analyse"
            )
    itemsize = dt.itemsize
    # Strides the library can follow: non-negative multiples of the element size.
    # Otherwise (a reversed view, a misaligned record field) one contiguous copy.
    if any(s < 0 or s % itemsize for s in arr.strides):
        arr = np.ascontiguousarray(arr)
    keep.append(arr)
    if arr.flags.c_contiguous:
        strides = None
        extent = arr.size * itemsize
    else:
        strides = [s // itemsize for s in arr.strides]
        extent = (sum((d - 1) * s for d, s in zip(arr.shape, strides)) + 1) * itemsize
    address = arr.__array_interface__["data"][0]
    order = dt.byteorder
    big_endian = order == ">" or (order == "=" and sys.byteorder == "big")
    return (name, kind, address, extent, code, list(arr.shape), strides, big_endian)


def _config_json(config: Optional[Dict[str, Any]]) -> Optional[str]:
    if config is None:
        return None
    if not isinstance(config, dict):
        raise InputError(f"config: expected a dict like config.json, got {type(config).__name__}")
    try:
        return json.dumps(config)
    except (TypeError, ValueError) as e:
        raise InputError(f"config: not JSON-serialisable: {e}") from None


def audit_array(
    array: Any,
    name: str = "position_embeddings",
    kind: Optional[str] = None,
    config: Optional[Dict[str, Any]] = None,
    out: Optional[PathLike] = None,
    fail_on: Optional[str] = None,
) -> Dict[str, Any]:
    """Audit one table held in memory; returns the ``posaudit/audit/v1`` document.

    ``array``: a NumPy array (float64, float32, float16; bfloat16 through ``ml_dtypes``;
    int64/int32 for ``kind="position-ids"``) or anything ``numpy.asarray`` turns into
    one, e.g. ``model.transformer.wpe.weight.detach().cpu().numpy()``. It is read in
    place, strides included (a transposed view is not copied); only reversed views are
    copied once. Do not modify it from another thread during the call.

    ``name`` is the table's name in the report and feeds the detector's name rules.
    ``kind=None`` lets the detector decide from name, shape and content (as ``--table``
    does); a kind from :data:`KINDS` forces it. ``config`` takes the same hints as a
    ``config.json`` beside the weights (``{"max_position_embeddings": 1024,
    "initializer_range": 0.02}``). ``out`` and ``fail_on`` as in :func:`audit`. The
    checkpoint path in the document is ``<array>`` and its format ``memory``::

        >>> import numpy as np
        >>> table = np.random.default_rng(0).normal(0, 0.02, (512, 64))
        >>> table[:300] = np.cos(np.arange(300)[:, None] / (20.0 * 1.5 ** np.arange(64)))
        >>> doc = posaudit.audit_array(table, name="wpe", config={"max_position_embeddings": 512})
        >>> doc["tables"][0]["untrained"]["first"]
        300
    """
    level = _fail_on_level(fail_on)
    keep: list = []
    spec = _describe(array, name, kind, keep)
    text = _native.audit_memory_json("<array>", [spec], _config_json(config), _path(out))
    del keep
    return _gate(json.loads(text), level)


def compare_arrays(
    arrays: Sequence[Any],
    name: str = "position_embeddings",
    config: Optional[Dict[str, Any]] = None,
    labels: Optional[Sequence[str]] = None,
    out: Optional[PathLike] = None,
    fail_on: Optional[str] = None,
    kind: Optional[str] = None,
) -> Dict[str, Any]:
    """Compare versions of one table held in memory, oldest first (e.g. a copy of the
    position table taken every N training steps); returns the ``posaudit/compare/v1``
    document, as :func:`compare` would for the same tables saved as checkpoints.

    ``labels`` name the steps in the document's checkpoint paths (default
    ``<array 0>``, ``<array 1>``, ...); ``name``, ``kind``, ``config``, ``out`` and
    ``fail_on`` as in :func:`audit_array` and :func:`compare`::

        snapshots = []
        for step in range(num_steps):                       # a training loop
            train_step()
            if step % 1000 == 0:
                snapshots.append(model.transformer.wpe.weight.detach().cpu().numpy().copy())
        doc = posaudit.compare_arrays(snapshots, name="wpe", labels=["0", "1000", "2000"])
        [s["subspace_similarity"] for s in doc["tables"][0]["steps"]]
    """
    level = _fail_on_level(fail_on)
    arrays = list(arrays)
    if len(arrays) < 2:
        raise InputError(f"compare_arrays needs at least two arrays, got {len(arrays)}")
    if labels is None:
        labels = [f"<array {i}>" for i in range(len(arrays))]
    labels = [str(label) for label in labels]
    if len(labels) != len(arrays):
        raise InputError(f"{len(labels)} labels for {len(arrays)} arrays")
    if len(set(labels)) != len(labels):
        raise InputError("labels must be distinct")
    keep: list = []
    steps = [[_describe(a, name, kind, keep)] for a in arrays]
    text = _native.compare_memory_json(labels, steps, _config_json(config), _path(out))
    del keep
    return _gate(json.loads(text), level)


# ---------------------------------------------------------------------------------------
# The command line


def run_cli(argv: Optional[Sequence[str]] = None) -> int:
    """Run the command line (the same code as the ``posaudit`` binary) and return its
    exit code: 0 done, 1 a finding at or above ``--fail-on``, 2 unusable input or
    arguments. ``argv`` starts with the program name (default ``sys.argv``). Output goes
    to the process's stdout and stderr file descriptors, not to ``sys.stdout``.
    """
    args = list(sys.argv if argv is None else argv)
    if not args:
        args = ["posaudit"]
    sys.stdout.flush()
    sys.stderr.flush()
    return int(_native.run_cli([os.fspath(a) for a in args]))


def _console_main() -> None:
    """Entry point of the ``posaudit`` console command."""
    import signal

    # Ctrl-C stops the command at once, as it does the binary (the analysis runs in Rust
    # and never returns to Python's signal handler until it is done).
    signal.signal(signal.SIGINT, signal.SIG_DFL)
    args = ["posaudit"] + sys.argv[1:]
    sys.exit(run_cli(args))
