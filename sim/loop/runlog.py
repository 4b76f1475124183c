"""Columnar run logs in Apache Parquet, written chunk by chunk while a simulation runs.

A run folder looks like this::

    meta.json                    status, column shapes and dtypes, chunk size, user metadata
    metrics.json                 optional, written by :meth:`RunLog.close`
    log/chunk_000000.parquet     ticks 0 .. chunk_ticks-1, one Parquet file
    log/chunk_000001.parquet     ...

Every tick is one row of every column.  :class:`RunLog` keeps two preallocated
buffers of ``chunk_ticks`` rows per column: a full buffer is handed to a
background thread, which writes it as one chunk file, while the other buffer
fills.  A crash loses at most the ticks of the current chunk and of the one
being written.  ``meta.json`` is written when the log is created
(``"status": "running"``) and rewritten by :meth:`RunLog.close` with the final
status, so a folder whose status is still ``"running"`` is the trace of a
process that died.

Chunk format (``format_version`` 3)
-----------------------------------
Each chunk is one Parquet file (Apache Parquet format specification) of
one row group, one row per tick, written with pyarrow.  A logged column of
per-tick shape ``s`` becomes ``prod(s)`` flat Parquet columns, one per
element, named after the element's index in row-major (C) order:

* shape ``()``: ``t``;
* shape ``(7,)``: ``q_exo[0]`` ... ``q_exo[6]``;
* shape ``(3, 6)``: ``cuff_wrench_true[0,0]``, ``cuff_wrench_true[0,1]``, ... ``cuff_wrench_true[2,5]``;
* a complex column gives two columns per element, ``z[0].real`` and
  ``z[0].imag`` (Parquet has no complex type).

So ``pandas.read_parquet(folder / "log")`` (every finished chunk, in order) or
one chunk file gives a flat table of numbers, one named column per element,
that pandas, polars or DuckDB open without this module.  A column of zero
elements (e.g. shape ``(2, 0)``) has no Parquet column.  Physical types:
bool -> ``BOOLEAN``; int8/16/32/64 and uint8/16/32/64 -> ``INT32``/``INT64``
with their ``INT(bitWidth, isSigned)`` logical type; float32/64 ->
``FLOAT``/``DOUBLE``; float16 -> the ``FLOAT16`` logical type; every column
is ``required`` (no nulls).  Float columns use the ``BYTE_STREAM_SPLIT``
encoding (byte k of every value, then byte k+1, ...: bytes of the same
significance, which are alike for slowly changing signals, stand together and
compress better), the others ``PLAIN``; no dictionaries.  Every data page is
compressed with Zstandard (``ZSTD``, level 3) and carries a CRC-32 page
checksum, verified when :func:`load_run` reads it.  Both encodings store the
IEEE bit patterns as they are, so the round trip is bit-identical, NaN
payloads and the sign of zero included.  Long double columns (no Parquet
type) are refused.

The shape and dtype of each logged column are recorded in ``meta.json``
(``"columns": {"q_exo": {"shape": [7], "dtype": "float64"}, ...}``) and in
each chunk's key-value metadata under the key ``exosandbox``: a JSON object
``{"format_version": 3, "ticks": n, "columns": {...}}`` (the same table),
which is what a reader needs to put the element columns back into arrays.
The Arrow schema pyarrow stores beside it (key ``ARROW:schema``) makes pyarrow
read each column back with its exact type.

Earlier formats (version 1: ``.npz`` chunks; version 2: zip chunks of a codec
of this project's own) are no longer read: :func:`load_run` names the folder,
its version and the one it reads.

Design notes
------------
* **Atomic files.**  Each chunk and each JSON file is written under a hidden
  temporary name (``.<name>.<thread>.tmp``, which Parquet dataset readers such as
  ``pyarrow.dataset`` skip) in the same directory and moved into place with
  :func:`os.replace`, so a reader never sees half a file.  This protects
  against the process dying; it does not ``fsync`` and so gives no guarantee
  against power loss.
* **Background writes.**  Encoding and compressing a chunk (pyarrow releases
  the GIL) run on a writer thread, so on a second core they overlap the
  simulation.  At most one chunk is in flight: handing over the next one first
  waits for it.  An error of the writer is raised in the caller's thread by
  the next hand-over, :meth:`RunLog.sync` or :meth:`RunLog.close`; the chunk
  stays buffered and is written again by the next of these calls.
* **Bit-for-bit determinism.**  A Parquet file written by pyarrow holds no
  timestamp; the encodings, the compression level, the page size and the
  statistics (min/max per column chunk) depend only on the data, so the same
  data gives the same bytes with the same pyarrow version (its name and version
  are stored in the file's ``created_by`` field).
* **No pickle.**  Reading a run uses JSON and Parquet only; nothing is
  unpickled.
* **JSON policy.**  Metadata and metrics are converted to plain JSON (numpy
  scalars and arrays, tuples and relative :class:`~pathlib.PurePath` objects are
  converted).  Non-finite numbers (NaN, inf), absolute paths and
  non-serialisable objects are *rejected* with a :class:`RunLogError` naming the
  key, rather than stored as strings, so that ``meta.json`` stays strict JSON and
  a NaN never hides in a parameter record.  No timestamps are added, so
  ``meta.json`` is deterministic too.

References
----------
* Apache Software Foundation, *Apache Parquet format specification*,
  https://github.com/apache/parquet-format: ``README.md`` (file layout,
  row groups, column chunks, pages, key-value metadata), ``Encodings.md``
  (``PLAIN``, ``BYTE_STREAM_SPLIT``), ``LogicalTypes.md`` (``INT``,
  ``FLOAT16``), ``Compression.md`` (``ZSTD``).
* Y. Collet and M. Kucherawy, *Zstandard Compression and the
  'application/zstd' Media Type*, RFC 8878, IETF, 2021.
"""

from __future__ import annotations

import contextlib
import functools
import json
import logging
import math
import os
import platform
import re
import subprocess
import threading
import time
from collections.abc import Collection, Iterable, Mapping
from dataclasses import dataclass, field
from importlib import import_module
from importlib import metadata as importlib_metadata
from pathlib import Path, PurePath
from types import MappingProxyType, TracebackType
from typing import Any

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
from numpy.typing import DTypeLike

from models.errors import SandboxError

__all__ = [
    "RunLogError",
    "RunLog",
    "Run",
    "load_run",
    "mark_run",
    "environment_metadata",
]

_log = logging.getLogger(__name__)

FORMAT_VERSION = 3
"""Version of the run-folder layout written, stored in ``meta.json`` as ``format_version``."""
READ_FORMAT_VERSIONS = (FORMAT_VERSION,)
"""Versions :func:`load_run` reads (3: Parquet chunks)."""
_OLD_FORMATS = MappingProxyType({1: "uncompressed .npz chunks", 2: "zip chunks of the project's own codec"})

META_FILE = "meta.json"
METRICS_FILE = "metrics.json"
CHUNK_DIR = "log"
CHUNK_SUFFIX = ".parquet"
_CHUNK_RE = re.compile(rf"^chunk_(\d{{6}}){re.escape(CHUNK_SUFFIX)}$")
CHUNK_METADATA_KEY = b"exosandbox"
"""Key of the chunk's Parquet key-value metadata holding format version, ticks and column shapes/dtypes (JSON)."""
_ZSTD_LEVEL = 3
_FINAL_STATUSES = ("complete", "failed", "interrupted")
_RESERVED_META_KEYS = frozenset(
    {"format_version", "status", "reason", "columns", "chunk_ticks", "ticks", "chunks"}
)
_ALLOWED_DTYPE_KINDS = "biufc"  # bool, signed/unsigned int, float, complex
_GIT_TIMEOUT_S = 2.0
#: Reported name -> installed distribution whose version is read (without importing it).
_VERSIONED_MODULES = MappingProxyType({"numpy": "numpy", "pinocchio": "pin", "qpsolvers": "qpsolvers", "osqp": "osqp",
                                       "pyarrow": "pyarrow", "meshcat": "meshcat", "mujoco": "mujoco"})

ColumnSpec = tuple[int, ...] | tuple[tuple[int, ...], DTypeLike]


class RunLogError(SandboxError, RuntimeError):
    """A run log cannot be written or read as asked (bad column, folder or file)."""


# ----------------------------------------------------------------------------------------------
# helpers: columns, JSON, atomic files
# ----------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class _Column:
    shape: tuple[int, ...]
    dtype: np.dtype

    def to_json(self) -> dict[str, Any]:
        return {"shape": list(self.shape), "dtype": self.dtype.name}

    @property
    def row_values(self) -> int:
        """Scalars per tick."""
        return math.prod(self.shape)

    @property
    def stored_dtype(self) -> np.dtype:
        """dtype of the Parquet columns: the column's own, or the real dtype of its parts for a complex one."""
        return np.dtype(f"f{self.dtype.itemsize // 2}") if self.dtype.kind == "c" else self.dtype

    def parquet_names(self, name: str) -> list[str]:
        """Names of the Parquet columns of this column, in row-major element order (module docstring)."""
        if self.shape == ():
            elements = [name]
        else:
            elements = [f"{name}[{','.join(map(str, idx))}]" for idx in np.ndindex(*self.shape)]
        if self.dtype.kind == "c":
            return [f"{e}.{part}" for e in elements for part in ("real", "imag")]
        return elements


def _parse_shape(name: str, shape: Any) -> tuple[int, ...]:
    if not isinstance(shape, (tuple, list)):
        raise RunLogError(
            f"column {name!r}: shape must be a tuple of non-negative ints such as () or (7,), got {shape!r}"
        )
    dims = []
    for d in shape:
        if isinstance(d, (bool, np.bool_)) or not isinstance(d, (int, np.integer)) or d < 0:
            raise RunLogError(f"column {name!r}: shape dimensions must be non-negative ints, got {tuple(shape)!r}")
        dims.append(int(d))
    return tuple(dims)


def _parse_dtype(name: str, dtype: Any) -> np.dtype:
    try:
        dt = np.dtype(dtype)
    except TypeError as e:
        raise RunLogError(f"column {name!r}: {dtype!r} is not a numpy dtype") from e
    if dt.kind not in _ALLOWED_DTYPE_KINDS or dt.fields is not None or dt.subdtype is not None:
        raise RunLogError(
            f"column {name!r}: dtype must be bool, integer, float or complex, got {dt.name!r}"
        )
    part = dt.itemsize // 2 if dt.kind == "c" else dt.itemsize
    if dt.kind in "fc" and part not in (2, 4, 8):
        raise RunLogError(f"column {name!r}: dtype {dt.name} (long double) has no Parquet type;"
                          f" use float16, float32 or float64 (complex64 or complex128)")
    return np.dtype(f"{dt.kind}{dt.itemsize}") if dt.kind in "fciu" else np.dtype(bool)


def _parse_column(name: Any, spec: Any) -> _Column:
    if not isinstance(name, str) or not name.isidentifier():
        raise RunLogError(f"column name must be a Python identifier (it is a keyword of append), got {name!r}")
    is_pair = (
        isinstance(spec, (tuple, list))
        and len(spec) == 2
        and isinstance(spec[0], (tuple, list))
        and not isinstance(spec[1], (int, np.integer))
    )
    shape, dtype = (spec[0], _parse_dtype(name, spec[1])) if is_pair else (spec, np.dtype(np.float64))
    return _Column(_parse_shape(name, shape), dtype)


def _converted(name: str, col: _Column, value: Any) -> np.ndarray:
    """``value`` as an array to store into column ``col``, or a RunLogError naming the column.

    It must have the column's shape and a dtype that casts to the column's within its kind
    (``numpy.can_cast(..., casting="same_kind")``).
    """
    arr = np.asarray(value)
    if arr.shape != col.shape:
        raise RunLogError(f"column {name!r} expects shape {col.shape}, got {arr.shape}")
    if not np.can_cast(arr.dtype, col.dtype, casting="same_kind"):
        raise RunLogError(f"column {name!r} has dtype {col.dtype.name}, cannot store a {arr.dtype.name} value")
    return arr


def _columns_from_json(cols: Any, where: str) -> dict[str, _Column]:
    """The columns of a ``"columns"`` table (of ``meta.json`` or of a chunk's metadata), or a RunLogError."""
    if not isinstance(cols, Mapping) or not cols:
        raise RunLogError(f"{where} has no 'columns' table")
    out = {}
    for name, spec in cols.items():
        if not isinstance(spec, Mapping) or "shape" not in spec or "dtype" not in spec:
            raise RunLogError(f"{where}: column {name!r} needs 'shape' and 'dtype', got {spec!r}")
        out[name] = _Column(_parse_shape(name, spec["shape"]), _parse_dtype(name, spec["dtype"]))
    return out


def _to_json(value: Any, where: str) -> Any:
    """Return ``value`` as plain JSON types, or raise naming ``where``."""
    if value is None or isinstance(value, (bool, str)):
        return value
    if isinstance(value, np.bool_):
        return bool(value)
    if isinstance(value, (int, np.integer)):
        return int(value)
    if isinstance(value, (float, np.floating)):
        if not math.isfinite(value):
            raise RunLogError(f"{where} must be finite (NaN and inf are not stored), got {value!r}")
        return float(value)
    if isinstance(value, np.ndarray):
        if value.dtype.kind not in "biuf":
            raise RunLogError(f"{where} is an array of dtype {value.dtype.name!r}; only bool/int/float are stored")
        return _to_json(value.tolist(), where)
    if isinstance(value, PurePath):
        if value.is_absolute():
            raise RunLogError(f"{where} is an absolute path; store paths relative to the run or not at all")
        return value.as_posix()
    if isinstance(value, Mapping):
        out = {}
        for k, v in value.items():
            if not isinstance(k, str):
                raise RunLogError(f"{where} has a non-string key {k!r}; JSON keys must be strings")
            out[k] = _to_json(v, f"{where}[{k!r}]")
        return out
    if isinstance(value, (list, tuple)):
        return [_to_json(v, f"{where}[{i}]") for i, v in enumerate(value)]
    raise RunLogError(f"{where} is not JSON-serialisable (type {type(value).__name__})")


def _temporary(path: Path) -> Path:
    """The hidden temporary name a file is written under before it is moved into place: one per thread, so that
    two writers of the same file (a chunk handed over again after an interruption) never share one."""
    return path.with_name(f".{path.name}.{threading.get_ident()}.tmp")


def _atomic_write_bytes(path: Path, data: bytes | memoryview) -> None:
    """Write ``data`` under the temporary name, then move it into place; a failed write (a full disk: ENOSPC,
    EDQUOT) leaves no temporary file behind."""
    tmp = _temporary(path)
    try:
        tmp.write_bytes(data)
        os.replace(tmp, path)
    except BaseException:
        with contextlib.suppress(OSError):
            tmp.unlink()
        raise


def _write_json(path: Path, obj: Mapping[str, Any]) -> None:
    text = json.dumps(obj, indent=2, allow_nan=False) + "\n"
    try:
        _atomic_write_bytes(path, text.encode("utf-8"))
    except OSError as e:
        raise RunLogError(f"could not write {str(path)!r}: {e}") from e


def _chunk_table(arrays: Mapping[str, np.ndarray], columns: Mapping[str, _Column], rows: int) -> pa.Table:
    """The first ``rows`` ticks of ``arrays`` as one table: one flat column per element (module docstring)."""
    names, data = [], []
    for name, col in columns.items():
        flat = arrays[name][:rows].reshape(rows, -1)
        if col.dtype.kind == "c":  # real and imaginary part of each element, side by side
            flat = flat.view(col.stored_dtype)
        names += col.parquet_names(name)
        data += [pa.array(values) for values in np.ascontiguousarray(flat.T)]
    info = {"format_version": FORMAT_VERSION, "ticks": rows,
            "columns": {name: col.to_json() for name, col in columns.items()}}
    schema = pa.schema([pa.field(n, d.type, nullable=False) for n, d in zip(names, data)],
                       metadata={CHUNK_METADATA_KEY: json.dumps(info).encode("utf-8")})
    return pa.Table.from_arrays(data, schema=schema)


def _write_chunk_file(path: Path, arrays: Mapping[str, np.ndarray], columns: Mapping[str, _Column], rows: int
                      ) -> None:
    """Write one chunk of ``rows`` ticks as a Parquet file (module docstring), atomically."""
    table = _chunk_table(arrays, columns, rows)
    floats = [f.name for f in table.schema if pa.types.is_floating(f.type)]
    sink = pa.BufferOutputStream()
    try:
        pq.write_table(table, sink, row_group_size=rows, compression="zstd", compression_level=_ZSTD_LEVEL,
                       use_dictionary=False, column_encoding=dict.fromkeys(floats, "BYTE_STREAM_SPLIT"),
                       write_page_checksum=True)
        _atomic_write_bytes(path, memoryview(sink.getvalue()))
    except (OSError, pa.ArrowException) as e:
        raise RunLogError(f"could not write chunk file {str(path)!r}: {e}") from e


def _chunk_name(index: int) -> str:
    return f"chunk_{index:06d}{CHUNK_SUFFIX}"


class _ChunkJob:
    """One chunk written on a background thread; :meth:`result` waits for it and re-raises its error.

    After a failure, the next :meth:`result` writes the chunk again, in the calling thread. ``done`` turns
    True when the thread's attempt has ended (written or failed).
    """

    def __init__(self, path: Path, arrays: Mapping[str, np.ndarray], columns: Mapping[str, _Column],
                 rows: int) -> None:
        self.path, self._arrays, self._columns, self.rows = path, arrays, columns, rows
        self._error: BaseException | None = None
        self.done = False
        self._finished = threading.Event()
        self._thread: threading.Thread | None = threading.Thread(
            target=self._run, name=f"run log writer {path.name}", daemon=False)
        self._thread.start()

    def _run(self) -> None:
        try:
            _write_chunk_file(self.path, self._arrays, self._columns, self.rows)
        except BaseException as e:  # handed to the caller's thread by result()
            self._error = e
        finally:
            self.done = True
            self._finished.set()

    def result(self) -> None:
        if self._thread is not None:
            # not Thread.join: a join interrupted by a signal's exception can mark a thread stopped while it still
            # runs (CPython's _wait_for_tstate_lock, bpo-45274), and the next join then returns at once
            self._finished.wait()
            self._thread = None
        else:  # a retry of a failed write
            self._run()
        if self._error is not None:
            error, self._error = self._error, None
            raise error


# ----------------------------------------------------------------------------------------------
# writer
# ----------------------------------------------------------------------------------------------


class RunLog:
    """Append-only columnar log of one simulation run, written in chunks.

    Parameters
    ----------
    folder : str or pathlib.Path
        Run folder.  Created if missing; refused if it exists and is not empty.
    columns : Mapping[str, shape or (shape, dtype)]
        Column name -> per-tick shape, e.g. ``{"t": (), "q_exo": (7,),
        "cuff_wrench_true": (3, 6)}`` (float64), or a ``(shape, dtype)`` pair
        for other dtypes, e.g. ``{"sat": ((7,), "bool"), "iters": ((), "int64")}``.
        Allowed dtypes: bool, integers, float16/32/64, complex64/128 (long double
        has no Parquet type).  Names must be Python
        identifiers.  Column ``c`` is read back with shape ``(ticks, *shape_c)``.
    chunk_ticks : int, optional
        Rows per chunk file [ticks], >= 1.  Default 1000.
    metadata : Mapping, optional
        Extra JSON-serialisable entries merged into ``meta.json`` (seed,
        parameters, :func:`environment_metadata`, ...).  numpy scalars/arrays,
        tuples and relative paths are converted; NaN/inf, absolute paths and
        the reserved keys ``format_version, status, reason, columns,
        chunk_ticks, ticks, chunks`` are rejected.

    Raises
    ------
    RunLogError
        If a column spec, ``chunk_ticks`` or ``metadata`` is invalid, or the
        folder is a file or is not empty.

    Notes
    -----
    Memory: two buffers of ``chunk_ticks`` rows per column (one filling, one
    being written by the writer thread; see the module docstring).
    :meth:`append` (by name) and :meth:`append_row` (by position, the cheaper
    per-tick call) copy each value into its row; ndarray inputs of the
    column's shape and dtype are not converted.  As a context manager the
    log closes itself: ``"complete"`` on normal exit, ``"failed"`` on an
    exception, ``"interrupted"`` on
    ``KeyboardInterrupt`` (or another non-``Exception`` such as ``SystemExit``);
    the exception is re-raised.

    Examples
    --------
    >>> with RunLog("runs/r1", {"t": (), "q": (7,)}, metadata={"seed": 3}) as log:  # doctest: +SKIP
    ...     for k in range(n):
    ...         log.append(t=k * dt_s, q=state.q)
    """

    def __init__(
        self,
        folder: str | os.PathLike[str],
        columns: Mapping[str, ColumnSpec],
        *,
        chunk_ticks: int = 1000,
        metadata: Mapping[str, Any] | None = None,
    ) -> None:
        if isinstance(chunk_ticks, (bool, np.bool_)) or not isinstance(chunk_ticks, (int, np.integer)):
            raise RunLogError(f"chunk_ticks must be an int >= 1, got {chunk_ticks!r}")
        if chunk_ticks < 1:
            raise RunLogError(f"chunk_ticks must be an int >= 1, got {chunk_ticks}")
        if not isinstance(columns, Mapping) or not columns:
            raise RunLogError(f"columns must be a non-empty mapping of name -> shape, got {columns!r}")
        self._columns = {name: _parse_column(name, spec) for name, spec in columns.items()}
        self._chunk_ticks = int(chunk_ticks)

        extra = {}
        if metadata is not None:
            if not isinstance(metadata, Mapping):
                raise RunLogError(f"metadata must be a mapping, got {type(metadata).__name__}")
            clash = sorted(set(metadata) & _RESERVED_META_KEYS)
            if clash:
                raise RunLogError(f"metadata keys {clash} are reserved by the run log; rename them")
            extra = _to_json(metadata, "metadata")

        self._folder = Path(folder)
        if self._folder.exists():
            if not self._folder.is_dir():
                raise RunLogError(f"run folder {str(self._folder)!r} exists and is not a directory")
            if any(self._folder.iterdir()):
                what = "already contains a run" if (self._folder / META_FILE).exists() else "is not empty"
                raise RunLogError(f"run folder {str(self._folder)!r} {what}; choose a new or empty folder")
        (self._folder / CHUNK_DIR).mkdir(parents=True, exist_ok=True)

        self._meta: dict[str, Any] = {
            "format_version": FORMAT_VERSION,
            "status": "running",
            "columns": {name: col.to_json() for name, col in self._columns.items()},
            "chunk_ticks": self._chunk_ticks,
            **extra,
        }
        _write_json(self._folder / META_FILE, self._meta)

        # two buffer sets: the writer thread encodes one while append fills the other
        self._buffer_sets = [
            {name: np.empty((self._chunk_ticks, *col.shape), dtype=col.dtype) for name, col in self._columns.items()}
            for _ in range(2)
        ]
        self._buffers = self._buffer_sets[0]
        self._buffer_list = list(self._buffers.values())  # the filling buffers in column order
        # (shape, dtype, is a float scalar) per column: the checks of append_row's common case
        self._fast_specs = tuple((col.shape, col.dtype, col.shape == () and col.dtype.kind == "f")
                                 for col in self._columns.values())
        self._job: _ChunkJob | None = None  # the chunk in flight (or whose write failed), at most one
        self._row = 0
        self._chunks = 0  # chunks on disk
        self._ticks_on_disk = 0  # the ticks of those chunks
        self._closed = False

    # -- properties ------------------------------------------------------------------------------

    @property
    def folder(self) -> Path:
        """pathlib.Path : the run folder, as given."""
        return self._folder

    @property
    def ticks(self) -> int:
        """int : number of ticks appended so far [ticks] (written or buffered)."""
        return self._ticks_on_disk + (self._job.rows if self._job is not None else 0) + self._row

    @property
    def column_names(self) -> tuple[str, ...]:
        """tuple of str : the column names, in the order given."""
        return tuple(self._columns)

    # -- writing ---------------------------------------------------------------------------------

    def append(self, /, **values: Any) -> None:
        """Append one tick: one value for every column.

        Parameters
        ----------
        **values : array_like
            ``name=value`` for every column exactly once; ``value`` has the
            column's per-tick shape and a dtype that casts to the column's
            dtype within its kind (e.g. int -> float is accepted, float -> int
            or float -> bool is not).

        Raises
        ------
        RunLogError
            Naming the column, if a column is missing, unknown, has the wrong
            shape or an incompatible dtype; or if the log is closed.  On error
            nothing of this tick is stored.
        """
        if self._closed:
            raise RunLogError(f"run log {str(self._folder)!r} is closed; cannot append")
        if values.keys() != self._columns.keys():
            unknown = sorted(set(values) - set(self._columns))
            if unknown:
                raise RunLogError(f"unknown column(s) {unknown}; the columns are {list(self._columns)}")
            missing = [n for n in self._columns if n not in values]
            raise RunLogError(f"missing column(s) {missing} in append; every column must be given once per tick")
        arrays = []
        for name, col in self._columns.items():
            arr = values[name]
            # the common case as it is: an array of the column's exact shape and dtype, or a float for a float scalar
            if not ((type(arr) is np.ndarray and arr.dtype == col.dtype and arr.shape == col.shape)
                    or (type(arr) is float and col.shape == () and col.dtype.kind == "f")):
                arr = _converted(name, col, arr)
            arrays.append(arr)
        self._store(arrays)

    def append_row(self, values: Collection[Any], /) -> None:
        """Append one tick given by position: one value per column, in the order of :attr:`column_names`.

        The per-tick path of a simulation loop: the same checks and the same
        stored values as :meth:`append`, without naming every column in a
        keyword dictionary.

        Parameters
        ----------
        values : sized iterable of array_like
            ``len(column_names)`` values in column order (a list, a tuple, or
            the ``values()`` of a dict whose keys are the columns in that
            order, e.g. one made by ``dict.fromkeys(log.column_names)``).
            Each value as for :meth:`append`.

        Raises
        ------
        RunLogError
            If the number of values differs from the number of columns; naming
            the column, if a value has the wrong shape or an incompatible
            dtype; or if the log is closed.  On error nothing of this tick is
            stored.
        """
        if self._closed:
            raise RunLogError(f"run log {str(self._folder)!r} is closed; cannot append")
        if len(values) != len(self._columns):
            raise RunLogError(f"append_row takes one value per column, {len(self._columns)} in the order"
                              f" {list(self._columns)}; got {len(values)}")
        for value, (shape, dtype, float_scalar) in zip(values, self._fast_specs):
            # the common case: an array of the column's exact shape and dtype, or a float for a float scalar
            if type(value) is np.ndarray:
                if value.shape == shape and value.dtype == dtype:
                    continue
            elif type(value) is float and float_scalar:
                continue
            # not all in the common case: check and convert every value as append does
            values = [_converted(name, col, v) for v, (name, col) in zip(values, self._columns.items())]
            break
        self._store(values)

    def _store(self, values: Iterable[Any]) -> None:
        """Copy one tick of checked values (in column order) into the filling buffers; hand a full chunk over."""
        if self._row == self._chunk_ticks:  # a previous hand-over failed: retry before overwriting
            self._hand_over()
        job = self._job
        if job is not None and not job.done:
            # Give the writer thread the GIL once a tick. It needs it for the Python parts of a chunk (building
            # the table of element columns, between pyarrow's calls that release it), and a loop of pinocchio and
            # numba calls (which keep the GIL) lets it take it only every switch interval (5 ms): without the yield
            # those short stretches spread over many intervals and the next hand-over waits for the chunk.
            time.sleep(0)
        row = self._row
        for buffer, value in zip(self._buffer_list, values):
            buffer[row] = value
        self._row += 1  # one store: an interruption counts the row whole or not at all
        if self._row == self._chunk_ticks:
            self._hand_over()

    def _wait_writer(self) -> None:
        """Wait for the chunk in flight; re-raise its error (it is then written again by the next call)."""
        if self._job is None:
            return
        job = self._job
        job.result()  # interrupted before the stores below, a later call waits again (or writes the same file again)
        # stores without a call between them: Python runs a signal's handler (which raises) at a call or a backward
        # jump only, so an interruption leaves these counts all changed or none
        self._job, self._chunks, self._ticks_on_disk = None, self._chunks + 1, self._ticks_on_disk + job.rows
        _log.debug("wrote %s (%d ticks)", job.path.name, job.rows)

    def _hand_over(self) -> None:
        """Give the filled rows to the writer thread and continue in the other buffer set."""
        self._wait_writer()  # at most one chunk in flight: after this the other buffer set is free
        path = self._folder / CHUNK_DIR / _chunk_name(self._chunks)
        other = self._buffer_sets[1] if self._buffers is self._buffer_sets[0] else self._buffer_sets[0]
        other_list = list(other.values())
        job = _ChunkJob(path, self._buffers, self._columns, self._row)
        # the job, the buffers and the row change together (stores without a call between them: see _wait_writer)
        self._job, self._buffers, self._buffer_list, self._row = job, other, other_list, 0

    def sync(self) -> None:
        """Wait until every chunk handed to the writer is on disk (the partial chunk stays buffered).

        Raises
        ------
        RunLogError
            Naming the file, if the writer could not write it; a later call
            writes it again.
        """
        self._wait_writer()

    def close(
        self,
        status: str = "complete",
        reason: str | None = None,
        metrics: Mapping[str, Any] | None = None,
    ) -> None:
        """Flush the partial chunk and record the final status.  Idempotent.

        Parameters
        ----------
        status : {"complete", "failed", "interrupted"}, optional
            Final status stored in ``meta.json``.
        reason : str, optional
            Why the run ended that way (e.g. ``"QPSolveError: level 2 infeasible"``).
        metrics : Mapping, optional
            Summary metrics, written to ``metrics.json`` (same JSON policy as
            ``metadata``: NaN/inf rejected naming the key).

        Raises
        ------
        RunLogError
            If ``status`` is unknown or ``metrics`` is not storable; the log
            then stays open so the call can be repeated.

        Notes
        -----
        Files are written in the order: last chunk, ``metrics.json``,
        ``meta.json``, so a final status on disk implies the rest is there.
        Waits for the writer thread, and raises its error (the log then stays
        open, as above).  A second call does nothing (its arguments are
        ignored).
        """
        if self._closed:
            _log.debug("run log %s already closed; close(%r) ignored", self._folder, status)
            return
        if status not in _FINAL_STATUSES:
            raise RunLogError(f"status must be one of {list(_FINAL_STATUSES)}, got {status!r}")
        if reason is not None and not isinstance(reason, str):
            raise RunLogError(f"reason must be a str or None, got {type(reason).__name__}")
        metrics_json = None if metrics is None else _to_json(metrics, "metrics")
        if metrics_json is not None and not isinstance(metrics_json, dict):
            raise RunLogError(f"metrics must be a mapping, got {type(metrics).__name__}")
        if self._row > 0:
            self._hand_over()
        self._wait_writer()
        if metrics_json is not None:
            _write_json(self._folder / METRICS_FILE, metrics_json)
        self._meta.update(status=status, reason=reason, ticks=self._ticks_on_disk, chunks=self._chunks)
        _write_json(self._folder / META_FILE, self._meta)
        self._closed = True

    # -- context manager -------------------------------------------------------------------------

    def __enter__(self) -> RunLog:
        if self._closed:
            raise RunLogError(f"run log {str(self._folder)!r} is closed")
        return self

    def __exit__(
        self,
        exc_type: type[BaseException] | None,
        exc: BaseException | None,
        tb: TracebackType | None,
    ) -> bool:
        if exc is None:
            status, reason = "complete", None
        else:
            status = "failed" if isinstance(exc, Exception) else "interrupted"
            reason = _one_line(exc)
        try:
            self.close(status, reason=reason)
        except RunLogError as e:  # a chunk or a file that cannot be written (a full disk): the run failed
            self.close_failed(_one_line(e) if reason is None else f"{reason}; then {_one_line(e)}")
            if exc is None:
                raise
        return False

    def close_failed(self, reason: str) -> None:
        """Record the run as ``"failed"`` with ``reason``, keeping only the chunks already on disk.  Idempotent.

        The way out when :meth:`close` cannot write (a full disk: ENOSPC or
        EDQUOT): the chunk in flight gets one more attempt, the rows still
        buffered are dropped, and ``meta.json`` records the ticks and chunks
        on disk, so that :func:`load_run` reads every finished chunk.  If even
        ``meta.json`` cannot be written, the error is logged and the folder
        keeps its last status (``"running"``: the trace of a run that did not
        end well).
        """
        if self._closed:
            return
        try:
            self._wait_writer()
        except RunLogError as e:
            _log.warning("dropping the chunk that could not be written: %s", e)
        self._job = None
        self._row = 0
        self._meta.update(status="failed", reason=" ".join(reason.split()), ticks=self._ticks_on_disk,
                          chunks=self._chunks)
        try:
            _write_json(self._folder / META_FILE, self._meta)
        except RunLogError as e:
            _log.error("run %s failed (%s), and its meta.json could not record it: %s", self._folder, reason, e)
        self._closed = True

    def __repr__(self) -> str:
        state = "closed" if self._closed else "open"
        return f"RunLog({str(self._folder)!r}, columns={list(self._columns)}, ticks={self.ticks}, {state})"


def _one_line(exc: BaseException) -> str:
    """``"ExcType: message"`` on one line (just ``"ExcType"`` if the message is empty)."""
    message = " ".join(str(exc).split())
    name = type(exc).__name__
    return f"{name}: {message}" if message else name


# ----------------------------------------------------------------------------------------------
# reader
# ----------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Run:
    """A run read back from disk by :func:`load_run`.

    Attributes
    ----------
    arrays : dict of str -> ndarray
        Column ``c`` as one array of shape ``(ticks, *shape_c)``, all chunks
        concatenated in order, with the column's dtype.
    meta : dict
        Contents of ``meta.json``.
    metrics : dict
        Contents of ``metrics.json``; empty if there is none.
    complete : bool
        True iff ``meta["status"] == "complete"``.
    folder : pathlib.Path or None
        The run folder it was read from (its models, for columns derived
        from the logged ones: :func:`sim.analysis.derived.cuff_columns`).
    derived : dict
        Columns derived from the logged ones, kept by the function that
        computed them (:func:`sim.analysis.derived.cuff_columns`) so that every later
        reader of this ``Run`` gets them without computing them again.
    """

    arrays: dict[str, np.ndarray]
    meta: dict[str, Any]
    metrics: dict[str, Any] = field(default_factory=dict)
    complete: bool = False
    folder: Path | None = None
    derived: dict[str, np.ndarray] = field(default_factory=dict, init=False, repr=False, compare=False)

    @property
    def ticks(self) -> int:
        """int : number of ticks read [ticks]."""
        return len(next(iter(self.arrays.values())))

    def __getitem__(self, name: str) -> np.ndarray:
        """Return ``arrays[name]``; KeyError lists the columns."""
        try:
            return self.arrays[name]
        except KeyError:
            raise KeyError(f"no column {name!r} in this run; the columns are {list(self.arrays)}") from None


def _read_json(path: Path) -> dict[str, Any]:
    try:
        obj = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, ValueError) as e:
        raise RunLogError(f"cannot read {str(path)!r}: {e}") from e
    if not isinstance(obj, dict):
        raise RunLogError(f"{str(path)!r} must hold a JSON object, got {type(obj).__name__}")
    return obj


#: Most values (rows x columns) one chunk file may declare: 400 MB of float64 (a project bound; a chunk of the
#: shipped runs holds 1000 ticks x about 120 columns).
MAX_CHUNK_VALUES = 50_000_000
#: Bytes of uncompressed Parquet data a chunk may declare per value, and per column on top (page headers and
#: encodings; a project bound, about twice what the writer produces).
_BYTES_PER_VALUE, _BYTES_PER_COLUMN = 16, 4096


def _check_chunk_size(path: Path, columns: Mapping[str, _Column], max_rows: int) -> None:
    """Refuse a chunk whose footer declares more data than the run can hold, before anything is decompressed.

    The Parquet footer (file metadata) gives each row group's rows and each column chunk's uncompressed size; a
    decompression bomb declares either too many rows (more than ``max_rows``: the meta's ``chunk_ticks``, or the
    planned ticks left), too many values (:data:`MAX_CHUNK_VALUES`) or too many uncompressed bytes.
    """
    where = f"chunk file {str(path)!r}"
    try:
        with pq.ParquetFile(path) as f:
            md = f.metadata
            rows, n_cols = md.num_rows, md.num_columns
            unpacked = sum(md.row_group(i).column(j).total_uncompressed_size
                           for i in range(md.num_row_groups) for j in range(n_cols))
    except (OSError, pa.ArrowException, ValueError, EOFError) as e:
        raise RunLogError(f"{where} is corrupt or truncated: {type(e).__name__}: {e}") from e
    expected = sum(len(col.parquet_names(name)) for name, col in columns.items())
    if n_cols > expected:
        raise RunLogError(f"{where} declares {n_cols} columns; meta.json records {expected}")
    if rows > max_rows:
        raise RunLogError(f"{where} declares {rows} rows; at most {max_rows} are expected (chunk_ticks and the "
                          "planned ticks of meta.json)")
    if rows * n_cols > MAX_CHUNK_VALUES:
        raise RunLogError(f"{where} declares {rows} rows x {n_cols} columns; at most {MAX_CHUNK_VALUES} values "
                          "are read")
    limit = _BYTES_PER_VALUE * rows * n_cols + _BYTES_PER_COLUMN * n_cols
    if unpacked > limit:
        raise RunLogError(f"{where} declares {unpacked} bytes of uncompressed data for {rows} rows x {n_cols} "
                          f"columns; at most {limit} are read")


def _read_chunk(path: Path, columns: Mapping[str, _Column], max_rows: int) -> dict[str, np.ndarray]:
    """One chunk file as arrays of shape (ticks, *shape) per column, checked against ``columns`` (of meta.json)."""
    where = f"chunk file {str(path)!r}"
    _check_chunk_size(path, columns, max_rows)
    try:
        table = pq.read_table(path, use_threads=False, page_checksum_verification=True)
    except (OSError, pa.ArrowException, ValueError, EOFError) as e:
        raise RunLogError(f"{where} is corrupt or truncated: {type(e).__name__}: {e}") from e
    try:
        info = json.loads((table.schema.metadata or {})[CHUNK_METADATA_KEY])
        rows = info["ticks"]
        stored = _columns_from_json(info["columns"], where)
    except (KeyError, TypeError, ValueError) as e:
        raise RunLogError(f"{where} has no valid {CHUNK_METADATA_KEY.decode()!r} metadata: {e}") from e
    if isinstance(rows, bool) or not isinstance(rows, int) or rows < 1:
        raise RunLogError(f"{where}: its metadata must give ticks >= 1, got {rows!r}")
    if stored != dict(columns):
        raise RunLogError(f"{where} holds columns {info['columns']}, meta.json records"
                          f" { {name: col.to_json() for name, col in columns.items()} }")
    present = set(table.column_names)
    expected = {n for name, col in columns.items() for n in col.parquet_names(name)}
    extra = sorted(present - expected)
    if extra:
        raise RunLogError(f"{where} holds unexpected columns {extra}")
    if expected and table.num_rows != rows:
        raise RunLogError(f"{where} has {table.num_rows} rows, its metadata records {rows} ticks")
    out = {}
    for name, col in columns.items():
        flat = np.empty((col.row_values * (2 if col.dtype.kind == "c" else 1), rows), dtype=col.stored_dtype)
        for j, pname in enumerate(col.parquet_names(name)):
            if pname not in present:
                raise RunLogError(f"{where} has no column {pname!r}")
            values = table.column(pname)
            if values.type != pa.from_numpy_dtype(col.stored_dtype) or values.null_count:
                raise RunLogError(f"{where}: column {pname!r} is {values.type} with {values.null_count} nulls,"
                                  f" expected {col.stored_dtype.name} without nulls")
            flat[j] = values.to_numpy()
        out[name] = np.ascontiguousarray(flat.T).view(col.dtype).reshape(rows, *col.shape)
    return out


def _check_model_paths(root: Path, meta: Mapping[str, Any], meta_path: Path) -> None:
    """Every file ``meta["models"]`` names (``*_urdf``) must be a relative path inside the run folder.

    A run folder comes from anywhere (a colleague, a download): its meta.json must not make a reader open
    ``../../etc/passwd`` or an absolute path.
    """
    models = meta.get("models")
    if models is None:
        return
    if not isinstance(models, Mapping):
        raise RunLogError(f"{str(meta_path)!r}: models must be a JSON object, got {type(models).__name__}")
    inside = root.resolve()
    for key, value in models.items():
        if not str(key).endswith("_urdf"):
            continue
        ok = isinstance(value, str) and value and not Path(value).is_absolute()
        if ok:
            target = (root / value).resolve()
            ok = target != inside and inside in target.parents
        if not ok:
            raise RunLogError(f"{str(meta_path)!r}: models.{key} = {value!r} must name a file inside the run folder "
                              f"{str(root)!r} (a relative path without '..' out of it)")


def load_run(path: str | os.PathLike[str]) -> Run:
    """Read a run folder written by :class:`RunLog`.

    Works on finished and unfinished runs: for a run whose status is still
    ``"running"`` (the process died) or ``"failed"``, every chunk file on disk
    is loaded.  Leftover ``*.tmp`` files (a chunk being written when the
    process died) are ignored with a warning.  Reads format version
    :data:`FORMAT_VERSION` (Parquet chunks, the module docstring describes
    them); nothing is unpickled.

    Parameters
    ----------
    path : str or pathlib.Path
        The run folder.

    Returns
    -------
    Run
        The concatenated columns, ``meta.json``, ``metrics.json`` and whether
        the run completed.

    Raises
    ------
    RunLogError
        If the folder or ``meta.json`` is missing or unreadable, a chunk file
        is missing from the sequence, corrupt, truncated or inconsistent with
        ``meta.json`` (the message names the file), its ``format_version``
        is another one (an older run: the message names the folder, its
        version and the one read), or, for a closed run, the tick/chunk counts
        on disk differ from those recorded.
    """
    root = Path(path)
    if not root.is_dir():
        raise RunLogError(f"no run folder at {str(root)!r}")
    meta_path = root / META_FILE
    if not meta_path.is_file():
        raise RunLogError(f"{str(root)!r} is not a run folder: {META_FILE} is missing")
    meta = _read_json(meta_path)
    version = meta.get("format_version")
    if version not in READ_FORMAT_VERSIONS:
        what = f" ({_OLD_FORMATS[version]}, no longer read)" if version in _OLD_FORMATS else ""
        raise RunLogError(f"{str(meta_path)!r}: the run folder {str(root)!r} has log format_version {version!r}"
                          f"{what}; this version reads format_version {FORMAT_VERSION} (Parquet chunks) only:"
                          f" run the scenario again to get a readable log")
    columns = _columns_from_json(meta.get("columns"), str(meta_path))
    _check_model_paths(root, meta, meta_path)
    chunk_ticks = meta.get("chunk_ticks")
    if isinstance(chunk_ticks, bool) or not isinstance(chunk_ticks, int) or chunk_ticks < 1:
        raise RunLogError(f"{str(meta_path)!r}: chunk_ticks must be an int >= 1, got {chunk_ticks!r}")

    chunk_dir = root / CHUNK_DIR
    indices = []
    if chunk_dir.is_dir():
        for entry in sorted(chunk_dir.iterdir()):
            m = _CHUNK_RE.match(entry.name)
            if m:
                indices.append(int(m.group(1)))
            elif entry.name.endswith(".tmp"):
                _log.warning("ignoring unfinished file %s", entry.name)
    indices.sort()
    for expected, found in enumerate(indices):
        if found != expected:
            raise RunLogError(f"chunk file {str(chunk_dir / _chunk_name(expected))!r} is missing")

    planned = meta.get("n_ticks_planned")  # written by the simulation; a log of another origin may lack it
    left = planned if isinstance(planned, int) and not isinstance(planned, bool) and planned >= 0 else None
    parts: dict[str, list[np.ndarray]] = {name: [] for name in columns}
    for i in indices:
        chunk_path = chunk_dir / _chunk_name(i)
        chunk = _read_chunk(chunk_path, columns, chunk_ticks if left is None else min(chunk_ticks, left))
        n = len(next(iter(chunk.values())))
        if left is not None:
            left -= n
        if i < len(indices) - 1 and n != chunk_ticks:
            raise RunLogError(f"chunk file {str(chunk_path)!r} has {n} ticks; all but the last must have {chunk_ticks}")
        for name, arr in chunk.items():
            parts[name].append(arr)
    arrays = {
        name: np.concatenate(parts[name]) if parts[name] else np.empty((0, *col.shape), dtype=col.dtype)
        for name, col in columns.items()
    }

    status = meta.get("status")
    if status in _FINAL_STATUSES:
        ticks = len(next(iter(arrays.values())))
        if meta.get("chunks") != len(indices) or meta.get("ticks") != ticks:
            raise RunLogError(
                f"{str(root)!r}: meta.json records {meta.get('chunks')} chunks / {meta.get('ticks')} ticks,"
                f" found {len(indices)} chunks / {ticks} ticks on disk"
            )
    metrics_path = root / METRICS_FILE
    metrics = _read_json(metrics_path) if metrics_path.exists() else {}
    return Run(arrays=arrays, meta=meta, metrics=metrics, complete=status == "complete", folder=root)


def mark_run(path: str | os.PathLike[str], status: str, reason: str) -> None:
    """Change the final status of a closed run folder to ``"failed"`` or ``"interrupted"``, with ``reason``.

    For what goes wrong after the log is closed but before the run is done
    (its human-alone baseline, its metrics, its report): ``meta.json`` then
    never says ``"complete"`` of a run that has no metrics.  The tick and
    chunk counts stay as they are.

    Raises
    ------
    RunLogError
        If the folder holds no closed run, ``status`` is not one of the two,
        or ``meta.json`` cannot be written (naming it).
    """
    if status not in ("failed", "interrupted"):
        raise RunLogError(f"mark_run: status must be 'failed' or 'interrupted', got {status!r}")
    meta_path = Path(path) / META_FILE
    meta = _read_json(meta_path)
    if meta.get("status") not in _FINAL_STATUSES:
        raise RunLogError(f"{str(meta_path)!r}: the run is not closed (status {meta.get('status')!r})")
    meta.update(status=status, reason=" ".join(str(reason).split()))
    _write_json(meta_path, meta)


# ----------------------------------------------------------------------------------------------
# environment
# ----------------------------------------------------------------------------------------------


@functools.cache
def _module_version(name: str) -> str | None:
    """Version of the module's distribution from the installed metadata, or of the module itself.

    Looked up once per process (about 5 ms for the six modules, most of it for a missing one): the modules a
    process has imported stay the ones it runs, whatever is installed later.
    """
    try:
        return str(importlib_metadata.version(_VERSIONED_MODULES[name]))
    except importlib_metadata.PackageNotFoundError:
        pass
    try:  # e.g. pinocchio built from source, without the "pin" distribution
        return str(import_module(name).__version__)
    except Exception:  # a missing or broken optional install only means "no version"
        return None


def _git(*args: str) -> str | None:
    try:
        done = subprocess.run(
            ["git", *args],
            cwd=Path(__file__).resolve().parent,
            capture_output=True,
            text=True,
            timeout=_GIT_TIMEOUT_S,
            check=False,
        )
    except (OSError, subprocess.SubprocessError):
        return None
    return done.stdout if done.returncode == 0 else None


def environment_metadata() -> dict[str, Any]:
    """Describe the software environment of a run, for ``RunLog(metadata=...)``.

    Returns
    -------
    dict
        ``python`` (version string), ``machine`` and ``system`` (from
        :mod:`platform`), the versions of ``numpy``, ``pinocchio``,
        ``qpsolvers``, ``osqp``, ``meshcat`` and ``mujoco`` (None when not
        importable), ``git_revision`` (``git rev-parse HEAD`` of the checkout
        holding this file, None when unavailable) and ``git_dirty`` (True if
        ``git status --porcelain`` reports changes, None when unavailable).
        Holds no filesystem paths.  Each git call has a 2 s timeout.
    """
    env: dict[str, Any] = {
        "python": platform.python_version(),
        "machine": platform.machine(),
        "system": platform.system(),
    }
    for name in _VERSIONED_MODULES:
        env[name] = _module_version(name)
    revision = _git("rev-parse", "HEAD")
    env["git_revision"] = (revision.strip() or None) if revision is not None else None
    status = _git("status", "--porcelain")
    env["git_dirty"] = bool(status.strip()) if status is not None else None
    return env
