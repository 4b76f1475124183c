"""Range-of-motion coverage: ISB shoulder angles, manipulability, the coverage map and ``exosandbox coverage``.

Outside references, named at each check:

* Yoshikawa T. (1985), Int. J. Robotics Research 4(2):3-9: w = sqrt(det(J J^T)); for a planar two-link arm
  (end-point position) w = l1 l2 |sin q2| (textbook closed form; det J = l1 l2 sin q2).
* A spherical wrist of three intersecting revolute axes z-y-z: its angular Jacobian has
  |det| = |sin q2| (the Z-Y-Z Euler-rate matrix, textbook closed form), singular at q2 = 0 or pi where
  the outer axes line up.
* Wu et al. (2005), J. Biomech. 38(5):981-992: the humerus relative to the thorax as an intrinsic
  Y-X-Y' sequence, checked against scipy.spatial.transform.Rotation (a general-purpose reference library;
  upper-case axes are intrinsic there).
"""

from __future__ import annotations

import math
import subprocess
import sys

import numpy as np
import pinocchio as pin
import pytest
from scipy.spatial.transform import Rotation

from models import HumanParams, build_human, exo_urdf, fit_exo
from models.errors import ParameterError
from sim.analysis.coverage import (
    CoverageParams,
    human_arm_posture,
    humerus_rotation,
    isb_shoulder_angles,
    manipulability,
    required_share,
    smallest_singular_value,
)
from sim.cli import main
from sim.experiments.coverage import run_coverage

L1, L2 = 0.30, 0.25  # [m], the worked example of the planar closed form

_LINK = '<link name="{n}"><inertial><mass value="1"/><inertia ixx="0.01" iyy="0.01" izz="0.01" ixy="0" ixz="0" ' \
        'iyz="0"/></inertial></link>'


def _chain(axes, offsets, tip_m: float = 0.0) -> pin.Model:
    """A URDF serial chain of revolute joints (axes and parent offsets given), loaded by pinocchio."""
    parts = ['<robot name="t">', _LINK.format(n="l0")]
    for i, (ax, off) in enumerate(zip(axes, offsets), start=1):
        parts.append(_LINK.format(n=f"l{i}"))
        parts.append(f'<joint name="j{i}" type="revolute"><parent link="l{i - 1}"/><child link="l{i}"/>'
                     f'<origin xyz="{off[0]} {off[1]} {off[2]}"/><axis xyz="{ax[0]} {ax[1]} {ax[2]}"/>'
                     f'<limit lower="-4" upper="4" effort="1" velocity="1"/></joint>')
    parts.append(_LINK.format(n="tip"))
    parts.append(f'<joint name="tipj" type="fixed"><parent link="l{len(axes)}"/><child link="tip"/>'
                 f'<origin xyz="{tip_m} 0 0"/></joint>')
    parts.append("</robot>")
    return pin.buildModelFromXML("".join(parts))


def _planar_two_link() -> pin.Model:
    return _chain([(0, 0, 1), (0, 0, 1)], [(0, 0, 0), (L1, 0, 0)], tip_m=L2)


def test_planar_two_link_manipulability_is_l1_l2_abs_sin_q2():
    # Yoshikawa 1985: w = l1 l2 |sin q2| for the end-point position of a planar 2R arm
    model = _planar_two_link()
    data = model.createData()
    fid = model.getFrameId("tip")
    for q1 in np.linspace(-3.0, 3.0, 7):
        for q2 in np.linspace(-math.pi, math.pi, 13):
            q = np.array([q1, q2])
            J = pin.computeFrameJacobian(model, data, q, fid, pin.LOCAL_WORLD_ALIGNED)[:2]
            assert manipulability(J) == pytest.approx(L1 * L2 * abs(math.sin(q2)), abs=1e-12)
    J = pin.computeFrameJacobian(model, data, np.array([0.3, math.pi / 2]), fid, pin.LOCAL_WORLD_ALIGNED)[:2]
    assert manipulability(J) == pytest.approx(0.075, abs=1e-12)  # the worked example: 0.30 x 0.25 m^2


def test_planar_two_link_reachable_set_is_the_annulus_and_its_rims_are_singular():
    # closed form: |l1 - l2| <= r <= l1 + l2; the rims are reached only at q2 = 0 or pi, where w = 0 (Yoshikawa)
    model = _planar_two_link()
    data = model.createData()
    fid = model.getFrameId("tip")
    for q2 in np.linspace(-math.pi, math.pi, 25):
        q = np.array([0.7, q2])
        pin.framesForwardKinematics(model, data, q)
        r = float(np.linalg.norm(data.oMf[fid].translation[:2]))
        assert abs(L1 - L2) - 1e-12 <= r <= L1 + L2 + 1e-12
        assert r == pytest.approx(math.sqrt(L1 ** 2 + L2 ** 2 + 2 * L1 * L2 * math.cos(q2)), abs=1e-12)
        J = pin.computeFrameJacobian(model, data, q, fid, pin.LOCAL_WORLD_ALIGNED)[:2]
        on_rim = min(abs(r - (L1 + L2)), abs(r - abs(L1 - L2))) < 1e-12
        assert (manipulability(J) < 1e-12) == on_rim


def test_spherical_wrist_is_singular_exactly_when_the_outer_axes_line_up():
    # z-y-z intersecting axes: |det J_omega| = |sin q2| (Euler-rate matrix); singular at q2 = 0, pi
    model = _chain([(0, 0, 1), (0, 1, 0), (0, 0, 1)], [(0, 0, 0), (0, 0, 0), (0, 0, 0)])
    data = model.createData()
    fid = model.getFrameId("tip")
    rng = np.random.default_rng(7)
    for q2 in (0.0, math.pi, -math.pi, 0.3, 1.2, -2.0, math.pi / 2):
        q = np.array([rng.uniform(-3, 3), q2, rng.uniform(-3, 3)])
        Jw = pin.computeFrameJacobian(model, data, q, fid, pin.LOCAL)[3:]
        assert manipulability(Jw) == pytest.approx(abs(math.sin(q2)), abs=1e-12)
        assert (smallest_singular_value(Jw) < 1e-9) == (abs(math.sin(q2)) < 1e-9)


def test_manipulability_rejects_a_tall_jacobian():
    with pytest.raises(ParameterError, match="no more rows than columns"):
        manipulability(np.ones((3, 2)))


def test_isb_angles_match_scipy_intrinsic_yxy_and_round_trip():
    # Wu et al. 2005: R = R_Y(plane) R_X(-elevation) R_Y(axial), intrinsic; scipy: upper case = intrinsic
    rng = np.random.default_rng(3)
    for _ in range(200):
        plane, elev, axial = rng.uniform(-math.pi, math.pi), rng.uniform(0.05, math.pi - 0.05), \
            rng.uniform(-math.pi, math.pi)
        R = humerus_rotation(plane, elev, axial)
        np.testing.assert_allclose(R, Rotation.from_euler("YXY", [plane, -elev, axial]).as_matrix(), atol=1e-12)
        # the same rotation as extrinsic y-x-y about the fixed axes, angles in reverse order (lower case in scipy)
        np.testing.assert_allclose(R, Rotation.from_euler("yxy", [axial, -elev, plane]).as_matrix(), atol=1e-12)
        got = isb_shoulder_angles(R)
        np.testing.assert_allclose(got, (plane, elev, axial), atol=1e-9)
    for R in Rotation.random(100, random_state=11).as_matrix():
        a, b, c = Rotation.from_matrix(R).as_euler("YXY")  # scipy picks the middle angle b in [0, pi]
        plane, elev, axial = isb_shoulder_angles(R)
        # scipy's (a, b, c) and ours (plane, -elev, axial) are the two solutions of a proper Euler sequence:
        # (a + pi, -b, c + pi); compare through the angles, wrapped
        wrap = lambda x: (x + math.pi) % (2 * math.pi) - math.pi  # noqa: E731
        assert elev == pytest.approx(b, abs=1e-9)
        assert wrap(plane - (a + math.pi)) == pytest.approx(0.0, abs=1e-9)
        assert wrap(axial - (c + math.pi)) == pytest.approx(0.0, abs=1e-9)


def test_isb_flexion_plane_points_the_arm_forward():
    # Wu et al. 2005: plane of elevation 90 deg and elevation 90 deg is forward flexion (humerus shaft anterior)
    R = humerus_rotation(math.pi / 2, math.pi / 2, 0.0)
    np.testing.assert_allclose(-R[:, 1], (1.0, 0.0, 0.0), atol=1e-12)  # arm points along -Y_h: anterior X
    R = humerus_rotation(0.0, math.pi / 2, 0.0)
    np.testing.assert_allclose(-R[:, 1], (0.0, 0.0, 1.0), atol=1e-12)  # abduction: lateral Z (right arm)


@pytest.mark.parametrize("girdle", [False, True])
@pytest.mark.parametrize("side", ["right", "left"])
def test_human_posture_reproduces_the_isb_angles_through_the_model(girdle, side):
    # forward kinematics of the human model (pinocchio) read back as ISB angles (Wu et al. 2005)
    hp = HumanParams("m50", girdle=girdle, side=side)
    arm = build_human(hp)
    data = arm.model.createData()
    C = np.array([[1.0, 0.0, 0.0], [0.0, 0.0, 1.0], [0.0, -1.0, 0.0]])
    M = np.diag([1.0, -1.0, 1.0]) if side == "left" else np.eye(3)
    for angles in ((0.4, 0.7, -0.3), (1.5, 1.2, 0.5), (-0.8, 0.3, 0.9)):
        q = human_arm_posture(hp, humerus_rotation(*angles), (1.0, 0.2, 0.0, 0.0))
        pin.framesForwardKinematics(arm.model, data, q)
        R = data.oMf[arm.frame_id("human_upper_arm")].rotation
        np.testing.assert_allclose(isb_shoulder_angles(C @ M @ R @ M @ C.T), angles, atol=1e-9)


def test_coverage_map_follows_and_counts_the_daily_living_region():
    params = CoverageParams.grid_deg(60.0, 60.0, 30.0)
    cmap, exo = run_coverage("m50", params=params)
    share, n = required_share(cmap)
    assert n > 0 and 0.0 < share <= 1.0
    cell = next(c for c in cmap.cells
                if abs(c.plane_rad - math.radians(30)) < 1e-9 and abs(c.elevation_rad - math.radians(30)) < 1e-9)
    k0 = params.axial_rad.index(0.0)
    assert cell.reachable[k0] and cell.w[k0] > 0 and cell.sigma_min[k0] > 0
    assert np.nanmax([np.nanmax(c.cuff_offset_m) for c in cmap.cells if c.reachable.any()]) < 1e-9
    # a shifted shoulder centre: the same robot postures (orientation match), the cuffs pulled off
    shifted, _ = run_coverage("m50", params=params, misalignment_m=(0.02, 0.0, 0.0))
    assert required_share(shifted) == (share, n)
    assert np.nanmax([np.nanmax(c.cuff_offset_m) for c in shifted.cells if c.reachable.any()]) > 0.005
    # the same robot read from its URDF with a site mapping gives the same map
    urdf = exo_urdf(fit_exo(HumanParams("m50")))
    own, _ = run_coverage("m50", params=params, exo_urdf=urdf,
                          sites={"upper_arm": "exo_cuff_upper_arm", "forearm": "exo_cuff_forearm",
                                 "hand": "exo_cuff_hand"}, hand_frame="exo_hand_point")
    assert [c.reachable.tolist() for c in own.cells] == [c.reachable.tolist() for c in cmap.cells]


def test_coverage_params_reject_a_bad_grid():
    with pytest.raises(ParameterError, match="elevation_rad"):
        CoverageParams((0.0,), (0.0,), (0.0,))
    with pytest.raises(ParameterError, match="plane_step_deg"):
        CoverageParams.grid_deg(0.0)


def test_coverage_command_writes_its_outputs(tmp_path, capsys):
    out = tmp_path / "cov"
    assert main(["coverage", "--plane-step", "60", "--elevation-step", "60", "--axial-step", "30",
                 "--misalignment", "0,0.01,0", "--out", str(out)]) == 0
    text = capsys.readouterr().out
    assert "daily-living region followed" in text
    for name in ("coverage.csv", "coverage.png", "ranges.png", "report.md"):
        assert (out / name).stat().st_size > 0
    report = (out / "report.md").read_text()
    assert "**Caution.**" in report and "Gates et al. 2016" in report
    rows = (out / "coverage.csv").read_text().splitlines()
    assert len(rows) == 1 + 5 * 3 * 7  # header + planes x elevations x axial samples


def test_coverage_command_takes_a_users_urdf_with_its_sites(tmp_path, capsys):
    urdf = tmp_path / "robot.urdf"
    urdf.write_text(exo_urdf(fit_exo(HumanParams("m50"))))
    grid = ["--plane-step", "60", "--elevation-step", "60", "--axial-step", "30"]
    assert main(["coverage", *grid, "--out", str(tmp_path / "a")]) == 0
    built_in = capsys.readouterr().out.splitlines()[0]
    assert main(["coverage", *grid, "--exo", str(urdf), "--site", "upper_arm=exo_cuff_upper_arm",
                 "--site", "forearm=exo_cuff_forearm", "--site", "hand=exo_cuff_hand", "--hand", "exo_hand_point",
                 "--out", str(tmp_path / "b")]) == 0
    assert capsys.readouterr().out.splitlines()[0] == built_in  # the same robot, read from its file
    assert str(urdf) in (tmp_path / "b" / "report.md").read_text()


@pytest.mark.parametrize(
    "argv, text",
    [
        (["coverage", "--subject", "x9"], "--subject must be one of"),
        (["coverage", "--misalignment", "0.02,0"], "--misalignment must be three"),
        (["coverage", "--misalignment", "0.2,0,0"], "misalignment_m must be within 0.1 m"),
        (["coverage", "--site", "upper_arm=x"], "--site and --hand go with --exo"),
        (["coverage", "--exo", "robot.urdf"], "--exo needs --hand"),
        (["coverage", "--plane-step", "0"], "--plane-step must be between"),
        (["coverage", "--elevation-step", "nan"], "--elevation-step must be between"),
    ],
)
def test_coverage_command_rejects_bad_options_in_one_line(argv, text, tmp_path):
    proc = subprocess.run([sys.executable, "-m", "sim.cli", *argv, "--out", str(tmp_path / "o")],
                          capture_output=True, text=True)
    assert proc.returncode != 0
    lines = proc.stderr.strip().splitlines()
    assert len(lines) == 1, proc.stderr
    assert text in lines[0]
    assert "Traceback" not in proc.stderr
