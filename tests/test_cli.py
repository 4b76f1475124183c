"""The ``exosandbox urdf`` command: files that pinocchio and MuJoCo load with equal dynamics."""

from __future__ import annotations

import subprocess
import sys

import numpy as np
import pinocchio as pin
import pytest

from sim.cli import main

mujoco = pytest.importorskip("mujoco")


def _same_dynamics(path, seed=0):
    """Mass matrix and bias of pinocchio and MuJoCo (independent engine) on one file."""
    text = path.read_text()
    model = pin.buildModelFromXML(text)
    data = model.createData()
    mj = mujoco.MjModel.from_xml_path(str(path))
    md = mujoco.MjData(mj)
    rng = np.random.default_rng(seed)
    for _ in range(5):
        q = rng.uniform(model.lowerPositionLimit, model.upperPositionLimit)
        v = rng.normal(size=model.nv)
        md.qpos[:], md.qvel[:] = q, v
        mujoco.mj_forward(mj, md)
        M_mj = np.zeros((model.nv, model.nv))
        mujoco.mj_fullM(mj, md, M_mj)
        M = pin.crba(model, data, q)
        M = np.triu(M) + np.triu(M, 1).T
        h = pin.rnea(model, data, q, v, np.zeros(model.nv))
        assert np.allclose(M_mj, M, rtol=0, atol=1e-8 * np.abs(M).max())
        assert np.allclose(md.qfrc_bias, h, rtol=0, atol=1e-8 * np.abs(h).max())
    return model


def test_urdf_exo_writes_a_file_both_engines_load_with_equal_dynamics(tmp_path, capsys):
    out = tmp_path / "exo.urdf"
    assert main(["urdf", "exo", "-o", str(out)]) == 0
    assert "wrote" in capsys.readouterr().out
    model = _same_dynamics(out)
    assert model.nq == 7


@pytest.mark.parametrize(
    "args, nq",
    [
        (["--stature", "1.75", "--mass", "75", "--sex", "male"], 7),
        (["--subject", "m50"], 7),
        (["--subject", "f5", "--girdle"], 9),
        (["--subject", "m95", "--side", "left"], 7),
    ],
)
def test_urdf_human_writes_a_file_both_engines_load_with_equal_dynamics(tmp_path, args, nq):
    out = tmp_path / "human.urdf"
    assert main(["urdf", "human", *args, "-o", str(out)]) == 0
    assert _same_dynamics(out).nq == nq


def test_urdf_human_from_stature_scales_the_segment_mass_from_the_table(tmp_path):
    # de Leva (1996) Table 4: male upper arm is 2.71 % of body mass -> 2.0325 kg at 75 kg.
    out = tmp_path / "human.urdf"
    main(["urdf", "human", "--stature", "1.75", "--mass", "75", "--sex", "male", "-o", str(out)])
    model = pin.buildModelFromXML(out.read_text())
    jid = model.getJointId("human_gh_rotation")
    assert model.inertias[jid].mass == pytest.approx(0.0271 * 75.0, rel=1e-12)


def test_urdf_exo_fitted_to_a_subject_changes_the_segment_lengths(tmp_path):
    small, large = tmp_path / "f5.urdf", tmp_path / "m95.urdf"
    main(["urdf", "exo", "--subject", "f5", "-o", str(small)])
    main(["urdf", "exo", "--subject", "m95", "-o", str(large)])

    def elbow_z(path):
        m = pin.buildModelFromXML(path.read_text())
        return m.jointPlacements[m.getJointId("exo_elbow")].translation[2]

    assert elbow_z(small) > elbow_z(large)  # a smaller wearer gets a shorter upper arm


@pytest.mark.parametrize(
    "argv, text",
    [
        (["urdf", "human", "--subject", "x9"], "unknown subject 'x9'"),
        (["urdf", "human", "--stature", "1.75"], "go together"),
        (["urdf", "human", "--stature", "9", "--mass", "75", "--sex", "male"], "stature_m"),
        (["urdf", "robot"], "invalid choice"),
        (["urdf", "exo", "--girdle"], "--girdle"),
        (["urdf", "exo", "--mass", "abc"], "invalid float"),
        (["urdf", "exo", "--side", "both"], "invalid choice"),
    ],
)
def test_bad_options_give_one_line_error_and_nonzero_exit(argv, text):
    proc = subprocess.run([sys.executable, "-m", "sim.cli", *argv], capture_output=True, text=True)
    assert proc.returncode != 0
    lines = proc.stderr.strip().splitlines()
    assert len(lines) == 1, proc.stderr
    assert text in lines[0]
    assert "Traceback" not in proc.stderr


def test_unwritable_output_is_one_line_error(tmp_path):
    target = tmp_path / "missing-dir" / "exo.urdf"
    proc = subprocess.run([sys.executable, "-m", "sim.cli", "urdf", "exo", "-o", str(target)],
                          capture_output=True, text=True)
    assert proc.returncode == 1
    assert proc.stderr.count("\n") == 1 and "cannot write" in proc.stderr


def test_check_reads_a_user_urdf_and_reports_its_joints_mass_and_sites(tmp_path, capsys):
    # The file's declared masses add up to the printed moving mass (sum over <inertial><mass>).
    import xml.etree.ElementTree as ET

    path = tmp_path / "mine.urdf"
    main(["urdf", "exo", "-o", str(path)])
    capsys.readouterr()
    declared = sum(float(m.get("value")) for m in ET.parse(path).getroot().iter("mass"))
    assert main(["check", str(path), "--site", "upper_arm=exo_cuff_upper_arm", "--hand", "exo_hand_point"]) == 0
    out = capsys.readouterr().out
    assert f"{declared:.3f} kg moving mass" in out
    assert "exo_wrist_dev" in out and "cuff site 'upper_arm' -> frame 'exo_cuff_upper_arm'" in out


@pytest.mark.parametrize(
    "extra, text",
    [
        (["--site", "upper_arm=strap_9"], "upper_arm frame 'strap_9' does not exist"),
        (["--site", "strap_9"], "--site expects NAME=FRAME"),
        (["--hand", "nowhere"], "hand point frame 'nowhere' does not exist"),
    ],
)
def test_check_names_the_missing_frame_in_one_line(tmp_path, extra, text):
    path = tmp_path / "mine.urdf"
    main(["urdf", "exo", "-o", str(path)])
    proc = subprocess.run([sys.executable, "-m", "sim.cli", "check", str(path), *extra],
                          capture_output=True, text=True)
    assert proc.returncode != 0
    assert proc.stderr.count("\n") == 1 and text in proc.stderr


def test_a_simulating_command_says_when_the_kernels_must_first_be_compiled(tmp_path, monkeypatch, capsys):
    import sim.cli as cli

    monkeypatch.setattr(cli, "_kernels_cached", lambda: False)  # as on a fresh installation
    monkeypatch.setattr(cli, "_stderr_is_terminal", lambda: True)  # a person at a terminal
    main(["urdf", "exo", "-o", str(tmp_path / "a.urdf")])  # not a simulating command: no note
    assert "compiling" not in capsys.readouterr().err
    scenario = tmp_path / "short.py"
    scenario.write_text("from scenarios.stand_still import SCENARIO\nimport dataclasses\n"
                        "SCENARIO = dataclasses.replace(SCENARIO, duration_s=0.01)\n")
    assert main(["run", str(scenario), "--out", str(tmp_path / "run")]) == 0
    assert "first run after installation: compiling the numba kernels" in capsys.readouterr().err
    monkeypatch.setattr(cli, "_stderr_is_terminal", lambda: False)  # a script: errors stay one line
    assert main(["run", str(scenario), "--out", str(tmp_path / "run2")]) == 0
    assert "compiling" not in capsys.readouterr().err

