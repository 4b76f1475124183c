"""Misalignment across the workspace: steady cuff wrenches of a joint-centre offset (``exosandbox misalignment``)."""

from __future__ import annotations

import dataclasses
import math
import subprocess
import sys
from pathlib import Path

import numpy as np
import pinocchio as pin
import pytest

from sim.experiments.misalignment import (
    MisalignmentError,
    held_wrenches,
    misalignment_map,
    simulated_wrenches,
    write_misalignment,
)
from sim.loop.scenario import load_scenario
from sim.loop.simulation import build_assembly

REACH = Path(__file__).resolve().parents[1] / "scenarios" / "reach.py"
D_M = (0.0, 0.0, 0.02)  # 2 cm up the robot's base z axis


def _reach(girdle: bool = False):
    sc = load_scenario(REACH)
    return dataclasses.replace(sc, subject=dataclasses.replace(sc.human, girdle=girdle))


def test_zero_offset_relaxed_wearer_held_still_gives_small_cuff_forces():
    """At the reference posture, zero offset, robot transparent, wearer held still: the robot's gravity is
    compensated with its exact model (PlantParams' default mass scale 1) and the wearer's weight is on the holder,
    so at rest the cuffs carry at most what the robot's joint friction holds: a static balance
    F r <= tau_c, with tau_c the largest Coulomb friction torque of the robot's joints (models.exo.ExoParams) and
    r the smallest distance from the robot's shoulder centre to a cuff (a moment arm; textbook statics).  Sensor
    noise and the holder's sag are averaged or followed by the transparent robot."""
    sc = _reach()
    f0, a0 = sc.intent.start_rad[0], sc.intent.start_rad[1]
    w, drift = simulated_wrenches(sc, f0, a0, (0.0, 0.0, 0.0), "transparent")
    assert np.all(drift < 1.0)  # at rest: the mean is a steady value
    asm = build_assembly(sc)
    model, data = asm.exo.model, asm.exo.model.createData()
    pin.framesForwardKinematics(model, data, asm.q_exo0)
    r = min(np.linalg.norm(data.oMf[c.exo_frame_id].translation) for c in asm.cuffs)
    bound = max(asm.exo_params.coulomb_friction_Nm) / r
    forces = np.linalg.norm(w[:, :3], axis=1)
    assert 1.0 < bound < 10.0  # a few newtons: a meaningful bound
    assert np.all(forces <= bound), (forces, bound)


def test_held_robot_parasitic_force_is_hookes_law_of_the_offset_stretch():
    """Robot held at the posture matching the wearer's segments: the offset d stretches each cuff by (I - R) d
    (R the segment's rotation from the reference posture; a rigid motion x -> R x + t of points shifted by d),
    with no rotation between the cuff's frames, so the wrench difference is Hooke's law -K (R_A^T (I - R) d) on
    the cuff's translational stiffness (models.cuffs.CuffParams; the log6 spring at zero rotation, Bullo & Murray
    1999).  Closed form from pinocchio's frames, independent of the module's wrench computation."""
    sc = _reach()
    fl, ab = math.radians(90.0), math.radians(20.0)
    w = held_wrenches(sc, fl, ab, D_M)
    w0 = held_wrenches(sc, fl, ab, (0.0, 0.0, 0.0))
    asm = build_assembly(dataclasses.replace(sc, registration=dataclasses.replace(sc.registration,
                                                                                   misalignment_m=D_M)))
    model, data = asm.human.model, asm.human.model.createData()
    q1 = np.array(asm.q_human0)
    q1[0], q1[1] = fl, ab
    pin.framesForwardKinematics(model, data, asm.q_human0)
    R0 = [data.oMf[c.human_frame_id].rotation.copy() for c in asm.cuffs]
    pin.framesForwardKinematics(model, data, q1)
    d = np.asarray(D_M)
    for i, c in enumerate(asm.cuffs):
        R_seg = data.oMf[c.human_frame_id].rotation @ R0[i].T
        R_A = data.oMf[c.human_frame_id].rotation @ c.human_offset.rotation  # = the robot frame's, matched
        expected = -np.asarray(c.spec.params.stiffness_N_per_m) * (R_A.T @ (np.eye(3) - R_seg) @ d)
        assert np.linalg.norm(expected) > 50.0  # a 2 cm offset over 90 deg: tens of newtons
        np.testing.assert_allclose(w[i, :3] - w0[i, :3], expected, rtol=0.02, atol=0.5)


def test_transparent_robot_yields_so_its_parasitic_force_is_below_the_held_robots():
    """Under transparent control the robot moves with the wearer (the cuff springs push it), so the offset's
    stretch, and with it the parasitic force (Hooke: F = k x), is smaller than with the robot held (common
    practice: a compliant robot reduces the misalignment load)."""
    sc = _reach()
    fl, ab = [math.radians(60.0)], [math.radians(0.0)]
    held = misalignment_map(sc, D_M, fl, ab, controller="held")
    free = misalignment_map(sc, D_M, fl, ab, controller="transparent")
    for h, f in zip(held.cells, free.cells):
        assert h.cuff == f.cuff and f.steady
        assert f.parasitic_force_N < h.parasitic_force_N, (h, f)


def test_one_and_two_processes_write_the_same_csv(tmp_path):
    """Determinism (the project's rule: seeded runs, cells back in grid order whatever the executor)."""
    sc = _reach(girdle=True)
    fl, ab = [math.radians(30.0), math.radians(60.0)], [math.radians(10.0)]
    one = misalignment_map(sc, D_M, fl, ab, jobs=1)
    two = misalignment_map(sc, D_M, fl, ab, jobs=2)
    write_misalignment(one, tmp_path / "one")
    write_misalignment(two, tmp_path / "two")
    text = (tmp_path / "one" / "misalignment.csv").read_text()
    assert text == (tmp_path / "two" / "misalignment.csv").read_text()
    assert len(text.strip().splitlines()) == 1 + 2 * len(sc.cuffs)


def test_bad_arguments_name_the_culprit():
    sc = _reach()
    with pytest.raises(MisalignmentError, match="jobs"):
        misalignment_map(sc, D_M, [0.0], [0.0], jobs=0)
    with pytest.raises(MisalignmentError, match="offset_m"):
        misalignment_map(sc, (0.0, 0.0, 0.5), [0.0], [0.0])
    with pytest.raises(MisalignmentError, match="flexion_rad"):
        misalignment_map(sc, D_M, [float("nan")], [0.0])


def test_command_writes_its_outputs(tmp_path):
    out = tmp_path / "m"
    proc = subprocess.run([sys.executable, "-m", "sim.cli", "misalignment", str(REACH), "--offset", "0,0,0.02",
                           "--girdle", "--flexion", "15,45,30", "--abduction", "10,10,5", "--out", str(out)],
                          capture_output=True, text=True)
    assert proc.returncode == 0, proc.stderr
    for name in ("misalignment.csv", "misalignment.png", "report.md"):
        assert (out / name).stat().st_size > 0
    assert "upper_arm" in proc.stdout and "Caution" in (out / "report.md").read_text()


@pytest.mark.parametrize("extra, text", [
    (["--offset", "0,0"], "--offset"),
    (["--offset", "0,0,0.5"], "misalignment_m"),
    (["--flexion", "0,90,-5"], "--flexion"),
    (["--abduction", "a,b,c"], "--abduction"),
    (["--controller", "nope"], "--controller"),
    (["--jobs", "0"], "--jobs"),
])
def test_bad_options_give_one_line_error(tmp_path, extra, text):
    proc = subprocess.run([sys.executable, "-m", "sim.cli", "misalignment", str(REACH), "--flexion", "15,15,1",
                           "--abduction", "10,10,1", "--out", str(tmp_path / "o"), *extra],
                          capture_output=True, text=True)
    assert proc.returncode != 0
    lines = proc.stderr.strip().splitlines()
    assert len(lines) == 1, proc.stderr
    assert text in lines[0] and "Traceback" not in proc.stderr
