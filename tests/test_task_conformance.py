"""Every task registered in ``controllers.tasks.TASKS`` keeps the Task contract, and a task on a frame uses
that frame's Jacobian.

* Contract (the module docstring of ``controllers.tasks.base``): on random states inside the joint limits
  (seeded), ``rows(state)`` is None or ``(A, b)`` with A of shape (m, 2 nv) and b of shape (m,), both finite.
* The Jacobian a frame task uses, against central finite differences of the frame's placement computed by
  pinocchio's forward kinematics (a general-purpose rigid-body library): a wall's row on q̈ must be
  :math:`m_n n^T J` with :math:`m_n = \\alpha / (n^T J M^{-1} J^T n)` (``WallTask``'s docstring), and the
  transparency task's right-hand side :math:`\\sum_c J_c^T w_c` with each :math:`J_c` in its sensor's
  LOCAL frame (``TickState``'s docstring). Step 1e-6 rad; central differences are accurate to O(h^2)
  (common practice), so relative agreement to 1e-6 is asked.
"""

from __future__ import annotations

import numpy as np
import pinocchio as pin
import pytest

import models
from controllers.tasks import TASKS, HandPath, TickState, WallTask
from models.records import Measurement

CUFFS = {"upper_arm": "exo_cuff_upper_arm", "forearm": "exo_cuff_forearm", "hand": "exo_cuff_hand"}
HAND = "exo_hand_point"
STEP = 1e-6  # finite-difference step [rad]


def _arguments(name, hand):
    """Constructor arguments of each registered task; walls placed so that the hand point is inside them by
    10 mm (so that they write rows), and the path tasks' paths away from the hand (so that they push)."""
    n = np.array([0.6, 0.0, 0.8])
    return {
        "posture": {"posture_rad": (0.1, 0.2, 0.0, 0.8, 0.0, 0.1, 0.0)},
        "wall_plane": {"point_m": hand - 0.01 * n, "normal": n},
        "wall_box": {"lower_m": hand - [0.05, 0.05, 0.05], "upper_m": hand + [0.05, 0.05, -0.01]},
        "wall_sphere": {"center_m": hand + [0.0, 0.02, 0.0], "radius_m": 0.03},
        # the path tasks: a path point 2 cm from the hand (assist-as-needed), 5 cm out of a 3 cm tunnel
        "assist_as_needed": {"path": HandPath(points_m=(hand + [0.0, 0.0, 0.02],), times_s=(0.0,))},
        "guidance_tunnel": {"path": HandPath(points_m=(hand - 0.05 * n,), times_s=(0.0,)), "radius_m": 0.03},
    }.get(name, {})


def _states(arm, count, seed):
    """Random measured states inside the joint limits, with random speeds and cuff wrenches (seeded)."""
    rng = np.random.default_rng(seed)
    lo, hi = arm.position_limits()
    for _ in range(count):
        q = rng.uniform(lo + 0.05, hi - 0.05)
        yield Measurement(0.0, q, rng.normal(size=arm.nv), np.zeros(arm.nv),
                          {c: rng.normal(scale=10.0, size=6) for c in CUFFS})


def _bound(name, arm, m):
    """A fresh task ``name`` bound to a tick state updated at ``m`` (walls placed around this state's hand)."""
    s = TickState(arm, CUFFS, 1e-3)
    s.update(m)
    task = TASKS[name](**_arguments(name, s.position(arm.frame_id(HAND)).copy()))
    task.bind(s)
    return task, s


def _placement(arm, q, frame):
    data = arm.model.createData()
    pin.framesForwardKinematics(arm.model, data, q)
    return data.oMf[arm.frame_id(frame)]


def _fd_jacobian(arm, q, frame, local):
    """(6, nv) Jacobian of a frame by central differences of its placement: world-aligned linear part
    (``local=False``, the frame origin's velocity) or the LOCAL frame's twist (``local=True``)."""
    J = np.zeros((6, arm.nv))
    R0 = _placement(arm, q, frame).rotation
    for i in range(arm.nv):
        e = np.zeros(arm.nv)
        e[i] = STEP
        plus = _placement(arm, pin.integrate(arm.model, q, e), frame)
        minus = _placement(arm, pin.integrate(arm.model, q, -e), frame)
        dp = (plus.translation - minus.translation) / (2 * STEP)
        dw = pin.log3(minus.rotation.T @ plus.rotation) / (2 * STEP)  # body-frame rotation rate
        J[:3, i] = R0.T @ dp if local else dp
        J[3:, i] = dw if local else R0 @ dw
    return J


@pytest.mark.parametrize("name", sorted(TASKS))
def test_every_registered_task_returns_finite_rows_of_the_contracts_shape(name):
    arm = models.build_exo()
    nv = arm.nv
    wrote = 0
    for m in _states(arm, 12, seed=sorted(TASKS).index(name)):
        task, s = _bound(name, arm, m)
        assert task.kind in ("eq", "ineq") and task.weight > 0
        r = task.rows(s)
        if r is None:
            continue
        A, b = np.asarray(r[0]), np.asarray(r[1])
        assert A.ndim == 2 and A.shape[1] == 2 * nv, (name, A.shape)
        assert b.shape == (A.shape[0],), (name, b.shape)
        assert np.isfinite(A).all() and np.isfinite(b).all(), name
        wrote += A.shape[0] > 0
    assert wrote > 0, f"task {name!r} wrote no rows on any state: the contract was not exercised"


@pytest.mark.parametrize("name", sorted(n for n, cls in TASKS.items() if issubclass(cls, WallTask)))
def test_a_walls_rows_use_the_jacobian_of_its_frame(name):
    # reference: finite differences of the frame position (pinocchio forward kinematics), and the row
    # m_n n^T J of WallTask's docstring written in NumPy with that Jacobian
    arm = models.build_exo()
    nv = arm.nv
    checked = 0
    for m in _states(arm, 6, seed=40):
        task, s = _bound(name, arm, m)
        r = task.rows(s)
        assert r is not None  # the hand is inside every wall built by _arguments
        A, _ = r
        J = _fd_jacobian(arm, m.q_rad, task.frame, local=False)[:3]
        for row, (normal, _pen) in zip(A, task.faces(s.position(task.fid))):
            nJ = normal @ J
            m_n = task.alpha / (nJ @ s.Minv @ nJ)
            np.testing.assert_allclose(row[:nv], m_n * nJ, rtol=1e-6, atol=1e-6 * np.abs(m_n * nJ).max())
            np.testing.assert_array_equal(row[nv:], 0.0)
            checked += 1
    assert checked >= 6


def test_transparency_uses_the_local_jacobians_of_the_cuff_sensors():
    # reference: sum_c J_c^T w_c with each J_c by finite differences of the sensor frame's placement
    # (pinocchio forward kinematics), in the sensor's LOCAL frame where its wrench is measured
    arm = models.build_exo()
    for m in _states(arm, 6, seed=41):
        task, s = _bound("transparency", arm, m)
        A, b = task.rows(s)
        expected = sum(_fd_jacobian(arm, m.q_rad, frame, local=True).T @ m.cuff_wrench[c]
                       for c, frame in CUFFS.items())
        np.testing.assert_allclose(b, expected, rtol=1e-6, atol=1e-6 * np.abs(expected).max())
        # and its rows are (1 - c) M on q̈ (the task's docstring), M from pinocchio's CRBA
        M = pin.crba(arm.model, arm.model.createData(), m.q_rad)
        M = np.triu(M) + np.triu(M, 1).T
        np.testing.assert_allclose(A[:, : arm.nv], (1.0 - task.c) * M, rtol=1e-12, atol=1e-12)
