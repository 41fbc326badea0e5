import os
from typing import Any, Dict, Optional, Sequence, Tuple, Union

PathLike = Union[str, os.PathLike[str]]
Document = Dict[str, Any]

__version__: str
KINDS: Tuple[str, ...]

class InputError(ValueError):
    """The input or the arguments could not be used (the CLI's exit code 2)."""

class FindingsError(Exception):
    """A finding at or above ``fail_on`` exists (the CLI's exit code 1)."""

    report: Document
    level: str
    def __init__(self, message: str, report: Document, level: str) -> None: ...

def worst(report: Document) -> Optional[str]: ...
def scan(
    path: PathLike,
    tables: Optional[Union[str, Sequence[str]]] = ...,
    file: Optional[str] = ...,
) -> Document: ...
def audit(
    path: PathLike,
    tables: Optional[Union[str, Sequence[str]]] = ...,
    out: Optional[PathLike] = ...,
    fail_on: Optional[str] = ...,
    file: Optional[str] = ...,
) -> Document: ...
def compare(
    paths: Sequence[PathLike],
    tables: Optional[Union[str, Sequence[str]]] = ...,
    out: Optional[PathLike] = ...,
    fail_on: Optional[str] = ...,
) -> Document: ...
def audit_array(
    array: Any,
    name: str = ...,
    kind: Optional[str] = ...,
    config: Optional[Dict[str, Any]] = ...,
    out: Optional[PathLike] = ...,
    fail_on: Optional[str] = ...,
) -> Document: ...
def compare_arrays(
    arrays: Sequence[Any],
    name: str = ...,
    config: Optional[Dict[str, Any]] = ...,
    labels: Optional[Sequence[str]] = ...,
    out: Optional[PathLike] = ...,
    fail_on: Optional[str] = ...,
    kind: Optional[str] = ...,
) -> Document: ...
def run_cli(argv: Optional[Sequence[str]] = ...) -> int: ...
