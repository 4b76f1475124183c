"""``exosandbox catalog`` and :func:`sim.catalog.catalog`: what a scenario file and the commands can name.

Known answers are read from the registries themselves and from their documented contents: the four
shipped variants and their levels as the module docstring of ``controllers/registry.py`` states them
(``transparent``: transparency > joint damping; ``walls``: joint position and velocity limits > the
scenario's walls > transparency > joint damping), the task parameters from :func:`inspect.signature`,
the subjects' stature and mass from ``models.human.SUBJECTS``, the hand frames from ``models.exo`` and
``models.human`` (``HAND_FRAME``).
"""

from __future__ import annotations

import dataclasses
import inspect
import json
from pathlib import Path

import pytest
from _scenario_files import write_scenario

from controllers.registry import CONTROLLERS
from controllers.tasks import TASKS
from models import exo, human
from models.human import SUBJECTS
from sim.catalog import SCENARIO_WALLS, catalog, shipped_scenarios_folder
from sim.cli import main

REPO = Path(__file__).resolve().parents[1]
SHIPPED = sorted(p.name for p in (REPO / "scenarios").glob("*.py") if not p.name.startswith("_"))


@pytest.fixture(scope="module")
def shipped():
    return catalog()


def test_the_default_folder_is_the_shipped_one_and_every_scenario_is_listed(shipped):
    assert Path(shipped.scenarios_folder) == REPO / "scenarios" == shipped_scenarios_folder()
    assert [e.file for e in shipped.scenarios] == SHIPPED
    assert all(e.error is None for e in shipped.scenarios)
    reach = next(e for e in shipped.scenarios if e.file == "reach.py")
    assert reach.name == "reach" and reach.duration_s > 0 and "reach" in reach.description
    assert set(reach.controllers) == {"gravity", "zero", "transparent", "walls"}


def test_the_shipped_variants_and_their_levels(shipped):
    variants = {v.name: v for v in shipped.variants}
    assert list(variants) == list(CONTROLLERS) == ["zero", "gravity", "transparent", "walls"]
    assert variants["transparent"].levels == (("transparency",), ("damping",))
    assert variants["walls"].levels == (("joint_limits", "velocity_limits"), (SCENARIO_WALLS,), ("transparency",),
                                        ("damping",))
    assert variants["zero"].levels == () and "zero torque" in variants["zero"].summary.lower()
    assert variants["gravity"].levels == () and "gravity" in variants["gravity"].summary.lower()


def test_every_task_with_its_parameters(shipped):
    tasks = {t.name: t for t in shipped.tasks}
    assert list(tasks) == list(TASKS)
    for name, cls in TASKS.items():
        signature = list(inspect.signature(cls.__init__).parameters.values())[1:]
        entry = tasks[name]
        assert entry.cls.endswith("." + cls.__name__)
        assert [p.name for p in entry.parameters] == [p.name for p in signature]
        assert [p.default for p in entry.parameters] == [None if p.default is p.empty else repr(p.default)
                                                         for p in signature]
        assert entry.summary and "\n" not in entry.summary
    assert tasks["posture"].parameters[0].default is None  # posture_rad is required
    frame = next(p for p in tasks["wall_plane"].parameters if p.name == "frame")
    assert frame.keyword_only and frame.default == repr(exo.HAND_FRAME)


def test_subjects_frames_and_cuffs(shipped):
    assert [(s.name, s.sex, s.stature_m, s.mass_kg) for s in shipped.subjects] == [
        (n, s.sex, s.stature_m, s.mass_kg) for n, s in SUBJECTS.items()]
    exo_frames, human_frames = shipped.frames
    assert exo_frames.hand_frame == exo.HAND_FRAME and human_frames.hand_frame == human.HAND_FRAME
    assert human_frames.model == "human m50"
    for f in shipped.frames:
        assert f.hand_frame in f.links
        assert set(f.sites) == {"upper_arm", "forearm", "hand"} and set(f.sites.values()) <= set(f.links)
    assert [c.name for c in shipped.cuffs] == ["upper_arm", "forearm", "hand"]


def test_a_broken_file_is_one_line_and_the_others_are_listed(tmp_path):
    write_scenario(tmp_path / "good.py")
    write_scenario(tmp_path / "no_intent.py", intent=None)
    (tmp_path / "_helper.py").write_text("raise RuntimeError('not a scenario')\n")
    (tmp_path / "my_tasks.py").write_text("from controllers.tasks import JointDamping\n\n\n"
                                          "class Slow(JointDamping):\n    name = 'slow'\n")
    write_scenario(tmp_path / "own.py", name='"own"', controllers='("mine", "zero")',
                   variants='{"mine": [["joint_limits"], [__import__("my_tasks").Slow()]]}')
    entries = {e.file: e for e in catalog(tmp_path).scenarios}
    assert list(entries) == ["good.py", "no_intent.py", "own.py"]  # my_tasks.py: a module of tasks, no SCENARIO
    assert entries["good.py"].error is None and entries["good.py"].name == "short"
    assert "'intent'" in entries["no_intent.py"].error and "\n" not in entries["no_intent.py"].error
    assert entries["own.py"].own_variants == {"mine": (("joint_limits",), ("slow",))}


def test_the_command_prints_every_section(tmp_path, capsys):
    assert main(["catalog"]) == 0
    out = capsys.readouterr().out
    for text in [*SHIPPED, *CONTROLLERS, *(f"  {t}(" for t in TASKS), *SUBJECTS, exo.HAND_FRAME, human.HAND_FRAME,
                 "posture(posture_rad, frequency_Hz=1.0"]:
        assert text in out, text
    write_scenario(tmp_path / "no_intent.py", intent=None)
    write_scenario(tmp_path / "good.py")
    assert main(["catalog", "--scenarios", str(tmp_path)]) == 0
    out = capsys.readouterr().out
    good = next(line for line in out.splitlines() if line.lstrip().startswith("good.py"))
    assert good.split() == ["good.py", "short,", "0.2", "s,", "controllers", "gravity,", "zero"]
    assert sum("no_intent.py" in line and "error:" in line for line in out.splitlines()) == 1


def test_the_json_form_is_the_same_catalog(shipped, capsys):
    assert main(["catalog", "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert doc == json.loads(json.dumps(dataclasses.asdict(shipped)))
    assert [s["file"] for s in doc["scenarios"]] == SHIPPED
    assert [t["name"] for t in doc["tasks"]] == list(TASKS)


def test_a_missing_folder_is_one_line(tmp_path, capsys):
    assert main(["catalog", "--scenarios", str(tmp_path / "nowhere")]) == 1
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "nowhere" in err[0] and "does not exist" in err[0]
