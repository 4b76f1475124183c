"""The compiled torque-elimination arithmetic against its NumPy expressions.

Reference: the dynamics :math:`M \\ddot q + h = \\tau + \\sum_c J_c^T w_c` solved for τ (the controller's
module docstring), written with NumPy on pinocchio's mass matrix of the exoskeleton.
"""

from __future__ import annotations

import numpy as np
import pinocchio as pin

import models
from controllers.hqp.torque_kernels import clipped_torque, torque_limit_rows


def _terms(seed):
    arm = models.build_exo()
    data = arm.model.createData()
    rng = np.random.default_rng(seed)
    q = rng.uniform(*arm.position_limits())
    M = pin.crba(arm.model, data, q)
    M = np.triu(M) + np.triu(M, 1).T
    return M, rng.normal(scale=5.0, size=7), rng.normal(scale=5.0, size=7), np.array(arm.model.effortLimit), rng


def test_torque_limit_rows_are_plus_and_minus_the_dynamics():
    M, h, cuff, tau_max, rng = _terms(1)
    G, g = np.empty((14, 7)), np.empty(14)
    c = torque_limit_rows(M, h, cuff, tau_max, G, g)
    np.testing.assert_array_equal(c, h - cuff)
    qdd = rng.normal(size=7)
    tau = M @ qdd + c
    # G qdd <= g holds exactly when -tau_max <= tau <= tau_max
    np.testing.assert_allclose(G @ qdd - g, np.concatenate([tau - tau_max, -tau - tau_max]), atol=1e-12)


def test_clipped_torque_is_the_dynamics_torque_within_its_limits():
    M, h, cuff, tau_max, rng = _terms(2)
    c = h - cuff
    for scale in (0.1, 1000.0):  # inside the limits, and far beyond them (clipped)
        qdd = rng.normal(scale=scale, size=7)
        tau, finite = clipped_torque(M, qdd, c, tau_max)
        assert finite
        np.testing.assert_allclose(tau, np.clip(M @ qdd + c, -tau_max, tau_max), rtol=1e-13, atol=1e-12)
    tau, finite = clipped_torque(M, np.full(7, np.nan), c, tau_max)
    assert not finite
