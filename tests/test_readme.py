"""The README's code runs as printed."""

from __future__ import annotations

import re
import shutil
from pathlib import Path

import numpy as np
import pytest

import models
from controllers import ControllerContext
from models.records import Measurement

ROOT = Path(__file__).resolve().parents[1]
README = ROOT / "README.md"
#: Put on the line before a ```python block of the README that must run as printed (from a folder holding a copy of
#: scenarios/); the other blocks are only compiled.
RUN_MARK = "<!-- readme-test: run -->"


def _python_blocks() -> list[str]:
    return re.findall(r"```python\n(.*?)```", README.read_text(encoding="utf-8"), flags=re.S)


def _marked_blocks() -> list[str]:
    return re.findall(re.escape(RUN_MARK) + r"\n```python\n(.*?)```", README.read_text(encoding="utf-8"), flags=re.S)


def test_readme_task_example_keeps_the_hand_under_its_ceiling():
    block = next(b for b in _python_blocks() if "class HandCeiling" in b)
    ns: dict = {}
    exec(compile(block, "README.md", "exec"), ns)
    ctrl = ns["controller"]
    arm = models.build_exo()
    ctrl.reset(ControllerContext(arm=arm, cuff_frames={"hand": "exo_cuff_hand"}))
    # hand point 5 mm below the 0.10 m ceiling (posture found by the robot's own kinematics) moving up
    import pinocchio as pin

    q = models.coupling.matching_exo_posture(arm, models.build_human(), np.radians([95, 0, 0, 20, 0, 0, 0]))
    data = arm.model.createData()
    pin.framesForwardKinematics(arm.model, data, q)
    z = data.oMf[arm.frame_id("exo_hand_point")].translation[2]
    task = ctrl.levels[0][0]
    task.z_max = z + 0.005
    J = pin.computeFrameJacobian(arm.model, data, q, arm.frame_id("exo_hand_point"), pin.LOCAL_WORLD_ALIGNED)
    dq = np.linalg.pinv(J[2:3]) @ np.array([1.0])  # 1 m/s upward
    push_up = {"hand": np.zeros(6)}
    tau = ctrl.step(Measurement(0.0, q, dq, np.zeros(7), push_up))
    assert np.all(np.isfinite(tau))
    qdd = ctrl.last_result.x[:7]
    zdd = J[2] @ qdd + ctrl.state.drift(arm.frame_id("exo_hand_point"))[2]
    dt = 1e-3
    assert z + 1.0 * dt + zdd * dt**2 <= task.z_max + 1e-9  # the row holds: the hand stays under
    assert ctrl.diagnostics()["fallback"] == 0.0


def test_readme_python_blocks_all_compile():
    for b in _python_blocks():
        compile(b, "README.md", "exec")


def test_readme_marked_blocks_run_as_printed(tmp_path, monkeypatch):
    blocks = _marked_blocks()
    assert blocks, f"the README marks no python block with {RUN_MARK}"
    import sim

    if not hasattr(sim, "Simulation"):
        pytest.skip("the README's Simulation example needs sim.Simulation, which this tree does not have yet")
    shutil.copytree(ROOT / "scenarios", tmp_path / "scenarios")
    monkeypatch.chdir(tmp_path)
    for b in blocks:
        ns: dict = {}
        exec(compile(b, "README.md", "exec"), ns)  # the block's own asserts: same seed, same tick
    # the Simulation example: the saved trajectory reads back as a run folder with the same arrays
    traj, run = ns["traj"], ns["run"]
    assert traj.arrays["q_exo"].shape[0] == len(traj.t_s) > 0
    np.testing.assert_array_equal(run.arrays["q_exo"], traj.arrays["q_exo"])
