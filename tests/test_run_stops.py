"""A run never lies about its state: SIGINT and SIGTERM, a full disk, an interrupted baseline.

Expected behaviour (the contract of ``sim.loop.simulate``, ``sim.experiments.run.run_scenario`` and
``sim.loop.runlog.RunLog``): a run stopped by SIGINT or SIGTERM writes its buffered ticks, says
``"interrupted"`` in ``meta.json`` and writes the metrics of the part done marked ``"partial"``; a write
that fails with ENOSPC or EDQUOT (errno values of POSIX, IEEE Std 1003.1, <errno.h>) says ``"failed"``
with a one-line reason, leaves no temporary file and keeps every finished chunk loadable.  The signals
are sent to a real ``exosandbox run`` in a subprocess; the full disk is simulated by a writer that
raises ``OSError(errno.ENOSPC, ...)`` half-way through the chosen file (no small file system is
available without root).
"""

from __future__ import annotations

import errno
import json
import os
import pathlib
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest
from _scenario_files import write_scenario

from sim.experiments.run import run_scenario
from sim.loop.interrupt import RunInterrupted, stop_on_signals
from sim.loop.runlog import RunLogError, load_run
from sim.loop.scenario import load_scenario
from sim.loop.simulate import simulate

REPO = Path(__file__).resolve().parents[1]
REACH = REPO / "scenarios" / "reach.py"


def _start_run(tmp_path: Path, out: str, duration_s: float) -> subprocess.Popen:
    env = dict(os.environ, PYTHONPATH=str(REPO) + os.pathsep + os.environ.get("PYTHONPATH", ""))
    return subprocess.Popen([sys.executable, "-m", "sim.cli", "run", str(REACH), "--duration", str(duration_s),
                             "--out", out], cwd=tmp_path, env=env, stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                            text=True)


def _wait_for(path: Path, proc: subprocess.Popen, timeout_s: float = 120.0) -> None:
    t0 = time.monotonic()
    while not path.exists():
        assert proc.poll() is None, f"the run ended before {path.name} appeared: {proc.communicate()}"
        assert time.monotonic() - t0 < timeout_s, f"{path} did not appear"
        time.sleep(0.002)


def _no_temporary_files(folder: Path) -> list[Path]:
    return [p for p in folder.rglob("*") if p.name.endswith(".tmp")]


@pytest.mark.parametrize("signum", [signal.SIGINT, signal.SIGTERM], ids=["SIGINT", "SIGTERM"])
def test_a_signal_during_the_run_marks_it_interrupted_with_partial_metrics(tmp_path, signum):
    proc = _start_run(tmp_path, "r", 30.0)  # 30 000 ticks: about 2 s of loop, stopped after its first chunk
    out = tmp_path / "r"
    _wait_for(out / "log" / "chunk_000000.parquet", proc)
    proc.send_signal(signum)
    stdout, stderr = proc.communicate(timeout=60)
    assert proc.returncode == 1, stderr
    assert "Traceback" not in stderr and "interrupted" in stderr
    run = load_run(out)  # every chunk loadable, counts as meta.json records them
    assert run.meta["status"] == "interrupted"
    assert signal.Signals(signum).name in run.meta["reason"]
    assert 1000 <= run.ticks < 30000
    assert run.meta["ticks"] == run.ticks
    m = run.metrics
    assert m["partial"]["ticks"] == run.ticks and m["partial"]["planned_ticks"] == 30000
    assert "interrupted" in m["partial"]["reason"]
    assert m["sim_duration_s"] == pytest.approx(run.ticks * 1e-3, rel=1e-12)  # the metrics of the part done
    assert m["interaction_force_rms_N"] > 0
    assert m["human_effort_ratio"] is None  # no baseline was made
    assert not (out / "human_alone").exists()
    assert _no_temporary_files(out) == []


def test_a_signal_during_the_baseline_marks_the_run_interrupted_never_complete(tmp_path):
    proc = _start_run(tmp_path, "r", 20.0)
    out = tmp_path / "r"
    _wait_for(out / "human_alone" / "log" / "chunk_000000.parquet", proc)
    proc.send_signal(signal.SIGTERM)
    _, stderr = proc.communicate(timeout=60)
    assert proc.returncode == 1, stderr
    run, base = load_run(out), load_run(out / "human_alone")
    assert base.meta["status"] == "interrupted" and base.ticks < run.ticks
    assert run.meta["status"] == "interrupted"  # the coupled log is whole, the run is not done
    assert "baseline" in run.meta["reason"] and run.ticks == 20000
    m = run.metrics
    # computed over the whole coupled run, never against the partial baseline: its keys null, with the reason
    assert m["human_effort_ratio"] is None and m["path_deviation_rms_rad"] is None
    assert "baseline" in m["partial"]["reason"]
    assert f"{base.ticks} of the run's {run.ticks} ticks" in m["partial"]["baseline"]
    assert not (out / "report.md").exists()


def test_stop_on_signals_raises_run_interrupted_and_restores_the_handlers():
    before = signal.getsignal(signal.SIGTERM), signal.getsignal(signal.SIGINT)
    with pytest.raises(RunInterrupted) as info, stop_on_signals():
        assert signal.getsignal(signal.SIGTERM) is not before[0]
        os.kill(os.getpid(), signal.SIGTERM)
        time.sleep(5)  # the handler raises at the next bytecode
    assert isinstance(info.value, KeyboardInterrupt) and "SIGTERM" in str(info.value)
    assert (signal.getsignal(signal.SIGTERM), signal.getsignal(signal.SIGINT)) == before


def test_stop_on_signals_installs_nothing_outside_the_main_thread():
    import threading

    seen = []

    def body():
        with stop_on_signals():
            seen.append(signal.getsignal(signal.SIGTERM))

    before = signal.getsignal(signal.SIGTERM)
    t = threading.Thread(target=body)
    t.start()
    t.join()
    assert seen == [before]


# -- a full disk ------------------------------------------------------------------------------------


def _fill_disk_at(monkeypatch, name: str, code: int = errno.ENOSPC, method: str = "write_bytes") -> list:
    """Make the write of the file whose name contains ``name`` fail half-way with ``OSError(code)``."""
    real = getattr(pathlib.Path, method)
    hits = []

    def writer(self, data, *args, **kwargs):
        if name in self.name:
            hits.append(self)
            raw = data if isinstance(data, (bytes, memoryview)) else str(data).encode()
            with open(self, "wb") as f:  # what a full disk leaves: part of the file
                f.write(bytes(raw)[: len(raw) // 2])
            raise OSError(code, os.strerror(code), str(self))
        return real(self, data, *args, **kwargs)

    monkeypatch.setattr(pathlib.Path, method, writer)
    return hits


@pytest.mark.parametrize("code", [errno.ENOSPC, errno.EDQUOT], ids=["ENOSPC", "EDQUOT"])
def test_a_full_disk_on_a_chunk_marks_the_run_failed_and_keeps_the_chunks_written(tmp_path, monkeypatch, code):
    scenario = load_scenario(write_scenario(tmp_path / "s.py", duration_s="2.5"))  # chunks 0, 1, 2
    hits = _fill_disk_at(monkeypatch, "chunk_000001", code)
    out = tmp_path / "r"
    with pytest.raises(RunLogError, match=os.strerror(code)):
        simulate(scenario, "gravity", out)
    assert hits
    run = load_run(out)
    assert run.meta["status"] == "failed"
    assert os.strerror(code) in run.meta["reason"] and "\n" not in run.meta["reason"]
    assert run.ticks == 1000 and run.meta["chunks"] == 1  # the chunk written before stays loadable
    assert _no_temporary_files(out) == []


def test_a_full_disk_on_the_last_chunk_at_close_marks_the_run_failed(tmp_path, monkeypatch):
    scenario = load_scenario(write_scenario(tmp_path / "s.py", duration_s="1.5"))  # the partial chunk 1 at close
    _fill_disk_at(monkeypatch, "chunk_000001")
    out = tmp_path / "r"
    with pytest.raises(RunLogError):
        simulate(scenario, "gravity", out)
    run = load_run(out)
    assert run.meta["status"] == "failed" and run.ticks == 1000
    assert _no_temporary_files(out) == []


@pytest.mark.parametrize("name,method", [("metrics.json", "write_text"), ("report.md", "write_text")])
def test_a_full_disk_on_the_metrics_or_report_marks_the_run_failed(tmp_path, monkeypatch, name, method):
    scenario = load_scenario(write_scenario(tmp_path / "s.py"))
    hits = _fill_disk_at(monkeypatch, name, method=method)
    out = tmp_path / "r"
    with pytest.raises(OSError) as info:
        run_scenario(scenario, "gravity", out, figures=False)
    assert info.value.errno == errno.ENOSPC and hits
    meta = json.loads((out / "meta.json").read_text(encoding="utf-8"))
    assert meta["status"] == "failed" and "No space left" in meta["reason"] and name in meta["reason"]
    assert not (out / name).exists()  # neither a half-written file nor its temporary
    assert _no_temporary_files(out) == []
    assert load_run(out).ticks == 200 and load_run(out / "human_alone").complete
