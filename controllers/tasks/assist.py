"""Tasks that follow the exercise's reference hand path: assist-as-needed and a guidance tunnel.

Both read only what the robot senses: the tick's time (``Measurement.t_s``), the encoders (the hand point
by forward kinematics on the controller's model) and the hand cuff's force/torque sensor.  The path is the
therapist's (:class:`~controllers.tasks.HandPath`), never the wearer's intent.  Rows in x = [q̈; τ] through the
public :class:`~controllers.tasks.base.Task` API; the tunnel's wall row and the estimate of the wearer's hand
point are the kernels of the virtual walls (:mod:`controllers.tasks.kernels`).

References
----------
.. [Emken2007] J. L. Emken, R. Benitez, D. J. Reinkensmeyer, "Human-robot cooperative movement training:
   learning a novel sensory motor transformation during walking with robotic assistance-as-needed",
   J. NeuroEngineering and Rehabilitation 4:8, 2007 (an error-based controller with a forgetting factor,
   derived as the optimum of a cost on error and assistance; confirmed).
.. [EmkenBobrow2005] J. L. Emken, J. E. Bobrow, D. J. Reinkensmeyer, "Robotic movement training as an
   optimization problem: designing a controller that assists only as needed", Proc. IEEE 9th Int. Conf. on
   Rehabilitation Robotics (ICORR), 2005, pp. 307-312 (venue, year and pages from memory, unconfirmed).
.. [Khatib1987] O. Khatib, "A unified approach for motion and force control of robot manipulators: the
   operational space formulation", IEEE J. Robotics and Automation 3(1):43-53, 1987.
"""

from __future__ import annotations

import math

import numpy as np

from models.checks import nonnegative, positive
from models.errors import ParameterError

from . import kernels
from .base import q_rows
from .hand import HandPointTask
from .paths import HandPath
from .state import TickState
from .walls import WallLaw

__all__ = ["AssistAsNeeded", "GuidanceTunnel", "adapted_stiffness", "TUNNEL_LAW"]

#: The default wall outside the guidance tunnel: 400 N/m, 10 N s/m (common practice, as the virtual walls).
TUNNEL_LAW = WallLaw(400.0, 10.0)


def adapted_stiffness(K: float, error_m: float, forgetting: float, gain_N_per_m2: float,
                      max_stiffness_N_per_m: float) -> float:
    """One step of the error-based adaptation with forgetting (Emken et al. 2007), bounded.

    .. math:: K_{k+1} = \\min\\big(\\max(f K_k + g \\lVert e_k \\rVert,\\ 0),\\ K_{max}\\big)

    With no error the stiffness decays geometrically, :math:`K_k = f^k K_0`; under a constant error e it
    tends to the fixed point :math:`K^* = g e / (1 - f)` (below the bound).
    """
    return min(max(forgetting * K + gain_N_per_m2 * error_m, 0.0), max_stiffness_N_per_m)


class _PathTask(HandPointTask):
    """What the path tasks share: the path, and the hand settings of :class:`~controllers.tasks.hand.HandPointTask`."""

    def _common(self, path, frame: str, sensor: str, inertia_compensation: float, weight: float,
                cuff_stiffness_N_per_m) -> None:
        if not isinstance(path, HandPath):
            raise ParameterError(f"{type(self).__name__}.path must be a HandPath (the exercise's reference hand "
                                 f"path), got {type(path).__name__}")
        self.path = path
        self._hand_settings(frame, sensor, inertia_compensation, weight, cuff_stiffness_N_per_m)


class AssistAsNeeded(_PathTask):
    """A spring-damper of the hand toward the reference path whose stiffness grows with the error and fades
    when the wearer succeeds (assist-as-needed, Emken et al. 2007).

    With :math:`e = p_{ref}(t) - p` the error of the hand point p from the path point of the tick's time and
    :math:`\\dot e = \\dot p_{ref}(t) - J\\dot q`, the task commands the force on the hand

    .. math:: F_k = K_k \\big(e + \\beta\\, \\dot e\\big)

    (a spring of stiffness :math:`K_k` and a damper :math:`\\beta K_k` toward the moving path point, so that all
    of the assistance fades with K), rendered on top of the transparency law: nv rows

    .. math:: \\alpha M(q)\\,\\ddot q = \\sum_c J_c^T w_c + J_p^T F_k

    (:class:`~controllers.tasks.Transparency` with the force :math:`F_k` added at the hand point, J_p the
    linear rows of its world-aligned Jacobian).  With :math:`K = 0` these are the transparency rows; in
    quasi-static contact the wearer feels :math:`F_k`.  After the rows the stiffness is adapted by the
    error with forgetting (:func:`adapted_stiffness`), per control tick of period T:

    .. math:: K_{k+1} = \\min(\\max(f K_k + g \\lVert e_k \\rVert, 0), K_{max}),
              \\qquad f = e^{-T/\\tau_f}, \\quad g = \\gamma T,

    the law of Emken et al. (2007), there per movement on the assistance force, here per tick on the
    stiffness: with no error K decays as :math:`f^k K_0` (time constant :math:`\\tau_f`), under a
    constant error it settles at :math:`K^* = g e / (1 - f) \\approx \\gamma \\tau_f e`.

    Parameters
    ----------
    path : HandPath
        The exercise's reference path of the hand point [m], world frame.
    initial_stiffness_N_per_m : float, default 0
        :math:`K_0` at the start of the run.
    max_stiffness_N_per_m : float, default 500
        :math:`K_{max}`: kept well below the hand cuff's stiffness (2.1-4.5 kN/m, :class:`models.cuffs.CuffParams`)
        so the rendered spring is not limited by the cuff (common practice).
    forgetting_time_s : float, default 2
        :math:`\\tau_f` [s], time constant of the forgetting (illustrative: a few movements' time).
    gain_N_per_m2_s : float, default 8000
        :math:`\\gamma` [N/m per m of error per s]: with :math:`\\tau_f` = 2 s, a steady 3 cm error calls for
        480 N/m (illustrative).
    damping_time_s : float, default 0.1
        :math:`\\beta` [s]: damping ratio about 0.6 at :math:`K_{max}` with 3 kg at the hand (common practice).
    inertia_compensation : float, default 0.5
        c of :class:`~controllers.tasks.Transparency`, :math:`\\alpha = 1 - c`.
    frame, sensor : str
        The robot's hand point frame and the hand cuff's sensor.
    weight : float
    cuff_stiffness_N_per_m : (3,) float, optional
        As for :class:`~controllers.tasks.WallTask`: the error is then taken at the estimated wearer's hand.

    Notes
    -----
    Diagnostics (logged ``diag_assist_as_needed_*``): ``stiffness_N_per_m`` (K of the tick), ``error_m``
    (:math:`\\lVert e \\rVert`) and ``force_N`` (:math:`\\lVert F \\rVert`).  The stiffness is state kept
    between ticks: it starts again at :math:`K_0` at every :meth:`bind` (every controller reset).
    """

    name, kind = "assist_as_needed", "eq"

    def __init__(self, path: HandPath, *, initial_stiffness_N_per_m: float = 0.0,
                 max_stiffness_N_per_m: float = 500.0, forgetting_time_s: float = 2.0,
                 gain_N_per_m2_s: float = 8000.0, damping_time_s: float = 0.1, inertia_compensation: float = 0.5,
                 frame: str = "exo_hand_point", sensor: str = "hand", weight: float = 1.0,
                 cuff_stiffness_N_per_m=None) -> None:
        o = "AssistAsNeeded"
        self._common(path, frame, sensor, inertia_compensation, weight, cuff_stiffness_N_per_m)
        self.max_stiffness_N_per_m = positive(o, "max_stiffness_N_per_m", max_stiffness_N_per_m, "N/m")
        self.initial_stiffness_N_per_m = nonnegative(o, "initial_stiffness_N_per_m", initial_stiffness_N_per_m,
                                                     "N/m")
        if self.initial_stiffness_N_per_m > self.max_stiffness_N_per_m:
            raise ParameterError(f"{o}.initial_stiffness_N_per_m must be at most max_stiffness_N_per_m = "
                                 f"{self.max_stiffness_N_per_m:g} N/m, got {self.initial_stiffness_N_per_m:g}")
        self.forgetting_time_s = positive(o, "forgetting_time_s", forgetting_time_s, "s")
        self.gain_N_per_m2_s = nonnegative(o, "gain_N_per_m2_s", gain_N_per_m2_s, "N/m^2/s")
        self.damping_time_s = nonnegative(o, "damping_time_s", damping_time_s, "s")
        self.stiffness_N_per_m = self.initial_stiffness_N_per_m
        self._diag = {"stiffness_N_per_m": self.stiffness_N_per_m, "error_m": math.nan, "force_N": math.nan}

    def bind(self, state: TickState) -> None:
        super().bind(state)
        T = state.dt_s
        #: per-tick forgetting factor f = exp(-T / tau_f) and gain g = gamma T of the adaptation
        self.forgetting = math.exp(-T / self.forgetting_time_s)
        self.gain = self.gain_N_per_m2_s * T
        self.stiffness_N_per_m = self.initial_stiffness_N_per_m
        self._diag = {"stiffness_N_per_m": self.stiffness_N_per_m, "error_m": math.nan, "force_N": math.nan}

    def diagnostic_names(self) -> tuple[str, ...]:
        return ("stiffness_N_per_m", "error_m", "force_N")

    def diagnostics(self):
        return self._diag

    def rows(self, state: TickState):
        p, _, _ = self.hand(state)
        p_ref, v_ref, _ = self.path.at(state.measurement.t_s)
        Jp = state.jacobian(self.fid)[:3]
        e = p_ref - p
        K = self.stiffness_N_per_m
        F = K * (e + self.damping_time_s * (v_ref - Jp @ state.dq))
        error = float(np.sqrt(e @ e))
        d = self._diag
        d["stiffness_N_per_m"], d["error_m"], d["force_N"] = K, error, float(np.sqrt(F @ F))
        self.stiffness_N_per_m = adapted_stiffness(K, error, self.forgetting, self.gain, self.max_stiffness_N_per_m)
        return q_rows(state.nv, self.alpha * state.M), state.cuff_force + Jp.T @ F


class GuidanceTunnel(_PathTask):
    """A tube of radius r around the reference path: free inside, a one-sided spring-damper wall outside.

    The tube is the volume a ball of radius r sweeps as it follows the path point of the time
    :math:`c(t)` (time-indexed: the wearer keeps to the exercise's pace within r).  With the hand point p,
    :math:`d = \\lVert p - c(t) \\rVert`, the radial unit vector :math:`n = (p - c)/d` and the
    penetration :math:`\\delta = d - r > 0`, one row pushes the hand back toward the path as the wall task
    does (:class:`~controllers.tasks.WallTask`, kernel :func:`~controllers.tasks.kernels.wall_rows`):

    .. math::
        m_n\\, n^T (J \\ddot q + \\dot J \\dot q) = n^T f_{hand} - K \\delta - B\\, n^T (J \\dot q - \\dot c),
        \\qquad m_n = \\alpha / (n^T J M^{-1} J^T n)

    so that in quasi-static contact the wearer feels :math:`K \\delta + B \\dot\\delta` along the radial
    direction (Hooke's law for the spring; the damper acts on the radial speed relative to the moving centre,
    passed to the kernel as the penetration :math:`\\delta - (B/K) n^T \\dot c`).  Inside the tube
    (:math:`d \\le r`) the task has no rows.

    Parameters
    ----------
    path : HandPath
    radius_m : float, default 0.03
        r [m] (illustrative: a few centimetres of freedom around the path).
    law : WallLaw or (K, B), default (400 N/m, 10 N s/m)
        The wall outside the tube (common practice, as the virtual walls).
    inertia_compensation, frame, sensor, weight, cuff_stiffness_N_per_m
        As for :class:`~controllers.tasks.WallTask`.

    Notes
    -----
    Diagnostics (``diag_guidance_tunnel_*``): ``distance_m`` (d) and ``penetration_m`` (:math:`\\max(\\delta, 0)`).
    """

    name, kind = "guidance_tunnel", "eq"

    def __init__(self, path: HandPath, radius_m: float = 0.03, law: WallLaw = TUNNEL_LAW, *,
                 inertia_compensation: float = 0.5, frame: str = "exo_hand_point", sensor: str = "hand",
                 weight: float = 1.0, cuff_stiffness_N_per_m=None) -> None:
        self._common(path, frame, sensor, inertia_compensation, weight, cuff_stiffness_N_per_m)
        self.radius_m = positive("GuidanceTunnel", "radius_m", radius_m, "m")
        self.law = law if isinstance(law, WallLaw) else WallLaw(*law)
        self._diag = {"distance_m": math.nan, "penetration_m": math.nan}

    def diagnostic_names(self) -> tuple[str, ...]:
        return ("distance_m", "penetration_m")

    def diagnostics(self):
        return self._diag

    def rows(self, state: TickState):
        p, R, w = self.hand(state)
        c, v_c, _ = self.path.at(state.measurement.t_s)
        r = p - c
        dist = float(np.sqrt(r @ r))
        pen = dist - self.radius_m
        self._diag["distance_m"], self._diag["penetration_m"] = dist, max(pen, 0.0)
        if pen <= 0.0 or dist < 1e-12:
            return None
        n = r / dist
        K, B = self.law.stiffness_N_per_m, self.law.damping_N_s_per_m
        pens = np.array([pen - (B / K) * float(n @ v_c)])
        return kernels.wall_rows(n.reshape(1, 3), pens, R, w, state.jacobian(self.fid), state.drift(self.fid),
                                 state.Minv, state.dq, self.alpha, K, B)
