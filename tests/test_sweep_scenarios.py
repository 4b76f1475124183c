"""A sweep over several scenario files: the same runs as one sweep per file, one folder per file, tables across.

Mechanism checks (no outside source applies to the bookkeeping): a run's numbers are those of the same
run swept on its own, to the bit; the pooled means and standard deviations are checked against numpy's.
"""

from __future__ import annotations

import csv
import json

import numpy as np
import pytest
from _scenario_files import write_scenario

from sim.analysis.metrics import flat_metrics, is_timing_key
from sim.cli import main
from sim.experiments.sweep import SweepError, run_sweep


@pytest.fixture(scope="module")
def two(tmp_path_factory):
    """Two small scenario files: different motions, durations, seeds and controller lists."""
    d = tmp_path_factory.mktemp("two")
    a = write_scenario(d / "lift.py", name='"lift"', duration_s="0.25",
                       controllers='("gravity", "transparent", "zero")')
    b = write_scenario(d / "sweep_out.py", name='"outward"', duration_s="0.2", seed="7",
                       intent="JointIntent(start_rad=deg(20, 15, 0, 70, 0, 0, 0), start_hold_s=0.02,"
                              " vias=(Via(deg(20, 40, 10, 70, 0, 0, 0), move_s=0.4),))",
                       controllers='("transparent", "gravity")')
    return a, b


def _numbers(results):
    """Every run's non-timing scalar metrics, keyed by controller/subject/seed."""
    return {(r.case.controller, r.case.subject, r.case.seed): {k: v for k, v in flat_metrics(r.metrics).items()
                                                               if not is_timing_key(k)} for r in results}


def _untimed(rows):
    """CSV rows without the wall-clock columns (the only figures that differ between two sweeps)."""
    def timed(k: str) -> bool:
        return k == "wall_time_s" or is_timing_key(k.removesuffix("_mean").removesuffix("_std"))

    return [{k: v for k, v in r.items() if not timed(k)} for r in rows]


def test_several_scenarios_give_each_the_runs_and_folder_of_its_own_sweep(two, tmp_path):
    a, b = two
    both = run_sweep([a, b], ["gravity", "transparent"], ["f5", "m95"], 2, out_dir=tmp_path / "both", jobs=2)
    alone = {p.stem: run_sweep(p, ["gravity", "transparent"], ["f5", "m95"], 2, out_dir=tmp_path / p.stem, jobs=1)
             for p in (a, b)}
    assert not both.failed and len(both.results) == 16
    # in the order of the combinations, scenario by scenario; each scenario from its own seed
    assert [r.case.scenario for r in both.results] == ["lift"] * 8 + ["sweep_out"] * 8
    assert {r.case.seed for r in both.results if r.case.scenario == "sweep_out"} == {7, 8}
    assert both.results[8].case.label == "sweep_out/gravity/f5/seed7"
    for name, single in alone.items():
        mine = [r for r in both.results if r.case.scenario == name]
        assert _numbers(mine) == _numbers(single.results)  # the same runs, to the bit
        # the scenario's folder is the folder of its own sweep: same tables (timing aside), same layout
        for table in ("runs.csv", "summary.csv"):
            got = list(csv.DictReader((tmp_path / "both" / name / table).open()))
            want = list(csv.DictReader((tmp_path / name / table).open()))
            assert _untimed(got) == _untimed(want)
        assert (tmp_path / "both" / name / "gravity" / "m95" / f"seed{mine[-1].case.seed}" / "metrics.json").is_file()
        report = (tmp_path / "both" / name / "report.md").read_text()
        assert "one of the 2 scenarios of the sweep" in report and "IEC 80601-2-78" in report
        doc = json.loads((tmp_path / "both" / name / "sweep.json").read_text())
        assert doc["runs"][0]["folder"] == f"gravity/f5/seed{mine[0].case.seed}"


def test_the_tables_across_scenarios_carry_the_scenario_and_the_pooled_statistics(two, tmp_path):
    a, b = two
    result = run_sweep([a, b], None, ["m50"], 2, out_dir=tmp_path / "s", jobs=1)
    # controllers=None: each scenario's own list
    assert [(r.case.scenario, r.case.controller) for r in result.results][::2] == [
        ("lift", "gravity"), ("lift", "transparent"), ("lift", "zero"), ("sweep_out", "transparent"),
        ("sweep_out", "gravity")]
    runs = list(csv.DictReader((tmp_path / "s" / "runs.csv").open()))
    assert list(runs[0])[:2] == ["scenario", "controller"] and runs[0]["folder"] == "lift/gravity/m50/seed0"
    summary = list(csv.DictReader((tmp_path / "s" / "summary.csv").open()))
    assert [r["scenario"] for r in summary if r["subject"] == "all"] == ["lift"] * 3 + ["sweep_out"] * 2
    row = next(r for r in summary if r["scenario"] == "sweep_out" and r["controller"] == "gravity"
               and r["subject"] == "all")
    values = [r.metrics["interaction_force_rms_N"] for r in result.results
              if r.case.scenario == "sweep_out" and r.case.controller == "gravity"]
    assert float(row["interaction_force_rms_N_mean"]) == pytest.approx(np.mean(values), rel=1e-12)
    assert float(row["interaction_force_rms_N_std"]) == pytest.approx(np.std(values, ddof=1), rel=1e-9)
    assert result.summary[0]["scenario"] == "lift"
    report = (tmp_path / "s" / "report.md").read_text()
    assert "# Sweep report: 2 scenarios" in report and "IEC 80601-2-78" in report
    assert "| scenario | ticks | gravity | transparent | zero |" in report
    sweep_out_line = next(line for line in report.splitlines() if line.startswith("| sweep_out |"))
    assert sweep_out_line.endswith("| — |")  # zero is not one of that scenario's controllers
    assert "[lift/report.md](lift/report.md)" in report
    assert "![transparency_across_scenarios](plots/transparency_across_scenarios.png)" in report
    assert (tmp_path / "s" / "plots" / "transparency_across_scenarios.png").stat().st_size > 1000
    doc = json.loads((tmp_path / "s" / "sweep.json").read_text())
    assert doc["settings"]["scenarios"] == [str(a), str(b)] and len(doc["runs"]) == 10
    assert doc["runs"][-1]["scenario"] == "sweep_out"


def test_a_scenario_missing_a_controller_or_two_files_of_one_name_stop_the_sweep_before_it_runs(two, tmp_path):
    a, b = two
    with pytest.raises(Exception, match=r"'outward' \(sweep_out.py\) supports the controllers transparent, "
                                        r"gravity; got 'zero'"):
        run_sweep([a, b], ["zero"], ["m50"], 1, out_dir=tmp_path / "x")
    twin = tmp_path / "elsewhere"
    twin.mkdir()
    twin = write_scenario(twin / "lift.py", duration_s="0.2")
    with pytest.raises(SweepError, match="two scenario files share the name 'lift'"):
        run_sweep([a, twin], ["gravity"], ["m50"], 1, out_dir=tmp_path / "y")
    with pytest.raises(SweepError, match="at least one scenario"):
        run_sweep([], ["gravity"], ["m50"], 1, out_dir=tmp_path / "z")
    (tmp_path / "empty").mkdir()
    with pytest.raises(SweepError, match="no scenario file"):
        run_sweep(tmp_path / "empty", ["gravity"], ["m50"], 1, out_dir=tmp_path / "w")
    assert not any((tmp_path / n).exists() for n in "xyzw")
    # the same file twice is one scenario: a one-scenario sweep
    once = run_sweep([a, a], ["gravity"], ["m50"], 1, out_dir=tmp_path / "once", jobs=1)
    assert [r.case.label for r in once.results] == ["gravity/m50/seed0"]
    assert (tmp_path / "once" / "gravity" / "m50" / "seed0").is_dir()


def test_the_sweep_command_takes_several_scenarios(two, tmp_path, capsys, monkeypatch):
    a, b = two
    out = tmp_path / "cli"
    assert main(["sweep", str(a), str(b), "--controller", "gravity", "--controller", "transparent", "--jobs", "1",
                 "--out", str(out)]) == 0
    printed = capsys.readouterr().out
    header = next(line for line in printed.splitlines() if "controller" in line)
    assert header.split()[:3] == ["scenario", "controller", "subject"]
    assert any(line.split()[:3] == ["sweep_out", "gravity", "all"] for line in printed.splitlines())
    assert not any(line.split()[:3] == ["sweep_out", "gravity", "m50"] for line in printed.splitlines())
    assert (out / "report.md").is_file() and (out / "lift" / "report.md").is_file()
    # the default folder names the number of scenarios
    monkeypatch.chdir(tmp_path)
    seen = {}

    def fake_run_sweep(paths, controllers, subjects, seeds, **kwargs):
        seen.update(paths=paths, controllers=controllers, out=kwargs["out_dir"])
        raise KeyboardInterrupt

    monkeypatch.setattr("sim.experiments.sweep.run_sweep", fake_run_sweep)
    assert main(["sweep", str(a), str(b)]) == 1
    assert seen["paths"] == [str(a), str(b)] and seen["controllers"] is None
    assert str(seen["out"]) == "runs/sweep-2-scenarios"
    # a folder stands for its scenario files, a package's __init__.py left out
    (a.parent / "__init__.py").write_text('"""Not a scenario."""\n')
    assert main(["sweep", str(a.parent)]) == 1
    assert seen["paths"] == [str(a.parent)] and str(seen["out"]) == "runs/sweep-2-scenarios"
    from sim.experiments.sweep import scenario_files

    assert scenario_files([a.parent]) == [a, b]


def test_the_table_across_scenarios_marks_every_controller_level_at_the_top(tmp_path):
    # mechanism check on made-up summary rows: a tie at the top is bold twice, all equal is bold nowhere
    from sim.experiments.sweep import SweepResult
    from sim.output.report import write_sweeps_report

    def rows(values):
        return tuple({"controller": c, "subject": "all", "n_ok": 2, "n_failed": 0,
                      "interaction_force_rms_N_mean": v, "interaction_force_rms_N_std": 0.1}
                     for c, v in values.items())

    parts = [("tie", SweepResult(tmp_path / "tie", (), rows({"a": 2.0, "b": 2.0, "c": 3.0}))),
             ("same", SweepResult(tmp_path / "same", (), rows({"a": 1.0, "b": 1.0, "c": 1.0})))]
    summary = tuple({"scenario": name, **r} for name, part in parts for r in part.summary)
    md = write_sweeps_report(SweepResult(tmp_path, (), summary, 1.0),
                             {"controllers": ["a", "b", "c"], "subjects": ["m50"], "seeds": [0], "executor": "test"},
                             parts).read_text()
    # (means to the last digit of their spread, the spread to 2 significant digits: sim.output.report.fmt_stat)
    assert "| tie | whole run | **2.00 ± 0.10** | **2.00 ± 0.10** | 3.00 ± 0.10 |" in md
    assert "| same | whole run | 1.00 ± 0.10 | 1.00 ± 0.10 | 1.00 ± 0.10 |" in md
    # the scenario where all three are level says so (a tie is a verdict, not the absence of one)
    assert ("- `a`, `b` and `c` are level on interaction force, RMS: 1.00 ± 0.10 N, 1.00 ± 0.10 N and "
            "1.00 ± 0.10 N") in md
    assert "No verdict" not in md


def test_a_scenario_whose_every_run_fails_gets_its_folder_and_the_others_complete(two, tmp_path):
    a, _ = two
    bad = write_scenario(tmp_path / "misfit.py", duration_s="0.2")
    bad.write_text(bad.read_text() + "\n\ndef for_subject(subject):\n    raise ValueError('no cuff fits this arm')\n")
    result = run_sweep([a, bad], ["gravity"], ["m50"], 1, out_dir=tmp_path / "out", jobs=2)
    assert [r.ok for r in result.results] == [True, False]
    assert "no cuff fits this arm" in (tmp_path / "out" / "misfit" / "report.md").read_text()
    report = (tmp_path / "out" / "report.md").read_text()
    assert "| misfit | whole run | every run failed |" in report and "## Failed runs" in report
    assert "- `misfit/gravity/m50/seed0`: " in report
    assert (tmp_path / "out" / "lift" / "gravity" / "m50" / "seed0" / "metrics.json").is_file()
