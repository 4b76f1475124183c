"""A scenario's own folder is importable from the scenario file: its module of tasks needs no PYTHONPATH.

Mechanism checks (no outside source applies to import bookkeeping): the task class the scenario
imports from its folder is the one the run records in ``meta.json`` (class name and attributes); two
folders that each hold a ``my_tasks.py`` give each scenario its own module, in this process, in a
sweep's forked workers and in a spawned process; the process's import state is left as it was.
"""

from __future__ import annotations

import json
import multiprocessing
import os
import subprocess
import sys
from pathlib import Path

import pytest

from sim.cli import main
from sim.experiments.sweep import SweepCase, run_case, run_sweep
from sim.loop.scenario import ScenarioError, load_scenario, scenario_folder_importable

REPO = Path(__file__).resolve().parents[1]
DURATION = "0.05"  # s: the runs are only here to show which task module was used

TASKS_MODULE = '''"""The scenario's own tasks."""

from controllers.tasks import JointDamping

TAG = {tag!r}


class SlowDamping(JointDamping):
    """Joint damping with this folder's own time constant."""

    name = "slow_damping"

    def __init__(self):
        super().__init__(time_constant_s={time_constant_s!r})
'''

SCENARIO = '''import math

from my_tasks import TAG, SlowDamping

from sim import JointIntent, Scenario, Via


def deg(*a):
    return tuple(math.radians(x) for x in a)


SCENARIO = Scenario(
    name="own_tasks_" + TAG,
    subject="m50",
    intent=JointIntent(start_rad=deg(15, 10, 0, 80, 0, 0, 0), start_hold_s=0.02,
                       vias=(Via(deg(40, 10, 0, 60, 10, 0, 0), move_s=0.5),)),
    duration_s=0.2,
    controllers=("mine", "gravity"),
    variants={{"mine": [["joint_limits"], [SlowDamping()]]}},
)
'''


def scenario_folder(folder: Path, tag: str, time_constant_s: float, stem: str = "own") -> Path:
    """A folder holding ``my_tasks.py`` and a scenario file ``STEM.py`` that imports it."""
    folder.mkdir(parents=True, exist_ok=True)
    (folder / "my_tasks.py").write_text(TASKS_MODULE.format(tag=tag, time_constant_s=time_constant_s),
                                        encoding="utf-8")
    path = folder / f"{stem}.py"
    path.write_text(SCENARIO.format(), encoding="utf-8")
    return path


def own_task(meta: dict) -> dict:
    """The scenario's own task as meta.json records it (level 1 of the variant 'mine')."""
    return meta["parameters"]["variants"]["mine"][1][0]


def test_the_folder_of_the_scenario_is_importable_and_forgotten_after(tmp_path):
    path = scenario_folder(tmp_path / "a", "a", 0.5)
    assert str(path.parent) not in sys.path
    finders, paths = list(sys.meta_path), list(sys.path)
    scenario = load_scenario(path)
    assert scenario.name == "own_tasks_a"
    task = scenario.variants["mine"][1][0]
    assert type(task).__name__ == "SlowDamping" and task.T == 0.5
    # nothing of the load stays: no module, no finder, no path entry
    assert "my_tasks" not in sys.modules
    assert sys.meta_path == finders and sys.path == paths


def test_two_folders_with_a_module_of_the_same_name_each_get_their_own(tmp_path):
    a = scenario_folder(tmp_path / "a", "a", 0.5)
    b = scenario_folder(tmp_path / "b", "b", 0.7)
    # both orders: a module cache kept from the first load would give the second scenario the first's tasks
    for (x, tx), (y, ty) in (((a, 0.5), (b, 0.7)), ((b, 0.7), (a, 0.5))):
        sx, sy = load_scenario(x), load_scenario(y, subject="f5")
        assert (sx.name, sy.name) == (f"own_tasks_{x.parent.name}", f"own_tasks_{y.parent.name}")
        assert (sx.variants["mine"][1][0].T, sy.variants["mine"][1][0].T) == (tx, ty)


def test_a_module_imported_before_the_load_keeps_its_object(tmp_path):
    """Python's own rule: an imported module is cached; the load neither replaces nor drops it."""
    import json as json_module

    folder = tmp_path / "c"
    folder.mkdir()
    (folder / "json.py").write_text("raise RuntimeError('the folder shadowed an imported module')\n")
    path = folder / "uses_json.py"
    path.write_text("import json\n\nfrom sim import JointIntent, Scenario\n\nSCENARIO = Scenario(name='j', "
                    "subject='m50', intent=JointIntent(start_rad=(0.2, 0, 0, 1.2, 0, 0, 0), vias=()), "
                    "duration_s=json.loads('0.1'), controllers=('zero',))\n", encoding="utf-8")
    assert load_scenario(path).duration_s == 0.1
    assert sys.modules["json"] is json_module


def test_an_error_in_the_module_of_tasks_is_one_line_naming_the_scenario(tmp_path):
    path = scenario_folder(tmp_path / "bad", "bad", 0.5)
    (path.parent / "my_tasks.py").write_text("import numpy\nTAG = undefined_name\n", encoding="utf-8")
    with pytest.raises(ScenarioError, match="undefined_name") as e:
        load_scenario(path)
    assert str(path) in str(e.value) and "\n" not in str(e.value)
    assert "my_tasks" not in sys.modules


def test_the_context_manager_restores_the_import_state_after_an_error(tmp_path):
    (tmp_path / "helper_mod_x.py").write_text("VALUE = 3\n", encoding="utf-8")
    finders = list(sys.meta_path)
    with pytest.raises(RuntimeError, match="inside"), scenario_folder_importable(tmp_path):
        import helper_mod_x

        assert helper_mod_x.VALUE == 3
        raise RuntimeError("an error inside the block")
    assert "helper_mod_x" not in sys.modules and sys.meta_path == finders


def test_run_with_the_scenarios_own_tasks_from_the_cli(tmp_path, capsys):
    path = scenario_folder(tmp_path / "a", "a", 0.5)
    out = tmp_path / "run"
    assert main(["run", str(path), "--controller", "mine", "--duration", DURATION, "--out", str(out)]) == 0
    meta = json.loads((out / "meta.json").read_text())
    assert own_task(meta)["class"] == "my_tasks.SlowDamping"
    assert own_task(meta)["attributes"]["T"] == 0.5
    assert meta["controller"] == "mine"


def test_run_in_a_fresh_process_with_only_the_project_on_the_path(tmp_path):
    """The command in another folder: PYTHONPATH names the project (in CI it is installed), not the scenario."""
    path = scenario_folder(tmp_path / "scenario_dir", "a", 0.5)
    work = tmp_path / "elsewhere"
    work.mkdir()
    env = {k: v for k, v in os.environ.items() if k != "PYTHONPATH"}
    env["PYTHONPATH"] = str(REPO)
    done = subprocess.run([sys.executable, "-m", "sim.cli", "run", str(path), "--controller", "mine",
                           "--duration", DURATION, "--out", "r"], cwd=work, env=env, capture_output=True,
                          text=True, timeout=300)
    assert done.returncode == 0, done.stderr
    assert own_task(json.loads((work / "r" / "meta.json").read_text()))["attributes"]["T"] == 0.5


def test_a_sweep_over_two_folders_with_modules_of_the_same_name(tmp_path):
    """Forked workers (jobs=2 on Linux) load each scenario by its path, with its own folder's module."""
    a = scenario_folder(tmp_path / "a", "a", 0.5, stem="own_a")
    b = scenario_folder(tmp_path / "b", "b", 0.7, stem="own_b")
    result = run_sweep([a, b], ["mine"], ["m50"], 1, out_dir=tmp_path / "sweep", jobs=2, duration_s=0.05)
    assert not result.failed, [r.error for r in result.failed]
    for stem, t in (("own_a", 0.5), ("own_b", 0.7)):
        meta = json.loads((tmp_path / "sweep" / stem / "mine" / "m50" / "seed0" / "meta.json").read_text())
        assert own_task(meta)["attributes"]["T"] == t


def test_a_spawned_worker_loads_each_folders_module(tmp_path):
    """A spawned process (macOS, Windows) starts empty: it imports the module of tasks through load_scenario."""
    a = scenario_folder(tmp_path / "a", "a", 0.5)
    b = scenario_folder(tmp_path / "b", "b", 0.7)
    cases = [SweepCase(str(p), "mine", "m50", 0, str(tmp_path / f"run_{tag}"), 0.05) for tag, p in (("a", a), ("b", b))]
    with multiprocessing.get_context("spawn").Pool(1) as pool:
        results = pool.map(run_case, cases)
    assert all(r.ok for r in results), [r.error for r in results]
    for tag, t in (("a", 0.5), ("b", 0.7)):
        assert own_task(json.loads((tmp_path / f"run_{tag}" / "meta.json").read_text()))["attributes"]["T"] == t


def test_a_sweep_on_dask_workers_over_two_folders_with_modules_of_the_same_name(tmp_path):
    """Dask worker processes run the same loading path (``run_case`` loads each scenario by its path)."""
    distributed = pytest.importorskip("dask.distributed")  # the test extra installs it
    a = scenario_folder(tmp_path / "a", "a", 0.5, stem="own_a")
    b = scenario_folder(tmp_path / "b", "b", 0.7, stem="own_b")
    with distributed.LocalCluster(n_workers=1, threads_per_worker=1, processes=True, dashboard_address=None) as lc:
        result = run_sweep([a, b], ["mine"], ["m50"], 1, out_dir=tmp_path / "sweep", duration_s=0.05,
                           dask_address=lc.scheduler_address)
    assert not result.failed, [r.error for r in result.failed]
    for stem, t in (("own_a", 0.5), ("own_b", 0.7)):
        meta = json.loads((tmp_path / "sweep" / stem / "mine" / "m50" / "seed0" / "meta.json").read_text())
        assert own_task(meta)["attributes"]["T"] == t


def test_a_folder_lists_its_scenarios_and_not_the_modules_they_import(tmp_path):
    from sim.experiments.sweep import scenario_files
    from sim.loop.scenario import scenario_files_in

    (tmp_path / "my_tasks.py").write_text("TAG = 1\n", encoding="utf-8")
    (tmp_path / "reach_copy.py").write_text("SCENARIO = None\n", encoding="utf-8")
    (tmp_path / "per_subject.py").write_text("def for_subject(subject):\n    return None\n", encoding="utf-8")
    (tmp_path / "typed.py").write_text("SCENARIO: object = None\n", encoding="utf-8")
    (tmp_path / "broken.py").write_text("def (:\n", encoding="utf-8")  # not Python: loading it will say why
    expected = ["broken.py", "per_subject.py", "reach_copy.py", "typed.py"]
    assert [f.name for f in scenario_files_in(tmp_path)] == expected
    assert [f.name for f in scenario_files([tmp_path])] == expected


def test_a_scenario_written_for_the_flat_layout_is_told_where_the_names_are(tmp_path):
    from sim.loop.scenario import ScenarioError, load_scenario

    path = tmp_path / "old.py"
    path.write_text("from sim.intent import JointIntent\nfrom sim.scenario import Scenario\n", encoding="utf-8")
    with pytest.raises(ScenarioError, match=r"the module sim\.intent is gone; a scenario file imports from sim "
                                            r"\(from sim import JointIntent, Scenario, Via, deg\)") as err:
        load_scenario(path)
    assert "\n" not in str(err.value)
