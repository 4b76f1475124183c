"""A sweep never lies about its state: every run failed -> non-zero exit; no worker outlives the sweep.

Expected behaviour (README, "Commands"; ``sim.experiments.sweep.serve``): ``exosandbox sweep`` prints its
table and exits with status 1 when every run failed (0 when at least one ran); a worker process whose
sweep process is killed (SIGKILL, which nothing can catch) stops within a few seconds, and the run it was
doing says ``"interrupted"`` in its ``meta.json``.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
import time
from pathlib import Path

import pytest

import sim.experiments.sweep as sweep
from models.errors import SandboxError
from sim.cli import main

psutil = pytest.importorskip("psutil")

REPO = Path(__file__).resolve().parents[1]
REACH = REPO / "scenarios" / "reach.py"


def test_a_sweep_in_which_every_run_failed_exits_non_zero(tmp_path, monkeypatch, capsys):
    def failing(*args, **kwargs):
        raise SandboxError("this run cannot go on")

    monkeypatch.setattr(sweep, "run_scenario", failing)
    status = main(["sweep", str(REACH), "--controllers", "gravity,transparent", "--jobs", "1", "--duration", "0.1",
                   "--out", str(tmp_path / "s")])
    out = capsys.readouterr().out
    assert status == 1
    assert "2 of 2 runs failed" in out and "every run failed" in out and "this run cannot go on" in out


def test_a_sweep_with_a_run_that_ran_exits_zero(tmp_path, monkeypatch, capsys):
    real = sweep.run_scenario

    def failing_one(scenario, controller, *args, **kwargs):
        if controller == "transparent":
            raise SandboxError("this run cannot go on")
        return real(scenario, controller, *args, **kwargs)

    monkeypatch.setattr(sweep, "run_scenario", failing_one)
    status = main(["sweep", str(REACH), "--controllers", "gravity,transparent", "--jobs", "1", "--duration", "0.1",
                   "--out", str(tmp_path / "s")])
    assert status == 0
    assert "1 of 2 runs failed" in capsys.readouterr().out


def test_a_worker_whose_sweep_is_killed_stops_and_marks_its_run_interrupted(tmp_path):
    env = dict(os.environ, PYTHONPATH=str(REPO) + os.pathsep + os.environ.get("PYTHONPATH", ""))
    parent = subprocess.Popen([sys.executable, "-m", "sim.cli", "sweep", str(REACH), "--controllers",
                               "gravity,transparent", "--jobs", "2", "--duration", "120", "--out", "s"],
                              cwd=tmp_path, env=env, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    out = tmp_path / "s"
    try:
        t0 = time.monotonic()
        while len(list(out.glob("*/*/seed*/log/chunk_000000.parquet"))) < 2:  # both processes are running
            assert parent.poll() is None, parent.stderr.read()
            assert time.monotonic() - t0 < 120
            time.sleep(0.01)
        workers = psutil.Process(parent.pid).children(recursive=True)
        assert workers
    finally:
        parent.kill()  # SIGKILL: the sweep's process can do nothing
        parent.wait()
    t0 = time.monotonic()
    while any(w.is_running() and w.status() != psutil.STATUS_ZOMBIE for w in workers):
        assert time.monotonic() - t0 < 3.0, "a sweep worker outlived its sweep"
        time.sleep(0.05)
    statuses = sorted(json.loads(p.read_text(encoding="utf-8"))["status"]
                      for p in out.glob("*/*/seed*/meta.json"))
    assert statuses == ["interrupted", "running"]  # the worker's run, and the killed process's
