"""``exosandbox compare`` and ``exosandbox sweep`` on a tiny scenario: tables, reports, executors, failures."""

from __future__ import annotations

import csv
import json
from pathlib import Path

import numpy as np
import pytest
from _scenario_files import write_scenario

from sim.analysis.metrics import flat_metrics, is_timing_key
from sim.cli import main
from sim.experiments.sweep import SweepError, run_sweep


@pytest.fixture(scope="module")
def tiny(tmp_path_factory):
    d = tmp_path_factory.mktemp("tiny")
    return write_scenario(d / "tiny.py", duration_s="0.25", controllers='("gravity", "transparent", "zero")')


def _numbers(result):
    """Every run's non-timing scalar metrics, keyed by controller/subject/seed."""
    return {r.case.label: {k: v for k, v in flat_metrics(r.metrics).items() if not is_timing_key(k)}
            for r in result.results}


def test_compare_scenario_marks_the_better_value_and_writes_markdown_csv_and_plots(tiny, tmp_path, capsys):
    out = tmp_path / "cmp"
    assert main(["compare", str(tiny), "--controller", "gravity", "--controller", "zero", "--out", str(out)]) == 0
    printed = capsys.readouterr().out
    assert "interaction_force_rms_N" in printed and "(* the better value)" in printed
    rows = {r["key"]: r for r in csv.DictReader((out / "compare.csv").open())}
    f = rows["interaction_force_rms_N"]
    # gravity compensation carries the robot's weight: the wearer feels less than with an unpowered robot
    assert float(f["gravity"]) < float(f["zero"]) and f["best"] == "gravity"
    md = (out / "compare.md").read_text()
    assert "| interaction_force_rms_N | N | **" in md and "IEC 80601-2-78" in md
    for png in ("interaction_force", "felt_mass", "solve_time"):
        assert (out / "plots" / f"{png}.png").stat().st_size > 1000
    # the same two run folders compare again from disk, with the same table
    out2 = tmp_path / "cmp2"
    assert main(["compare", str(out / "gravity"), str(out / "zero"), "--out", str(out2)]) == 0
    assert (out2 / "compare.csv").read_text() == (out / "compare.csv").read_text()


def test_compare_errors_name_the_culprit(tiny, tmp_path, capsys):
    assert main(["compare", str(tiny), "--controller", "walls"]) == 1
    assert "supports the controllers gravity, transparent, zero; got 'walls'" in capsys.readouterr().err
    assert main(["compare", str(tmp_path / "nowhere"), str(tmp_path / "nothing")]) == 1
    assert "no run folder" in capsys.readouterr().err
    with pytest.raises(SystemExit):
        main(["compare", str(tmp_path)])
    assert "at least two run folders" in capsys.readouterr().err


def test_sweep_same_numbers_with_one_or_two_jobs_and_a_table_per_subject(tiny, tmp_path):
    args = (tiny, ["gravity", "transparent"], ["f5", "m95"], 2)
    a = run_sweep(*args, out_dir=tmp_path / "j1", jobs=1)
    b = run_sweep(*args, out_dir=tmp_path / "j2", jobs=2)
    c = run_sweep(*args, out_dir=tmp_path / "j3", jobs=3)  # two workers, each driven by its own thread
    assert not a.failed and not b.failed and not c.failed and len(a.results) == len(c.results) == 8
    assert _numbers(a) == _numbers(b) == _numbers(c)
    summary = list(csv.DictReader((tmp_path / "j2" / "summary.csv").open()))
    assert {(r["controller"], r["subject"]) for r in summary} == {
        (c, s) for c in ("gravity", "transparent") for s in ("all", "f5", "m95")}
    pooled = next(r for r in summary if r["controller"] == "transparent" and r["subject"] == "all")
    values = [r.metrics["interaction_force_rms_N"] for r in b.results if r.case.controller == "transparent"]
    import numpy as np

    assert float(pooled["interaction_force_rms_N_mean"]) == pytest.approx(np.mean(values))
    assert float(pooled["interaction_force_rms_N_std"]) == pytest.approx(np.std(values, ddof=1))
    report = (tmp_path / "j2" / "report.md").read_text()
    assert "Which is more transparent" in report and "IEC 80601-2-78" in report
    assert (tmp_path / "j2" / "plots" / "interaction_force_rms_N.png").is_file()
    doc = json.loads((tmp_path / "j2" / "sweep.json").read_text())
    assert len(doc["runs"]) == 8 and doc["runs"][0]["folder"] == "gravity/f5/seed0"


def test_a_sweeps_run_reports_draw_their_figures_only_when_asked(tiny, tmp_path):
    # a run's figures take longer to draw than a short run: a sweep leaves them out of each run's report unless
    # run_figures, and says how to draw them; the controller section and the metrics are there either way
    plain = run_sweep(tiny, ["transparent"], ["m50"], 1, out_dir=tmp_path / "plain", jobs=1)
    drawn = run_sweep(tiny, ["transparent"], ["m50"], 1, out_dir=tmp_path / "drawn", jobs=1, run_figures=True)
    assert _numbers(plain) == _numbers(drawn)
    run_plain, run_drawn = (Path(r.results[0].case.folder) for r in (plain, drawn))
    md = (run_plain / "report.md").read_text()
    assert "## Controller" in md and "## Metrics" in md and "--run-figures" in md
    assert not (run_plain / "plots" / "interaction_force.png").exists()
    assert "--run-figures" not in (run_drawn / "report.md").read_text()
    for png in ("interaction_force", "joint_angles", "hand_path", "joint_torque"):
        assert (run_drawn / "plots" / f"{png}.png").stat().st_size > 1000


def test_dask_local_cluster_gives_the_same_numbers_as_the_local_pool(tiny, tmp_path):
    distributed = pytest.importorskip("dask.distributed")  # the test extra installs it
    args = (tiny, ["transparent"], ["m50"], 2)
    local = run_sweep(*args, out_dir=tmp_path / "local", jobs=2)
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None) as lc:
        remote = run_sweep(*args, out_dir=tmp_path / "dask", dask_address=lc.scheduler_address)
    assert not remote.failed
    assert _numbers(local) == _numbers(remote)


def test_a_failing_run_is_reported_and_the_others_complete(tmp_path):
    path = write_scenario(tmp_path / "picky.py", duration_s="0.2")
    path.write_text(path.read_text() + "\n\ndef for_subject(subject):\n"
                    "    if subject == 'f5':\n"
                    "        raise ValueError('no cuff fits this arm')\n"
                    "    import dataclasses\n"
                    "    return dataclasses.replace(SCENARIO, subject=subject)\n")
    result = run_sweep(path, ["gravity"], ["f5", "m50"], 1, out_dir=tmp_path / "out", jobs=2)
    assert [r.ok for r in result.results] == [False, True]
    assert "no cuff fits this arm" in result.results[0].error
    rows = list(csv.DictReader((tmp_path / "out" / "runs.csv").open()))
    assert rows[0]["status"] == "failed" and "no cuff fits this arm" in rows[0]["error"]
    assert rows[1]["status"] == "ok" and float(rows[1]["interaction_force_rms_N"]) > 0
    assert "## Failed runs" in (tmp_path / "out" / "report.md").read_text()


def test_sweep_options_are_checked_before_anything_runs(tiny, tmp_path, capsys):
    with pytest.raises(SweepError, match="seeds must be >= 1"):
        run_sweep(tiny, ["gravity"], ["m50"], 0, out_dir=tmp_path / "a")
    assert main(["sweep", str(tiny), "--controllers", "gravity,walls", "--out", str(tmp_path / "b")]) == 1
    assert "got 'walls'" in capsys.readouterr().err
    assert main(["sweep", str(tiny), "--subjects", "m50,x7", "--out", str(tmp_path / "c")]) == 1
    assert "unknown subject 'x7'" in capsys.readouterr().err
    (tmp_path / "d").mkdir()
    (tmp_path / "d" / "keep.txt").write_text("data")
    assert main(["sweep", str(tiny), "--out", str(tmp_path / "d")]) == 1
    assert "already holds something" in capsys.readouterr().err
    assert (tmp_path / "d" / "keep.txt").read_text() == "data"
    assert not (tmp_path / "b").exists() and not (tmp_path / "c").exists()


def test_sweep_cli_prints_the_table_and_the_verdict(tiny, tmp_path, capsys):
    out = tmp_path / "s"
    assert main(["sweep", str(tiny), "--controllers", "gravity,transparent", "--subjects", "m50", "--seeds", "1",
                 "--jobs", "1", "--out", str(out)]) == 0
    printed = capsys.readouterr().out
    assert "interaction_force_rms_N" in printed and "is better than" in printed
    assert (out / "summary.md").is_file() and (out / "runs.md").is_file()


def test_sweep_cli_takes_repeated_controller_and_subject_options_and_no_abbreviation(tiny, tmp_path, monkeypatch,
                                                                                      capsys):
    # what the command hands to run_sweep (a check of the parsing; the sweep itself is tested above)
    seen = {}

    def fake_run_sweep(path, controllers, subjects, seeds, **kwargs):
        seen.update(controllers=controllers, subjects=subjects, seeds=seeds)
        raise KeyboardInterrupt  # stop here: the command reports where the finished runs are

    monkeypatch.setattr("sim.experiments.sweep.run_sweep", fake_run_sweep)
    args = ["sweep", str(tiny), "--out", str(tmp_path / "s")]
    assert main(args + ["--controller", "gravity", "--controller", "transparent", "--subject", "f5",
                        "--subjects", "m50,m95", "--seeds", "2"]) == 1
    assert seen == {"controllers": ["gravity", "transparent"], "subjects": ["m50", "m95", "f5"], "seeds": 2}
    assert main(args + ["--controllers", "transparent", "--controller", "gravity"]) == 1
    assert seen["controllers"] == ["transparent", "gravity"] and seen["subjects"] == ["m50"]
    capsys.readouterr()
    # an abbreviation is refused, not read as the longer option (--seed is not --seeds)
    with pytest.raises(SystemExit) as e:
        main(args + ["--seed", "3"])
    assert e.value.code == 2 and "unrecognized arguments: --seed 3" in capsys.readouterr().err


def test_two_jobs_run_cases_in_a_worker_and_in_this_process(tiny, tmp_path, monkeypatch):
    # jobs=2: one worker process (handed the first case at once) and this process, which takes the next case
    # whenever it is free instead of waiting while the worker starts
    import os

    import _sweep_probe

    monkeypatch.setattr("sim.experiments.sweep.run_case", _sweep_probe.run_case_noting_pid)
    result = run_sweep(tiny, ["gravity"], ["f5"], 3, out_dir=tmp_path / "out", jobs=2)
    assert not result.failed and len(result.results) == 3
    pids = [_sweep_probe.pid_of(r.case) for r in result.results]
    assert os.getpid() in pids and len(set(pids)) == 2


def test_a_worker_that_dies_fails_its_case_and_the_others_complete(tiny, tmp_path, monkeypatch):
    # a worker process that stops mid-case (here os._exit, as a crash in compiled code would) fails that case,
    # named in the table; this process runs the cases left, and the sweep writes its tables and report
    import _sweep_probe

    monkeypatch.setattr("sim.experiments.sweep.run_case", _sweep_probe.run_case_exiting_in_a_worker)
    result = run_sweep(tiny, ["gravity"], ["f5"], 3, out_dir=tmp_path / "out", jobs=2)
    failed = [r for r in result.results if not r.ok]
    assert len(failed) == 1 and len(result.results) == 3
    assert "WorkerExit" in failed[0].error and "exit code 3" in failed[0].error
    rows = list(csv.DictReader((tmp_path / "out" / "runs.csv").open()))
    assert sorted(r["status"] for r in rows) == ["failed", "ok", "ok"]
    assert "## Failed runs" in (tmp_path / "out" / "report.md").read_text()


def test_a_worker_reuses_only_the_baselines_it_made(tiny, tmp_path, monkeypatch):
    # a forked worker starts as a copy of this process: it must not know the baselines this process made
    # before the sweep (reusable_baseline trusts only a baseline its own process simulated)
    import os

    import _sweep_probe

    from sim.experiments.run import Batch

    batch = Batch()  # this process's, with a baseline made before the sweep
    batch.share(_sweep_probe.MARKER_KEY, "/nowhere")
    batch.record(_sweep_probe.MARKER_PATH)
    monkeypatch.setattr("sim.experiments.sweep.run_case", _sweep_probe.run_case_noting_registries)
    result = run_sweep(tiny, ["gravity"], ["f5"], 3, out_dir=tmp_path / "out", jobs=2, batch=batch)
    assert not result.failed
    seen = [_sweep_probe.registries_of(r.case) for r in result.results]
    workers = [s for s in seen if s["pid"] != os.getpid()]
    ours = [s for s in seen if s["pid"] == os.getpid()]
    assert workers and ours
    assert not any(s["key"] or s["made"] for s in workers)
    assert all(s["key"] and s["made"] for s in ours)


def test_a_free_process_takes_a_case_whose_baseline_it_has_then_an_untouched_wearer_and_seed():
    from sim.experiments.sweep import SweepCase, _CaseQueue

    cases = [SweepCase("s.py", c, "m50", seed, f"{c}/{seed}", 1.0) for c in ("a", "b") for seed in (0, 1, 2)]
    q, p1, p2 = _CaseQueue(cases), set(), set()
    order = [(who, q.take(mine)) for who, mine in (("p1", p1), ("p2", p2), ("p2", p2), ("p1", p1), ("p1", p1),
                                                   ("p2", p2), ("p2", p2))]
    assert [(who, c.controller, c.seed) for who, c in order[:6]] == [
        ("p1", "a", 0), ("p2", "a", 1),  # distinct wearer and seed each
        ("p2", "b", 1), ("p1", "b", 0),  # the other controller of the baseline each already has
        ("p1", "a", 2), ("p2", "b", 2)]  # the last seed: p2 has none of its own left, so takes what is left
    assert order[6][1] is None


# -- the human-alone baseline, simulated once and copied -------------------------------------------
def _baseline_files(folder):
    """Every file of a baseline folder (bytes), but the wall-clock ones."""
    base = folder / "human_alone"
    return {p.relative_to(base): p.read_bytes() for p in sorted(base.rglob("*"))
            if p.is_file() and p.name not in ("timing.npz", "metrics.json")}


def _simulated_baselines(monkeypatch):
    """A list that grows by one folder per human-alone run simulated from now on."""
    import importlib

    module = importlib.import_module("sim.experiments.run")  # run_scenario and the simulate it calls
    made, simulate = [], module.simulate

    def counting(scenario, controller, folder, **kw):
        if kw.get("mode") == "human_alone":
            made.append(folder)
        return simulate(scenario, controller, folder, **kw)

    monkeypatch.setattr(module, "simulate", counting)
    return made


def test_a_copied_baseline_is_the_one_the_run_would_simulate(tiny, tmp_path, monkeypatch):
    # reference: the baseline simulated for the same controller, scenario and seed without reuse; a
    # baseline made for another seed, or not by this process, is simulated again
    from sim.experiments.run import Batch, reusable_baseline, run_scenario
    from sim.loop.scenario import load_scenario

    sc = load_scenario(tiny)
    made = _simulated_baselines(monkeypatch)
    batch = Batch()
    first = run_scenario(sc, "gravity", tmp_path / "gravity", seed=4, report=False, batch=batch)
    copied = run_scenario(sc, "transparent", tmp_path / "transparent", seed=4, report=False,
                          baseline_from=first.folder / "human_alone", batch=batch)
    assert len(made) == 1
    fresh = run_scenario(sc, "transparent", tmp_path / "fresh", seed=4, report=False)
    assert len(made) == 2
    assert _baseline_files(copied.folder) == _baseline_files(fresh.folder)
    numbers = [{k: v for k, v in flat_metrics(r.metrics).items() if not is_timing_key(k)} for r in (copied, fresh)]
    assert numbers[0] == numbers[1]
    run_scenario(sc, "transparent", tmp_path / "seed5", seed=5, report=False,
                 baseline_from=first.folder / "human_alone", batch=batch)
    assert len(made) == 3 and not reusable_baseline(first.folder / "human_alone", sc, seed=5, batch=batch)
    import shutil

    shutil.copytree(first.folder / "human_alone", tmp_path / "elsewhere")  # the same files, not made here
    assert reusable_baseline(first.folder / "human_alone", sc, seed=4, batch=batch)
    assert not reusable_baseline(tmp_path / "elsewhere", sc, seed=4, batch=batch)
    assert not reusable_baseline(tmp_path / "nowhere", sc, seed=4, batch=batch)
    # another batch (another process's, or none) did not make it: it simulates its own
    assert not reusable_baseline(first.folder / "human_alone", sc, seed=4, batch=Batch())
    assert not reusable_baseline(first.folder / "human_alone", sc, seed=4)


def test_a_task_object_in_a_variant_is_recorded_by_class_and_attributes_and_leaves_the_baseline_shared(
        tiny, tmp_path, monkeypatch):
    # a check of the run record (meta.json) and of baseline reuse (the copy itself is checked above against
    # the simulated baseline): a human-alone run does not depend on the variants, so a scenario whose variants
    # differ (here: one more) still shares it
    import dataclasses

    from sim.experiments.bench import PythonHandCeiling
    from sim.experiments.run import Batch, run_scenario
    from sim.loop.scenario import load_scenario

    sc = load_scenario(tiny)
    sc = dataclasses.replace(sc, variants={"ceiling": [[PythonHandCeiling(10.0)], ["transparency"]]},
                             controllers=(*sc.controllers, "ceiling"))
    made = _simulated_baselines(monkeypatch)
    batch = Batch()
    first = run_scenario(sc, "gravity", tmp_path / "gravity", seed=4, report=False, batch=batch)
    more = dataclasses.replace(sc, variants={**sc.variants, "soft": [["transparency"]]},
                               controllers=(*sc.controllers, "soft"))
    run_scenario(more, "ceiling", tmp_path / "ceiling", seed=4, report=False,
                 baseline_from=first.folder / "human_alone", batch=batch)
    assert len(made) == 1
    recorded = json.loads((tmp_path / "ceiling" / "meta.json").read_text(encoding="utf-8"))["parameters"]
    task = recorded["variants"]["ceiling"][0][0]
    assert task["class"] == "sim.experiments.bench.PythonHandCeiling" and task["kind"] == "ineq"
    assert task["attributes"]["z_max"] == 10.0 and task["attributes"]["frame"] == "exo_hand_point"
    assert " at 0x" not in json.dumps(recorded)


def test_compare_and_a_one_job_sweep_simulate_one_baseline_per_wearer_and_seed(tiny, tmp_path, monkeypatch):
    made = _simulated_baselines(monkeypatch)
    out = tmp_path / "cmp"
    assert main(["compare", str(tiny), "--controller", "gravity", "--controller", "zero", "--controller",
                 "transparent", "--out", str(out)]) == 0
    assert len(made) == 1
    for c in ("zero", "transparent"):
        assert _baseline_files(out / c) == _baseline_files(out / "gravity")
    made.clear()
    result = run_sweep(tiny, ["gravity", "transparent"], ["f5", "m95"], 2, out_dir=tmp_path / "sw", jobs=1)
    assert not result.failed and len(result.results) == 8
    assert len(made) == 4  # 2 wearers x 2 seeds


def test_the_summary_of_runs_that_agree_to_the_bit_has_their_value_and_no_spread():
    # 7.827 three times: numpy's rounded sum gives a mean off by one unit in the last place and a standard deviation
    # of 1.1e-15; the summary sums exactly (Python's statistics module), so the spread is 0 and the mean the value
    from sim.experiments.sweep import CaseResult, SweepCase, summarize

    def result(seed, value):
        return CaseResult(SweepCase("s.py", "gravity", "m50", seed, f"r{seed}", None),
                          {"interaction_force_rms_N": value}, None, 1.0)

    same = summarize([result(s, 7.827) for s in range(3)], keys=["interaction_force_rms_N"])
    for row in same:
        assert row["interaction_force_rms_N_mean"] == 7.827 and row["interaction_force_rms_N_std"] == 0.0
    # values that differ: the sample standard deviation (ddof = 1) as numpy computes it (independent reference)
    values = [7.827, 7.9, 8.25]
    row = summarize([result(s, v) for s, v in enumerate(values)], keys=["interaction_force_rms_N"])[0]
    assert row["interaction_force_rms_N_mean"] == pytest.approx(np.mean(values), rel=1e-15)
    assert row["interaction_force_rms_N_std"] == pytest.approx(np.std(values, ddof=1), rel=1e-14)
    assert row["n_ok"] == 3 and row["n_failed"] == 0
