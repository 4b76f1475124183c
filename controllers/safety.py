"""A safety monitor that wraps any controller and switches to a safe state on a violation.

:class:`Supervised` runs the inner controller every tick and watches what the
robot senses (the :class:`~models.records.Measurement`: encoders, joint
velocity estimates, cuff force/torque sensors) and the inner controller's own
diagnostics:

* ``cuff_force``: the force magnitude :math:`\\|f_c\\|` measured at each cuff
  against its body-region limit (quasi-static limits of ISO/TS 15066:2016
  Annex A, :data:`BODY_REGION_FORCE_LIMITS_N`; configurable per cuff);
* ``joint_speed``: :math:`|\\dot q_i|` against ``speed_limit_factor`` times the
  model's velocity limit of joint i;
* ``joint_torque``: the inner controller's command :math:`|\\tau_i|` against
  ``torque_limit_factor`` times the model's effort limit;
* ``solve_time``: a watchdog on the inner controller's ``solve_time_s``
  diagnostic [s] (over the budget, or NaN on a tick that is not a fallback,
  on ``solve_time_overrun_ticks`` consecutive ticks);
* ``fallback_rate``: the share of the inner controller's ``fallback`` ticks
  over a sliding window.

A non-finite reading counts as over its limit.  While nothing is violated the
wrapper returns the inner controller's torque unchanged (the very array), so a
run that does not trip is the run without the monitor.  On the first
violation it latches (reason, time, value, limit, cuff or joint) and commands
the safe state, clipped to the torque limits :math:`|\\tau_i| \\le \\tau_{max,i}`:

* ``"damp"``: gravity compensation with joint damping,
  :math:`\\tau = g(q) - D \\dot q` (Spong, Hutchinson & Vidyasagar 2006, sec. 7.3);
* ``"stop"``: a controlled stop (IEC 60204-1 stop category 1 or 2, powered
  braking): each joint is braked at a bounded deceleration,
  :math:`\\ddot q^*_i = -\\operatorname{sign}(\\dot q_i)\\min(a_{max}, |\\dot q_i| / T)`,
  by inverse dynamics of the controller's model,
  :math:`\\tau = M(q)\\ddot q^* + h(q, \\dot q) - \\sum_c J_c^T w_c`; from speed v a
  joint then stops after :math:`v / a_{max}` seconds over
  :math:`v^2 / (2 a_{max})` radians (constant-deceleration kinematics), as long
  as the torque limits allow it.

The inner controller keeps running while tripped (its diagnostics are still
logged, and the watches still judge it).  With ``release="hold"`` the monitor
releases once the latched quantity has stayed under ``release_fraction`` of its
limit for ``release_hold_s`` and no watch is violated; with ``release="never"``
it stays latched until the next reset.

References
----------
.. [ISO15066] ISO/TS 15066:2016, Robots and robotic devices -- Collaborative robots, Annex A, Table A.2
   (maximum permissible quasi-static forces per body region).
.. [IEC60204] IEC 60204-1:2016, Safety of machinery -- Electrical equipment of machines, 9.2.2 (stop categories).
.. [Spong2006] M. W. Spong, S. Hutchinson, M. Vidyasagar, Robot Modeling and Control, Wiley, 2006.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from types import MappingProxyType

import numpy as np
import pinocchio as pin

from models.errors import ParameterError
from models.records import Measurement

from .base import Controller, ControllerContext
from .tasks import TickState

__all__ = ["BODY_REGION_FORCE_LIMITS_N", "SAFE_STATES", "RELEASES", "TRIP_REASONS", "TRIP_CODES", "SafetyParams",
           "SafetyMonitor", "Supervised", "Trip"]

#: Quasi-static force limits [N] per body region, ISO/TS 15066:2016 Annex A, Table A.2 ([ISO15066]_):
#: hand and fingers 140 N (confirmed); upper arm and elbow 150 N, lower arm and wrist 160 N (from memory,
#: unconfirmed).  Keyed by the default cuff names.
BODY_REGION_FORCE_LIMITS_N: Mapping[str, float] = MappingProxyType(
    {"upper_arm": 150.0, "forearm": 160.0, "hand": 140.0})

#: Trip reason code -> name (the logged ``safety_reason``; 0: not tripped).
TRIP_REASONS: Mapping[int, str] = MappingProxyType({
    0: "none", 1: "cuff_force", 2: "joint_speed", 3: "joint_torque", 4: "solve_time", 5: "fallback_rate"})
#: Trip reason name -> code.
TRIP_CODES: Mapping[str, int] = MappingProxyType({v: k for k, v in TRIP_REASONS.items()})
SAFE_STATES = ("damp", "stop")
RELEASES = ("never", "hold")


def _number(o: str, name: str, x, unit: str, *, low: float = 0.0, low_open: bool = True,
            high: float = math.inf) -> float:
    ok = isinstance(x, (int, float, np.integer, np.floating)) and not isinstance(x, bool) and math.isfinite(x)
    if not ok or (x <= low if low_open else x < low) or x > high:
        lo = f"> {low}" if low_open else f">= {low}"
        hi = f" and <= {high}" if math.isfinite(high) else ""
        raise ParameterError(f"{o}.{name} must be a finite number {lo}{hi}{(' ' + unit) if unit else ''}, "
                             f"got {x!r}")
    return float(x)


@dataclass(frozen=True, kw_only=True)
class SafetyParams:
    """Limits and behaviour of the safety monitor, SI units.

    Attributes
    ----------
    force_limits_N : mapping str -> float, optional
        Cuff name -> force limit [N].  None: :data:`BODY_REGION_FORCE_LIMITS_N` for those of the robot's cuffs
        it names.  Given: every name must be a cuff of the robot (checked at reset), and only those cuffs are
        watched.
    speed_limit_factor : float, default 2.0
        Joint speed limit as a multiple of the model's velocity limit (URDF ``velocity``, the drive's rated
        speed).  A wearer drives the robot past its rated speed in the shipped scenarios: up to 1.7 times in
        ``throw`` (95th-percentile man, ``walls``), 1.45 times in ``limit_approach``; the default trips at twice
        it, so that no shipped scenario trips for any built-in wearer (a tighter clinic setting: lower it).
    torque_limit_factor : float, default 1.0
        Torque command limit as a multiple of the model's effort limit (URDF ``effort``); a command at the limit
        (a saturated one) does not trip, only one beyond it (relative tolerance 1e-9).
    solve_time_budget_s : float or None, default 0.05
        Watchdog on the inner controller's ``solve_time_s`` [s]: 50 control periods at 1 kHz, generous on
        purpose so that a busy shared machine does not trip it (a real-time target would use one period).
        None: no watchdog.  The only watch on wall-clock time: a run it trips is not reproducible.
    solve_time_overrun_ticks : int, default 3
        Consecutive ticks over the budget (or NaN) that trip the watchdog: one late tick on a shared machine is
        the scheduler, several in a row are a controller that cannot keep up.
    fallback_window_s : float, default 0.1
        Sliding window of the fallback-rate watch [s].
    fallback_max_fraction : float, default 0.1
        Largest share of fallback ticks in the window; more trips.
    safe_state : {"damp", "stop"}, default "damp"
        Gravity compensation with joint damping, or a controlled stop.  The stop brakes to standstill and then
        holds it under power (stop category 2), against the wearer too: in ``scenarios/demos/safety_trip.py``
        it held the arm while the wearer pulled back, up to 157 N at a cuff (the hand's limit is 140 N), where
        "damp" stayed under 78 N.  With a wearer, prefer "damp".
    damping_Nm_s_per_rad : float, default 2.0
        D of the "damp" safe state [N m s/rad] (common practice: a few N m s/rad for an arm).
    stop_deceleration_rad_s2 : float, default 10.0
        Largest braking deceleration of the "stop" safe state [rad/s²].
    release : {"never", "hold"}, default "hold"
        Stay latched until the next reset, or release after the condition below.
    release_fraction : float, default 0.5
        The latched quantity must be under this fraction of its limit ...
    release_hold_s : float, default 0.5
        ... for this long [s] (and no watch violated) before the monitor releases.
    """

    force_limits_N: Mapping[str, float] | None = None
    speed_limit_factor: float = 2.0
    torque_limit_factor: float = 1.0
    solve_time_budget_s: float | None = 0.05
    solve_time_overrun_ticks: int = 3
    fallback_window_s: float = 0.1
    fallback_max_fraction: float = 0.1
    safe_state: str = "damp"
    damping_Nm_s_per_rad: float = 2.0
    stop_deceleration_rad_s2: float = 10.0
    release: str = "hold"
    release_fraction: float = 0.5
    release_hold_s: float = 0.5

    def __post_init__(self) -> None:
        o, set_ = "SafetyParams", object.__setattr__
        if self.force_limits_N is not None:
            if not isinstance(self.force_limits_N, Mapping):
                raise ParameterError(f"{o}.force_limits_N must be a mapping cuff name -> N, got "
                                     f"{self.force_limits_N!r}")
            limits = {}
            for cuff, lim in self.force_limits_N.items():
                if not (isinstance(cuff, str) and cuff):
                    raise ParameterError(f"{o}.force_limits_N: cuff names must be non-empty strings, got {cuff!r}")
                limits[cuff] = _number(o, f"force_limits_N[{cuff!r}]", lim, "N")
            set_(self, "force_limits_N", limits)
        set_(self, "speed_limit_factor", _number(o, "speed_limit_factor", self.speed_limit_factor, ""))
        set_(self, "torque_limit_factor", _number(o, "torque_limit_factor", self.torque_limit_factor, ""))
        if self.solve_time_budget_s is not None:
            set_(self, "solve_time_budget_s", _number(o, "solve_time_budget_s", self.solve_time_budget_s, "s"))
        n = self.solve_time_overrun_ticks
        if isinstance(n, bool) or not isinstance(n, (int, np.integer)) or n < 1:
            raise ParameterError(f"{o}.solve_time_overrun_ticks must be an integer >= 1, got {n!r}")
        set_(self, "solve_time_overrun_ticks", int(n))
        set_(self, "fallback_window_s", _number(o, "fallback_window_s", self.fallback_window_s, "s"))
        set_(self, "fallback_max_fraction",
             _number(o, "fallback_max_fraction", self.fallback_max_fraction, "", low_open=False, high=1.0))
        if self.safe_state not in SAFE_STATES:
            raise ParameterError(f"{o}.safe_state must be one of {', '.join(SAFE_STATES)}, got {self.safe_state!r}")
        set_(self, "damping_Nm_s_per_rad",
             _number(o, "damping_Nm_s_per_rad", self.damping_Nm_s_per_rad, "N m s/rad", low_open=False))
        set_(self, "stop_deceleration_rad_s2",
             _number(o, "stop_deceleration_rad_s2", self.stop_deceleration_rad_s2, "rad/s²"))
        if self.release not in RELEASES:
            raise ParameterError(f"{o}.release must be one of {', '.join(RELEASES)}, got {self.release!r}")
        set_(self, "release_fraction", _number(o, "release_fraction", self.release_fraction, "", high=1.0))
        set_(self, "release_hold_s", _number(o, "release_hold_s", self.release_hold_s, "s", low_open=False))

    def settings(self) -> dict:
        """The parameters as plain JSON values."""
        d = {k: getattr(self, k) for k in self.__dataclass_fields__}
        if d["force_limits_N"] is not None:
            d["force_limits_N"] = dict(d["force_limits_N"])
        return d


@dataclass(frozen=True)
class Trip:
    """One trip of the monitor: ``reason`` (a :data:`TRIP_REASONS` name), time ``t_s`` [s], the ``value`` and
    its ``limit`` (N, rad/s, N m, s, or a share of ticks), ``where`` (cuff or joint name, "" for the inner
    controller's watches), and ``released_s`` (the time it released, None while latched)."""

    reason: str
    t_s: float
    value: float
    limit: float
    where: str
    released_s: float | None = None


class SafetyMonitor:
    """The watches, the latch and the safe state (no controller of its own: :class:`Supervised` drives it).

    Call :meth:`reset` with the robot's context, then :meth:`check` every tick with the measurement, the inner
    controller's command and diagnostics; :attr:`tripped` says whether the safe state is to be commanded, and
    :meth:`safe_torque` gives it.
    """

    def __init__(self, params: SafetyParams | None = None) -> None:
        if params is None:
            params = SafetyParams()
        if not isinstance(params, SafetyParams):
            raise ParameterError(f"SafetyMonitor needs SafetyParams, got {type(params).__name__}")
        self.params = params
        self.trips: list[Trip] = []
        self.tripped = False

    def reset(self, context: ControllerContext) -> None:
        """Prepare for a run: resolve the watched cuffs and the joint limits; clear the latch and the trips."""
        p, arm = self.params, context.arm
        cuffs = list(context.cuff_frames)
        if p.force_limits_N is None:
            limits = {c: BODY_REGION_FORCE_LIMITS_N[c] for c in cuffs if c in BODY_REGION_FORCE_LIMITS_N}
        else:
            unknown = [c for c in p.force_limits_N if c not in cuffs]
            if unknown:
                raise ParameterError(f"SafetyParams.force_limits_N names cuff {unknown[0]!r}, which the robot does "
                                     f"not have; its cuffs are {', '.join(cuffs) or '(none)'}")
            limits = dict(p.force_limits_N)
        self._force_limits = list(limits.items())
        self._joint_names = list(arm.joint_names)
        self._speed_limit = p.speed_limit_factor * np.asarray(arm.model.velocityLimit, dtype=float)
        self._tau_max = np.asarray(arm.model.effortLimit, dtype=float)
        self._torque_limit = p.torque_limit_factor * self._tau_max * (1 + 1e-9)
        self._dt = context.dt_s
        self._window = max(1, int(round(p.fallback_window_s / context.dt_s)))
        self._fallbacks = np.zeros(self._window, dtype=bool)
        self._fb_count, self._fb_at = 0, 0
        self._overruns = 0
        self._model = arm.model
        self._data = arm.model.createData()
        self._state = TickState(arm, dict(context.cuff_frames), context.dt_s) if p.safe_state == "stop" else None
        self.trips = []
        self.tripped = False
        self._latched: tuple[str, str] | None = None  # (reason, where) of the trip held
        self._under_since: float | None = None

    # -- the watches ------------------------------------------------------------------------------
    def readings(self, m: Measurement, tau_cmd: np.ndarray, diag: Mapping[str, float]
                 ) -> list[tuple[str, str, float, float]]:
        """Every watched quantity this tick as (reason, where, value, limit), in the order the watches trip.

        For each reason the entry with the largest value-to-limit ratio (a non-finite value ranks first).
        Also advances the fallback window (call once per tick).
        """
        out = []
        worst = None
        for cuff, lim in self._force_limits:
            w = m.cuff_wrench.get(cuff)
            if w is None:
                continue
            f = math.sqrt(float(w[0]) ** 2 + float(w[1]) ** 2 + float(w[2]) ** 2)
            r = f / lim if math.isfinite(f) else math.inf
            if worst is None or r > worst[0]:
                worst = (r, cuff, f, lim)
        if worst is not None:
            out.append(("cuff_force", worst[1], worst[2], worst[3]))
        out.append(self._worst_joint("joint_speed", np.abs(np.asarray(m.dq_rad_s, dtype=float)), self._speed_limit))
        out.append(self._worst_joint("joint_torque", np.abs(np.asarray(tau_cmd, dtype=float)), self._torque_limit))
        fallback = diag.get("fallback")
        is_fallback = fallback is not None and fallback > 0.5
        budget = self.params.solve_time_budget_s
        if budget is not None and "solve_time_s" in diag:
            st = float(diag["solve_time_s"])
            if math.isnan(st) and is_fallback:  # no solve on this tick: the fallback-rate watch judges it
                st = 0.0
            st = st if math.isfinite(st) else math.inf
            self._overruns = self._overruns + 1 if st > budget else 0
            # over the budget counts only on the n-th consecutive late tick; the release judges the tick itself
            late = self._overruns >= self.params.solve_time_overrun_ticks or (self.tripped and st > budget)
            out.append(("solve_time", "", st if late else min(st, budget), budget))
        if fallback is not None:
            slot = self._fb_at
            self._fb_count += int(is_fallback) - int(self._fallbacks[slot])
            self._fallbacks[slot] = is_fallback
            self._fb_at = (slot + 1) % self._window
            out.append(("fallback_rate", "", self._fb_count / self._window, self.params.fallback_max_fraction))
        return out

    def _worst_joint(self, reason: str, values: np.ndarray, limits: np.ndarray) -> tuple[str, str, float, float]:
        i = int(np.argmax(values / limits))  # an infinite ratio ranks high, a NaN first (numpy.argmax's rule)
        return reason, self._joint_names[i], float(values[i]) if np.isfinite(values[i]) else math.inf, float(limits[i])

    def check(self, m: Measurement, tau_cmd: np.ndarray, diag: Mapping[str, float]) -> bool:
        """Judge one tick; latch on a violation, release as :class:`SafetyParams` says.  Returns :attr:`tripped`."""
        readings = self.readings(m, tau_cmd, diag)
        violated = next((r for r in readings if r[2] > r[3]), None)
        t = m.t_s
        if not self.tripped:
            if violated is not None:
                self._trip(violated, t)
            return self.tripped
        if self.params.release == "never":
            return True
        reason = self._latched[0]
        # the worst cuff or joint of the latched watch (largest ratio): all of them under the fraction
        held = next((r for r in readings if r[0] == reason), None)
        ok = violated is None and (held is None or held[2] < self.params.release_fraction * held[3])
        if not ok:
            self._under_since = None
        elif self._under_since is None:
            self._under_since = t
        if self._under_since is not None and t - self._under_since >= self.params.release_hold_s - 1e-12:
            last = self.trips[-1]
            self.trips[-1] = Trip(last.reason, last.t_s, last.value, last.limit, last.where, released_s=t)
            self.tripped, self._latched, self._under_since = False, None, None
        return self.tripped

    def _trip(self, reading: tuple[str, str, float, float], t: float) -> None:
        reason, where, value, limit = reading
        self.trips.append(Trip(reason, t, value, limit, where))
        self.tripped, self._latched, self._under_since = True, (reason, where), None

    # -- the safe state ---------------------------------------------------------------------------
    def safe_torque(self, m: Measurement) -> np.ndarray:
        """The safe state's torque (nv,) [N m] for this measurement, clipped to the effort limits."""
        p = self.params
        if p.safe_state == "damp":
            tau = pin.computeGeneralizedGravity(self._model, self._data, m.q_rad) - p.damping_Nm_s_per_rad * np.asarray(
                m.dq_rad_s, dtype=float)
        else:
            s = self._state
            s.update(m)
            v = np.asarray(m.dq_rad_s, dtype=float)
            qdd = -np.sign(v) * np.minimum(p.stop_deceleration_rad_s2, np.abs(v) / self._dt)
            tau = s.M @ qdd + s.h - s.cuff_force
        return np.clip(tau, -self._tau_max, self._tau_max)


class Supervised(Controller):
    """Any controller under the safety monitor: its torque while nothing is violated, the safe state after.

    Parameters
    ----------
    inner : Controller
    params : SafetyParams, optional
        Default: ``SafetyParams()``.

    Notes
    -----
    Diagnostics: the inner controller's (same names), then ``safety_tripped`` (1.0 while the safe state is
    commanded), ``safety_reason`` (the :data:`TRIP_REASONS` code of the trip held, 0 when not tripped),
    ``safety_value``, ``safety_limit`` (the tripping value and its limit, 0 when not tripped: a log without NaN) and
    ``safety_where`` (index of the tripping cuff in the context's cuffs, or of the joint; -1 for the inner
    controller's watches and when not tripped).  The name is the inner controller's.
    """

    def __init__(self, inner: Controller, params: SafetyParams | None = None) -> None:
        super().__init__()
        if not isinstance(inner, Controller):
            raise ParameterError(f"Supervised needs a Controller to wrap, got {type(inner).__name__}")
        self.inner = inner
        self.monitor = SafetyMonitor(params)
        self.params = self.monitor.params
        self.name = inner.name
        self._inner_names: tuple[str, ...] | None = None

    def reset(self, context: ControllerContext) -> None:
        super().reset(context)
        self.monitor.reset(context)  # first: an unknown cuff in the limits is reported before the inner's work
        self.inner.reset(context)
        self._inner_names = tuple(self.inner.diagnostic_names())
        self._cuffs = list(context.cuff_frames)
        self._joints = list(context.arm.joint_names)
        self._diag = {**dict.fromkeys(self._inner_names, math.nan), **self._safety_diag()}

    #: The monitor's diagnostics while nothing is tripped (the same values every tick).
    _IDLE = MappingProxyType({"safety_tripped": 0.0, "safety_reason": 0.0, "safety_value": 0.0, "safety_limit": 0.0,
                              "safety_where": -1.0})

    def _safety_diag(self) -> Mapping[str, float]:
        mon = self.monitor
        if not mon.tripped:
            return self._IDLE
        trip = mon.trips[-1]
        names = self._cuffs if trip.reason == "cuff_force" else self._joints
        where = float(names.index(trip.where)) if trip.where in names else -1.0
        return {"safety_tripped": 1.0, "safety_reason": float(TRIP_CODES[trip.reason]), "safety_value": trip.value,
                "safety_limit": trip.limit, "safety_where": where}

    def step(self, measurement: Measurement) -> np.ndarray:
        tau = self.inner.step(measurement)
        inner_diag = self.inner.diagnostics()
        tripped = self.monitor.check(measurement, tau, inner_diag)
        d = self._diag
        d.update(inner_diag)  # one float per name of the inner's diagnostic_names (Controller.diagnostics)
        d.update(self._safety_diag())
        return self.monitor.safe_torque(measurement) if tripped else tau

    def diagnostic_names(self) -> tuple[str, ...]:
        inner = self._inner_names if self._inner_names is not None else tuple(self.inner.diagnostic_names())
        return (*inner, "safety_tripped", "safety_reason", "safety_value", "safety_limit",
                "safety_where")

    def diagnostics(self) -> Mapping[str, float]:
        return self._diag

    @property
    def trips(self) -> list[Trip]:
        """The trips since the last reset (:class:`Trip`)."""
        return list(self.monitor.trips)

    def structure(self) -> dict:
        """The inner controller's :meth:`~Controller.structure` (its levels and settings), with ``safety``: the
        monitor's settings (:meth:`SafetyParams.settings`) and ``supervised_type``: this wrapper's class."""
        return {**self.inner.structure(), "safety": self.params.settings(), "supervised_type": type(self).__name__}
