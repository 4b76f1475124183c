"""Chunked columnar run logs: round trip, crash traces, strictness, determinism and the Parquet chunks.

Independent references: pyarrow.parquet and pandas read the chunk files (Apache Parquet format
specification); the IEEE 754-2019 bit patterns of the values written.
"""

from __future__ import annotations

import json
import os
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from models.errors import SandboxError
from sim.loop.runlog import RunLog, RunLogError, environment_metadata, load_run

COLUMNS = {
    "t": (),
    "q_exo": (7,),
    "cuff_wrench_true": (3, 6),
    "sat": ((7,), "bool"),
    "iters": ((), "int64"),
}


def _ticks(n: int, seed: int = 0) -> list[dict[str, np.ndarray]]:
    """``n`` ticks of seeded data for :data:`COLUMNS`."""
    rng = np.random.default_rng(seed)
    q = rng.standard_normal((n, 7))
    w = rng.standard_normal((n, 3, 6)) * 1e3
    sat = rng.random((n, 7)) < 0.2
    iters = rng.integers(0, 50, size=n)
    return [
        {"t": k * 1e-3, "q_exo": q[k], "cuff_wrench_true": w[k], "sat": sat[k], "iters": iters[k]}
        for k in range(n)
    ]


def _stacked(ticks: list[dict[str, np.ndarray]]) -> dict[str, np.ndarray]:
    return {name: np.array([tick[name] for tick in ticks]) for name in COLUMNS}


def _chunk_files(folder) -> list[str]:
    return sorted(p.name for p in (folder / "log").iterdir())


def _meta(folder) -> dict:
    return json.loads((folder / "meta.json").read_text(encoding="utf-8"))


def test_2500_ticks_in_chunks_of_1000_round_trip_bit_identical(tmp_path):
    ticks = _ticks(2500)
    with RunLog(tmp_path / "run", COLUMNS, chunk_ticks=1000) as log:
        for tick in ticks:
            log.append(**tick)
        assert log.ticks == 2500
    assert _chunk_files(tmp_path / "run") == ["chunk_000000.parquet", "chunk_000001.parquet", "chunk_000002.parquet"]
    run = load_run(tmp_path / "run")
    expected = _stacked(ticks)
    assert run.complete and run.ticks == 2500
    assert run.meta["ticks"] == 2500 and run.meta["chunks"] == 3 and run.meta["status"] == "complete"
    for name, arr in expected.items():
        assert run[name].shape == (2500, *arr.shape[1:])
        assert np.array_equal(run[name], arr)
    assert run["q_exo"].tobytes() == expected["q_exo"].tobytes()  # bit-identical floats
    assert run["sat"].dtype == np.bool_ and run["iters"].dtype == np.int64 and run["t"].dtype == np.float64


@pytest.mark.parametrize(
    ("exc", "status", "reason"),
    [
        (ValueError("solver\ndiverged at t=1.5 s"), "failed", "ValueError: solver diverged at t=1.5 s"),
        (KeyboardInterrupt(), "interrupted", "KeyboardInterrupt"),
    ],
)
def test_exception_in_with_block_keeps_all_ticks_and_records_status(tmp_path, exc, status, reason):
    ticks = _ticks(1500)
    with pytest.raises(type(exc)):
        with RunLog(tmp_path / "run", COLUMNS, chunk_ticks=1000) as log:
            for tick in ticks:
                log.append(**tick)
            raise exc
    assert _chunk_files(tmp_path / "run") == ["chunk_000000.parquet", "chunk_000001.parquet"]
    meta = _meta(tmp_path / "run")
    assert meta["status"] == status and meta["reason"] == reason
    run = load_run(tmp_path / "run")
    assert not run.complete
    assert np.array_equal(run["cuff_wrench_true"], _stacked(ticks)["cuff_wrench_true"])


def test_unclosed_log_stays_running_and_loads_finished_chunks(tmp_path):
    ticks = _ticks(1500)
    log = RunLog(tmp_path / "run", COLUMNS, chunk_ticks=1000)
    for tick in ticks:
        log.append(**tick)
    log.sync()  # the first chunk is on disk
    del log  # the process "dies": no close
    run = load_run(tmp_path / "run")
    assert run.meta["status"] == "running" and not run.complete
    assert run.ticks == 1000
    assert np.array_equal(run["q_exo"], _stacked(ticks[:1000])["q_exo"])


def test_leftover_temporary_chunk_is_ignored_on_load(tmp_path):
    log = RunLog(tmp_path / "run", {"t": ()}, chunk_ticks=2)
    for k in range(2):
        log.append(t=float(k))
    log.sync()
    (tmp_path / "run" / "log" / ".chunk_000001.parquet.tmp").write_bytes(b"PAR1half a chunk")
    (tmp_path / "run" / "log" / "chunk_000001.parquet.tmp").write_bytes(b"PAR1half a chunk")
    assert np.array_equal(load_run(tmp_path / "run")["t"], [0.0, 1.0])


def test_chunks_hold_no_pickles_and_meta_holds_converted_metadata(tmp_path):
    metadata = {
        "seed": np.int64(7),
        "dt_s": np.float64(1e-3),
        "gains": np.array([1.0, 2.5]),
        "levels": ("contact", "posture"),
        "urdf": Path("models") / "exo.urdf",
    }
    with RunLog(tmp_path / "run", COLUMNS, chunk_ticks=10, metadata=metadata) as log:
        for tick in _ticks(25):
            log.append(**tick)
    elements = ["t", *(f"q_exo[{i}]" for i in range(7)),
                *(f"cuff_wrench_true[{i},{j}]" for i in range(3) for j in range(6)), *(f"sat[{i}]" for i in range(7)),
                "iters"]
    for name in _chunk_files(tmp_path / "run"):
        md = pq.ParquetFile(tmp_path / "run" / "log" / name).metadata
        assert md.schema.names == elements and md.num_row_groups == 1
        assert {md.row_group(0).column(i).compression for i in range(md.num_columns)} == {"ZSTD"}
    meta = _meta(tmp_path / "run")
    assert meta["seed"] == 7 and meta["dt_s"] == 1e-3 and meta["gains"] == [1.0, 2.5]
    assert meta["levels"] == ["contact", "posture"] and meta["urdf"] == "models/exo.urdf"
    assert meta["columns"]["cuff_wrench_true"] == {"shape": [3, 6], "dtype": "float64"}
    assert meta["columns"]["sat"] == {"shape": [7], "dtype": "bool"}
    assert meta["format_version"] == 3
    assert meta["chunk_ticks"] == 10
    assert str(tmp_path) not in (tmp_path / "run" / "meta.json").read_text(encoding="utf-8")


def test_meta_json_is_written_as_running_at_creation(tmp_path):
    RunLog(tmp_path / "run", {"t": ()}, metadata={"scenario": "reach"})
    meta = _meta(tmp_path / "run")
    assert meta["status"] == "running" and meta["scenario"] == "reach"
    assert meta["columns"] == {"t": {"shape": [], "dtype": "float64"}}


def test_metrics_written_on_close_and_read_back(tmp_path):
    log = RunLog(tmp_path / "run", {"t": ()})
    log.append(t=0.0)
    log.close(metrics={"peak_interaction_force_N": np.float64(12.5), "n_sat": 3})
    assert load_run(tmp_path / "run").metrics == {"peak_interaction_force_N": 12.5, "n_sat": 3}
    other = RunLog(tmp_path / "other", {"t": ()})
    other.close()
    assert load_run(tmp_path / "other").metrics == {}
    assert load_run(tmp_path / "other")["t"].shape == (0,)


def test_close_is_idempotent(tmp_path):
    log = RunLog(tmp_path / "run", {"t": ()}, chunk_ticks=4)
    for k in range(3):
        log.append(t=float(k))
    log.close("failed", reason="QPSolveError: infeasible")
    before = (tmp_path / "run" / "meta.json").read_bytes()
    log.close("complete")
    assert (tmp_path / "run" / "meta.json").read_bytes() == before
    assert _chunk_files(tmp_path / "run") == ["chunk_000000.parquet"]


def test_reentering_or_appending_after_close_is_refused(tmp_path):
    log = RunLog(tmp_path / "run", {"t": ()})
    log.close()
    with pytest.raises(RunLogError, match="closed"):
        log.append(t=1.0)
    with pytest.raises(RunLogError, match="closed"):
        log.__enter__()


def test_environment_metadata_has_keys_and_no_paths():
    env = environment_metadata()
    expected = {"python", "machine", "system", "numpy", "pinocchio", "qpsolvers", "osqp", "meshcat", "mujoco"}
    assert expected | {"git_revision", "git_dirty"} <= set(env)
    assert env["numpy"] == np.__version__
    assert env["git_dirty"] in (True, False, None)
    for key, value in env.items():
        assert value is None or isinstance(value, (str, bool)), key
        if isinstance(value, str):
            assert not value.startswith(os.sep) and not os.path.isabs(value), key
    json.dumps(env)  # storable as metadata


_OK = {"t": 0.0, "q": np.zeros(7), "sat": np.zeros(7, dtype=bool)}


@pytest.mark.parametrize(
    ("values", "match"),
    [
        ({**_OK, "q": np.zeros(6)}, "column 'q' expects shape \\(7,\\), got \\(6,\\)"),
        ({**_OK, "q": 1.0}, "column 'q' expects shape \\(7,\\), got \\(\\)"),
        ({"q": np.zeros(7), "sat": np.zeros(7, dtype=bool)}, "missing column\\(s\\) \\['t'\\]"),
        ({**_OK, "tau": np.zeros(7)}, "unknown column\\(s\\) \\['tau'\\]"),
        ({**_OK, "sat": np.full(7, 0.5)}, "column 'sat' has dtype bool"),
    ],
    ids=["wrong-shape", "scalar-for-vector", "missing", "unknown", "float-into-bool"],
)
def test_bad_append_names_the_column_and_stores_nothing(tmp_path, values, match):
    log = RunLog(tmp_path / "run", {"t": (), "q": (7,), "sat": ((7,), bool)}, chunk_ticks=2)
    with pytest.raises(RunLogError, match=match):
        log.append(**values)
    assert log.ticks == 0
    log.append(t=1.0, q=np.ones(7), sat=np.ones(7, dtype=bool))
    log.close()
    assert np.array_equal(load_run(tmp_path / "run")["t"], [1.0])


def test_append_row_writes_the_same_files_as_append(tmp_path):
    # Reference: the keyword path append (its round trip is checked above against the data appended).  The
    # rows mix the common case (exact-shape arrays, Python floats) with values append converts (a numpy
    # integer scalar, lists, an int array into a float column), over several chunks and a partial one.
    ticks = _ticks(250, seed=4)
    ticks[7] = {**ticks[7], "q_exo": ticks[7]["q_exo"].tolist(), "sat": ticks[7]["sat"].tolist()}
    ticks[8] = {**ticks[8], "t": np.float64(ticks[8]["t"]), "cuff_wrench_true": np.arange(18).reshape(3, 6)}
    with RunLog(tmp_path / "kw", COLUMNS, chunk_ticks=100) as log:
        for tick in ticks:
            log.append(**tick)
    with RunLog(tmp_path / "pos", COLUMNS, chunk_ticks=100) as log:
        row = dict.fromkeys(log.column_names)
        for i, tick in enumerate(ticks):
            row.update(tick)
            log.append_row(row.values() if i % 2 else [row[name] for name in COLUMNS])
    files = _chunk_files(tmp_path / "kw")
    assert files == _chunk_files(tmp_path / "pos") and len(files) == 3
    for f in [*("log/" + f for f in files), "meta.json"]:
        assert (tmp_path / "kw" / f).read_bytes() == (tmp_path / "pos" / f).read_bytes(), f
    assert np.array_equal(load_run(tmp_path / "pos")["cuff_wrench_true"][8], np.arange(18.0).reshape(3, 6))


@pytest.mark.parametrize(
    ("values", "match"),
    [
        ([0.0, np.zeros(6), np.zeros(7, dtype=bool)], "column 'q' expects shape \\(7,\\), got \\(6,\\)"),
        ([0.0, np.zeros((7, 1)), np.zeros(7, dtype=bool)], "column 'q' expects shape \\(7,\\), got \\(7, 1\\)"),
        ([np.zeros(1), np.zeros(7), np.zeros(7, dtype=bool)], "column 't' expects shape \\(\\), got \\(1,\\)"),
        ([0.0, 1.0, np.zeros(7, dtype=bool)], "column 'q' expects shape \\(7,\\), got \\(\\)"),
        ([0.0, np.zeros(7), np.full(7, 0.5)], "column 'sat' has dtype bool"),
        ([0.0, np.zeros(7)], "append_row takes one value per column, 3 in the order \\['t', 'q', 'sat'\\]; got 2"),
        ([0.0, np.zeros(7), np.zeros(7, dtype=bool), 1.0], "3 in the order .*; got 4"),
    ],
    ids=["wrong-shape", "extra-axis", "array-for-scalar", "scalar-for-vector", "float-into-bool", "too-few",
         "too-many"],
)
def test_bad_append_row_names_the_column_and_stores_nothing(tmp_path, values, match):
    # The same checks as append (test_bad_append_names_the_column_and_stores_nothing), by position.
    log = RunLog(tmp_path / "run", {"t": (), "q": (7,), "sat": ((7,), bool)}, chunk_ticks=2)
    with pytest.raises(RunLogError, match=match):
        log.append_row(values)
    assert log.ticks == 0
    log.append_row((1.0, np.ones(7), np.ones(7, dtype=bool)))
    log.close()
    assert np.array_equal(load_run(tmp_path / "run")["t"], [1.0])
    with pytest.raises(RunLogError, match="closed"):
        log.append_row((2.0, np.ones(7), np.ones(7, dtype=bool)))


def test_run_log_error_is_a_sandbox_error():
    assert issubclass(RunLogError, SandboxError) and issubclass(RunLogError, RuntimeError)


def test_non_empty_folder_is_refused_and_empty_one_accepted(tmp_path):
    RunLog(tmp_path / "run", {"t": ()}).close()
    with pytest.raises(RunLogError, match="run.*already contains a run"):
        RunLog(tmp_path / "run", {"t": ()})
    (tmp_path / "notes").mkdir()
    (tmp_path / "notes" / "todo.txt").write_text("x")
    with pytest.raises(RunLogError, match="notes.*not empty"):
        RunLog(tmp_path / "notes", {"t": ()})
    (tmp_path / "empty").mkdir()
    log = RunLog(tmp_path / "empty", {"t": ()})
    assert log.folder == tmp_path / "empty" and log.column_names == ("t",)


@pytest.mark.parametrize(
    ("columns", "kwargs", "match"),
    [
        ({"q": (-1,)}, {}, "column 'q': shape"),
        ({"q": 7}, {}, "column 'q': shape"),
        ({"q": ((7,), object)}, {}, "column 'q': dtype"),
        ({"not a name": ()}, {}, "identifier"),
        ({}, {}, "non-empty"),
        ({"t": ()}, {"chunk_ticks": 0}, "chunk_ticks"),
        ({"t": ()}, {"metadata": {"gain": float("nan")}}, "metadata\\['gain'\\] must be finite"),
        ({"t": ()}, {"metadata": {"p": {"k": [1.0, np.inf]}}}, "metadata\\['p'\\]\\['k'\\]\\[1\\] must be finite"),
        ({"t": ()}, {"metadata": {"status": "ok"}}, "reserved"),
        ({"t": ()}, {"metadata": {"obj": object()}}, "metadata\\['obj'\\] is not JSON"),
    ],
)
def test_invalid_columns_or_metadata_are_rejected_before_writing(tmp_path, columns, kwargs, match):
    with pytest.raises(RunLogError, match=match):
        RunLog(tmp_path / "run", columns, **kwargs)
    assert not (tmp_path / "run").exists()


def test_absolute_path_in_metadata_is_rejected(tmp_path):
    with pytest.raises(RunLogError, match="metadata\\['urdf'\\] is an absolute path"):
        RunLog(tmp_path / "run", {"t": ()}, metadata={"urdf": tmp_path / "exo.urdf"})


def test_non_finite_metrics_are_rejected_and_log_stays_open(tmp_path):
    log = RunLog(tmp_path / "run", {"t": ()})
    with pytest.raises(RunLogError, match="metrics\\['rms_N'\\] must be finite"):
        log.close(metrics={"rms_N": float("nan")})
    with pytest.raises(RunLogError, match="status must be one of"):
        log.close("done")
    log.append(t=0.0)
    log.close(metrics={"rms_N": 0.0})
    assert load_run(tmp_path / "run").complete


def test_same_data_gives_byte_identical_files(tmp_path):
    for name in ("a", "b"):
        with RunLog(tmp_path / name, COLUMNS, chunk_ticks=100, metadata={"seed": 3}) as log:
            for tick in _ticks(250, seed=3):
                log.append(**tick)
    files = _chunk_files(tmp_path / "a")
    assert files == _chunk_files(tmp_path / "b") and len(files) == 3
    for f in files:
        assert (tmp_path / "a" / "log" / f).read_bytes() == (tmp_path / "b" / "log" / f).read_bytes()
    assert (tmp_path / "a" / "meta.json").read_bytes() == (tmp_path / "b" / "meta.json").read_bytes()


def test_load_missing_folder_or_meta_names_the_path(tmp_path):
    with pytest.raises(RunLogError, match="no run folder.*nowhere"):
        load_run(tmp_path / "nowhere")
    (tmp_path / "bare").mkdir()
    with pytest.raises(RunLogError, match="bare.*meta.json is missing"):
        load_run(tmp_path / "bare")


@pytest.mark.parametrize(
    "damage",
    [
        lambda b: b[: len(b) // 2],  # truncated mid-write by something else
        lambda b: b"",  # empty file
        lambda b: b[:200] + bytes(x ^ 0xFF for x in b[200:260]) + b[260:],  # flipped payload bytes
    ],
    ids=["truncated", "empty", "bit-flipped"],
)
def test_corrupt_chunk_is_reported_naming_the_file(tmp_path, damage):
    with RunLog(tmp_path / "run", {"q": (7,)}, chunk_ticks=10) as log:
        for k in range(25):
            log.append(q=np.full(7, float(k)))
    path = tmp_path / "run" / "log" / "chunk_000001.parquet"
    path.write_bytes(damage(path.read_bytes()))
    with pytest.raises(RunLogError, match="chunk_000001.parquet"):
        load_run(tmp_path / "run")


def test_missing_chunk_in_sequence_is_reported(tmp_path):
    log = RunLog(tmp_path / "run", {"t": ()}, chunk_ticks=1)
    for k in range(3):
        log.append(t=float(k))
    log.sync()
    (tmp_path / "run" / "log" / "chunk_000001.parquet").unlink()
    with pytest.raises(RunLogError, match="chunk_000001.parquet' is missing"):
        load_run(tmp_path / "run")


def test_run_getitem_unknown_column_lists_columns(tmp_path):
    RunLog(tmp_path / "run", {"t": (), "q": (2,)}).close()
    with pytest.raises(KeyError, match="'tau'.*\\['t', 'q'\\]"):
        load_run(tmp_path / "run")["tau"]


# -- the Parquet chunks (format version 3) ------------------------------------------------------
def _special_floats(dtype) -> np.ndarray:
    """NaN with payloads and signs, signed zeros, infinities, subnormals, extremes and ordinary values."""
    info = np.finfo(dtype)
    nan_payloads = np.array([np.nan, -np.nan], dtype=dtype)
    if np.dtype(dtype).itemsize in (2, 4, 8):  # set a low mantissa bit: a NaN with a payload
        u = np.dtype(f"u{np.dtype(dtype).itemsize}")
        nan_payloads = (nan_payloads.view(u) | u.type(1)).view(dtype)
    values = np.array([0.0, -0.0, np.inf, -np.inf, info.tiny / 4, -info.tiny / 8, info.max, -info.max,
                       info.eps, 1.0, -3.25, 1e-3], dtype=dtype)
    return np.concatenate([values, nan_payloads])


@pytest.mark.parametrize("dtype", ["float64", "float32", "float16", "complex128", "complex64", "longdouble"])
def test_float_columns_round_trip_bit_for_bit_with_special_values(tmp_path, dtype):
    # lossless means the bit patterns come back, NaN payloads and the sign of zero included (IEEE 754-2019)
    rng = np.random.default_rng(4)
    real = np.dtype(dtype).type(0).real.dtype
    special = _special_floats(real)
    data = rng.choice(special, size=(23, 3, 2)).astype(dtype)
    if np.dtype(dtype).kind == "c":
        data.imag = rng.choice(special, size=(23, 3, 2))
    if real.itemsize > 8:  # a platform's long double (80 or 128 bits) has no Parquet type: refused up front
        with pytest.raises(RunLogError, match="column 'x': dtype .* has no Parquet type"):
            RunLog(tmp_path / "run", {"x": ((3, 2), dtype)})
        assert not (tmp_path / "run").exists()
        return
    with RunLog(tmp_path / "run", {"x": ((3, 2), dtype), "empty": ((2, 0), dtype)}, chunk_ticks=10) as log:
        for row in data:
            log.append(x=row, empty=np.zeros((2, 0), dtype))
    run = load_run(tmp_path / "run")
    assert run["x"].dtype == np.dtype(dtype) and run["x"].tobytes() == data.tobytes()
    assert run["empty"].shape == (23, 2, 0)
    # independent reader: pyarrow gives the same bit patterns, element by element (complex as real, imag)
    table = pq.read_table(tmp_path / "run" / "log" / "chunk_000000.parquet")
    parts = data[:10].reshape(10, 6, 1) if np.dtype(dtype).kind != "c" else data[:10].reshape(10, 6)
    if np.dtype(dtype).kind == "c":
        parts = np.stack([parts.real, parts.imag], axis=-1)
    names = [f"x[{i},{j}]" for i in range(3) for j in range(2)]
    names = [f"{n}.{p}" for n in names for p in ("real", "imag")] if np.dtype(dtype).kind == "c" else names
    assert table.column_names == names and table.num_rows == 10
    for k, name in enumerate(names):
        assert table.column(name).to_numpy().tobytes() == np.ascontiguousarray(parts.reshape(10, -1)[:, k]).tobytes()


@pytest.mark.parametrize("dtype", ["bool", "int8", "uint16", "int32", "int64", "uint64"])
def test_integer_and_bool_columns_round_trip_exactly(tmp_path, dtype):
    rng = np.random.default_rng(5)
    if dtype == "bool":
        data = rng.random((17, 4)) < 0.5
    else:
        info = np.iinfo(dtype)
        data = rng.integers(info.min, info.max, size=(17, 4), dtype=dtype, endpoint=True)
        data[0] = [info.min, info.max, 0, 1]
    with RunLog(tmp_path / "run", {"x": ((4,), dtype)}, chunk_ticks=5) as log:
        for row in data:
            log.append(x=row)
    run = load_run(tmp_path / "run")
    assert run.meta["columns"]["x"] == {"shape": [4], "dtype": np.dtype(dtype).name}
    assert run["x"].dtype == np.dtype(dtype) and np.array_equal(run["x"], data)
    table = pq.read_table(tmp_path / "run" / "log" / "chunk_000003.parquet")  # ticks 15, 16
    assert table.schema.field("x[0]").type == pa.from_numpy_dtype(np.dtype(dtype))
    assert [table.column(f"x[{i}]").to_pylist() for i in range(4)] == data[15:].T.tolist()


def test_a_chunk_opens_with_pyarrow_and_pandas_and_gives_the_logged_values(tmp_path):
    # independent readers (Apache Parquet format specification): pyarrow.parquet.read_table and pandas.read_parquet
    # see one flat column per element, named after its row-major index, with the values appended
    pd = pytest.importorskip("pandas")
    ticks = _ticks(25)
    with RunLog(tmp_path / "run", COLUMNS, chunk_ticks=10) as log:
        for tick in ticks:
            log.append(**tick)
    chunk = tmp_path / "run" / "log" / "chunk_000001.parquet"  # ticks 10 .. 19
    expected = _stacked(ticks[10:20])
    table = pq.read_table(chunk)
    assert table.num_rows == 10
    assert table.column("t").to_pylist() == expected["t"].tolist()
    assert table.column("q_exo[3]").to_pylist() == expected["q_exo"][:, 3].tolist()
    assert table.column("cuff_wrench_true[2,5]").to_pylist() == expected["cuff_wrench_true"][:, 2, 5].tolist()
    assert table.column("cuff_wrench_true[1,0]").to_pylist() == expected["cuff_wrench_true"][:, 1, 0].tolist()
    assert table.column("sat[6]").to_pylist() == expected["sat"][:, 6].tolist()
    assert table.column("iters").to_pylist() == expected["iters"].tolist()
    info = json.loads(table.schema.metadata[b"exosandbox"])
    assert info == {"format_version": 3, "ticks": 10, "columns": _meta(tmp_path / "run")["columns"]}

    df = pd.read_parquet(chunk)
    assert len(df.columns) == 1 + 7 + 18 + 7 + 1 and len(df) == 10
    assert df["q_exo[0]"].dtype == np.float64 and df["sat[0]"].dtype == np.bool_ and df["iters"].dtype == np.int64
    np.testing.assert_array_equal(df[[f"q_exo[{i}]" for i in range(7)]].to_numpy(), expected["q_exo"])
    np.testing.assert_array_equal(
        df[[f"cuff_wrench_true[{i},{j}]" for i in range(3) for j in range(6)]].to_numpy().reshape(10, 3, 6),
        expected["cuff_wrench_true"])
    whole = pd.read_parquet(tmp_path / "run" / "log")  # the folder of chunks as one dataset, in order
    np.testing.assert_array_equal(whole["t"].to_numpy(), _stacked(ticks)["t"])


def test_writing_the_same_chunk_twice_gives_the_same_bytes(tmp_path):
    # the Parquet writer adds no timestamp: the bytes depend on the data only (NaN payloads and -0.0 included)
    import sim.loop.runlog as runlog

    columns = {name: runlog._parse_column(name, spec) for name, spec in COLUMNS.items()}
    arrays = _stacked(_ticks(40, seed=9))
    arrays["q_exo"][3, :2] = [-0.0, np.float64(np.nan)]
    for name in ("one", "two"):
        runlog._write_chunk_file(tmp_path / f"{name}.parquet", arrays, columns, 40)
    assert (tmp_path / "one.parquet").read_bytes() == (tmp_path / "two.parquet").read_bytes()
    assert sorted(p.name for p in tmp_path.iterdir()) == ["one.parquet", "two.parquet"]  # no temporary left


def test_loading_needs_no_pickle(tmp_path, monkeypatch):
    # loadable without pickle: every unpickling entry point raises while the run is read
    import pickle

    ticks = _ticks(25)
    with RunLog(tmp_path / "run", COLUMNS, chunk_ticks=10, metadata={"seed": 3}) as log:
        for tick in ticks:
            log.append(**tick)
        log.close(metrics={"n_sat": 3})

    def refused(*args, **kwargs):
        raise AssertionError("pickle used")

    for name in ("loads", "load", "Unpickler"):
        monkeypatch.setattr(pickle, name, refused)
    run = load_run(tmp_path / "run")
    assert run.complete and run.metrics == {"n_sat": 3}
    for name, arr in _stacked(ticks).items():
        assert run[name].tobytes() == arr.tobytes()


def test_chunks_are_written_off_the_calling_thread_one_at_a_time(tmp_path, monkeypatch):
    import threading
    import time

    import sim.loop.runlog as runlog

    state = {"in_flight": 0, "max_in_flight": 0, "threads": set()}
    lock = threading.Lock()
    write = runlog._write_chunk_file

    def slow_write(*args):
        with lock:
            state["in_flight"] += 1
            state["max_in_flight"] = max(state["max_in_flight"], state["in_flight"])
            state["threads"].add(threading.current_thread().name)
        time.sleep(0.01)
        write(*args)
        with lock:
            state["in_flight"] -= 1

    monkeypatch.setattr(runlog, "_write_chunk_file", slow_write)
    ticks = _ticks(95)
    with RunLog(tmp_path / "run", COLUMNS, chunk_ticks=10) as log:
        for tick in ticks:
            log.append(**tick)
    assert state["max_in_flight"] == 1  # memory: the buffer being filled and at most one being written
    assert threading.main_thread().name not in state["threads"]
    assert np.array_equal(load_run(tmp_path / "run")["cuff_wrench_true"], _stacked(ticks)["cuff_wrench_true"])


def test_append_yields_the_gil_once_a_tick_only_while_a_chunk_is_being_written(tmp_path, monkeypatch):
    # A check of mechanism (no outside reference applies): while the writer thread has a chunk, every append
    # releases the GIL once (time.sleep(0)) so that the writer can take it; before and after, appends do not.
    import threading

    import sim.loop.runlog as runlog

    release, started = threading.Event(), threading.Event()
    write = runlog._write_chunk_file

    def held_write(*args):
        started.set()
        release.wait(10.0)
        write(*args)

    sleeps = []
    monkeypatch.setattr(runlog, "_write_chunk_file", held_write)
    monkeypatch.setattr(runlog.time, "sleep", lambda s: sleeps.append(s))
    ticks = _ticks(30)
    with RunLog(tmp_path / "run", COLUMNS, chunk_ticks=10) as log:
        for tick in ticks[:10]:  # the first chunk fills; no chunk in flight yet
            log.append(**tick)
        assert sleeps == []
        log.append(**ticks[10])  # the 10th append handed the chunk over: it is now being written
        assert started.wait(10.0)
        for tick in ticks[11:15]:
            log.append(**tick)
        assert sleeps == [0, 0, 0, 0, 0]  # one yield per append while the chunk is held
        release.set()
        log._job._thread.join(10.0)  # the write ends (the next hand-over collects it as usual)
        assert log._job.done
        for tick in ticks[15:19]:
            log.append(**tick)
        assert sleeps == [0] * 5  # no yield once it is written
        for tick in ticks[19:]:
            log.append(**tick)
    assert np.array_equal(load_run(tmp_path / "run")["q_exo"], _stacked(ticks)["q_exo"])


def test_failed_chunk_write_is_raised_in_the_caller_and_written_again(tmp_path):
    log = RunLog(tmp_path / "run", {"t": ()}, chunk_ticks=2)
    log_dir = tmp_path / "run" / "log"
    log_dir.rmdir()
    log_dir.write_text("not a folder")  # every chunk write now fails with an OSError
    log.append(t=0.0)
    log.append(t=1.0)  # handed to the writer, which fails in the background
    log.append(t=2.0)
    with pytest.raises(RunLogError, match="could not write chunk file .*chunk_000000.parquet"):
        log.append(t=3.0)  # the next hand-over reports it
    assert log.ticks == 4
    with pytest.raises(RunLogError, match="chunk_000000.parquet"):
        log.close()  # still failing: the log stays open
    log_dir.unlink()
    log_dir.mkdir()
    log.append(t=4.0)  # retries chunk 0, then hands over chunk 1
    log.close()
    run = load_run(tmp_path / "run")
    assert run.complete and np.array_equal(run["t"], [0.0, 1.0, 2.0, 3.0, 4.0])


def test_any_error_of_the_writer_is_re_raised_by_close(tmp_path, monkeypatch):
    import sim.loop.runlog as runlog

    def broken(arrays, columns, rows):
        raise MemoryError("no room to encode")

    monkeypatch.setattr(runlog, "_chunk_table", broken)
    log = RunLog(tmp_path / "run", {"t": ()}, chunk_ticks=3)
    log.append(t=0.0)
    with pytest.raises(MemoryError, match="no room"):
        log.close()
    assert _meta(tmp_path / "run")["status"] == "running"


# -- older formats (1: .npz chunks; 2: zip chunks): refused in one line ----------------------------
def _write_v1_run(folder: Path, ticks: list[dict], chunk_ticks: int, status: str | None = "complete") -> None:
    """A version-1 run folder as that version wrote it: meta.json and numpy.savez chunks (no compression)."""
    (folder / "log").mkdir(parents=True)
    stacked = _stacked(ticks)
    meta = {"format_version": 1, "status": status or "running",
            "columns": {name: {"shape": list(arr.shape[1:]), "dtype": arr.dtype.name} for name, arr in stacked.items()},
            "chunk_ticks": chunk_ticks, "seed": 3}
    n_chunks = 0
    for i, start in enumerate(range(0, len(ticks), chunk_ticks)):
        np.savez(folder / "log" / f"chunk_{i:06d}.npz", **{k: v[start:start + chunk_ticks] for k, v in stacked.items()})
        n_chunks += 1
    if status is not None:
        meta |= {"reason": None, "ticks": len(ticks), "chunks": n_chunks}
    (folder / "meta.json").write_text(json.dumps(meta, indent=2) + "\n", encoding="utf-8")


def test_folder_of_an_older_format_is_refused_in_one_line_naming_it(tmp_path):
    _write_v1_run(tmp_path / "old", _ticks(250), chunk_ticks=100)
    with pytest.raises(RunLogError) as info:
        load_run(tmp_path / "old")
    message = str(info.value)
    assert "\n" not in message and str(tmp_path / "old") in message
    assert "format_version 1" in message and ".npz" in message and "format_version 3 (Parquet chunks) only" in message
    RunLog(tmp_path / "v2", {"t": ()}).close()
    meta = _meta(tmp_path / "v2") | {"format_version": 2}
    (tmp_path / "v2" / "meta.json").write_text(json.dumps(meta), encoding="utf-8")
    with pytest.raises(RunLogError, match="v2.*format_version 2 \\(zip chunks.*reads format_version 3"):
        load_run(tmp_path / "v2")


def test_unknown_format_version_is_refused_naming_meta_json(tmp_path):
    RunLog(tmp_path / "run", {"t": ()}).close()
    meta = _meta(tmp_path / "run") | {"format_version": 99}
    (tmp_path / "run" / "meta.json").write_text(json.dumps(meta), encoding="utf-8")
    with pytest.raises(RunLogError, match="meta.json.*format_version 99"):
        load_run(tmp_path / "run")
