"""Resuming an interrupted sweep: the finished runs are kept, the rest run, and the tables are those of an
uninterrupted sweep.

Mechanism checks (bookkeeping, no outside source applies): the reference is the same sweep run without
interruption, whose numbers are bit-identical per seed.
"""

from __future__ import annotations

import csv
import json

import pytest
from _scenario_files import write_scenario

from sim.analysis.metrics import is_timing_key
from sim.cli import main
from sim.experiments.sweep import PLAN_FILE, SweepError, run_sweep


@pytest.fixture(scope="module")
def short(tmp_path_factory):
    d = tmp_path_factory.mktemp("resume")
    a = write_scenario(d / "lift.py", duration_s="0.2", controllers='("gravity", "transparent", "zero")')
    b = write_scenario(d / "other.py", duration_s="0.15", seed="3", controllers='("gravity", "zero")')
    return a, b


def _untimed(path):
    def timed(k: str) -> bool:
        return k == "wall_time_s" or is_timing_key(k.removesuffix("_mean").removesuffix("_std"))

    return [{k: v for k, v in r.items() if not timed(k)} for r in csv.DictReader(path.open())]


class _StopError(Exception):
    """Stands for a Ctrl-C after some runs (raised from on_result, as an interrupt would arrive)."""


def _interrupted(args, out, after: int, **kwargs) -> list[str]:
    seen = []

    def stop(result):
        seen.append(result.case.label)
        if len(seen) == after:
            raise _StopError

    with pytest.raises(_StopError):
        run_sweep(*args, out_dir=out, on_result=stop, **kwargs)
    return seen


def test_a_resumed_sweep_keeps_the_finished_runs_and_ends_as_an_uninterrupted_one(short, tmp_path):
    a, b = short
    args = ([a, b], None, ["m50", "f5"], 1)
    whole = run_sweep(*args, out_dir=tmp_path / "whole", jobs=1)
    first = _interrupted(args, tmp_path / "cut", 3, jobs=1)
    assert json.loads((tmp_path / "cut" / PLAN_FILE).read_text())["cases"][0][:2] == ["lift/gravity/m50/seed0",
                                                                                     "lift.py"]
    # an unfinished run folder (a run cut short) is run again from the start
    partial = tmp_path / "cut" / "lift" / "transparent" / "f5" / "seed0"
    partial.mkdir(parents=True)
    (partial / "meta.json").write_text("{}")
    ran = []
    resumed = run_sweep(*args, out_dir=tmp_path / "cut", jobs=2, resume=True, on_result=lambda r: ran.append(
        r.case.label))
    assert not set(ran) & set(first) and len(ran) + len(first) == len(whole.results) == 10
    assert [r.case.label for r in resumed.results] == [r.case.label for r in whole.results]
    assert not resumed.failed
    for table in ("runs.csv", "summary.csv", "lift/summary.csv", "other/runs.csv"):
        assert _untimed(tmp_path / "cut" / table) == _untimed(tmp_path / "whole" / table)
    assert (partial / "report.md").is_file()
    # a finished sweep resumed again runs nothing and writes the same tables
    again = []
    run_sweep(*args, out_dir=tmp_path / "cut", jobs=2, resume=True, on_result=lambda r: again.append(r))
    assert again == [] and _untimed(tmp_path / "cut" / "summary.csv") == _untimed(tmp_path / "whole" / "summary.csv")


def test_a_sweep_resumes_only_with_its_own_plan(short, tmp_path):
    a, b = short
    out = tmp_path / "s"
    _interrupted((a, ["gravity", "zero"], ["m50"], 2), out, 1, jobs=1)
    with pytest.raises(SweepError, match="planned with other runs .*this call adds transparent/m50/seed0"):
        run_sweep(a, ["gravity", "zero", "transparent"], ["m50"], 2, out_dir=out, resume=True)
    with pytest.raises(SweepError, match="planned with other runs .*leaves out gravity/m50/seed1"):
        run_sweep(a, ["gravity", "zero"], ["m50"], 1, out_dir=out, resume=True)
    with pytest.raises(SweepError, match="nothing to resume"):
        run_sweep(a, ["gravity"], ["m50"], 1, out_dir=tmp_path / "never", resume=True)
    with pytest.raises(SweepError, match="already holds something; choose another \\(or resume"):
        run_sweep(a, ["gravity", "zero"], ["m50"], 2, out_dir=out)
    edited = tmp_path / "lift.py"
    edited.write_text(a.read_text().replace("duration_s=0.2", "duration_s=0.25"))
    moved = tmp_path / "t"
    _interrupted((edited, ["gravity", "zero"], ["m50"], 1), moved, 1, jobs=1)
    edited.write_text(a.read_text())
    with pytest.raises(SweepError, match="scenario file lift.py changed since the sweep"):
        run_sweep(edited, ["gravity", "zero"], ["m50"], 1, out_dir=moved, resume=True)
    plan = json.loads((out / PLAN_FILE).read_text())
    plan["environment"]["numpy"] = "0.0"
    (out / PLAN_FILE).write_text(json.dumps(plan))
    with pytest.raises(SweepError, match=r"software changed .*numpy: '0.0'"):
        run_sweep(a, ["gravity", "zero"], ["m50"], 2, out_dir=out, resume=True)


def test_the_sweep_command_resumes_and_needs_the_folder(short, tmp_path, capsys):
    a, _ = short
    out = tmp_path / "s"
    _interrupted((a, ["gravity", "zero"], ["m50"], 1), out, 1, jobs=1)
    with pytest.raises(SystemExit):
        main(["sweep", str(a), "--resume"])
    assert "--resume needs the folder" in capsys.readouterr().err
    assert main(["sweep", str(a), "--controllers", "gravity,zero", "--jobs", "1", "--out", str(out),
                 "--resume"]) == 0
    assert "is better than" in capsys.readouterr().out
    assert [r["status"] for r in csv.DictReader((out / "runs.csv").open())] == ["ok", "ok"]
