"""A test fixture that takes the wearer's place at the robot's hand cuff and imposes a motion on it.

The fixture holds the hand cuff point p (the origin of the robot's hand cuff frame) through a stiff
spring-damper to an imposed point

.. math::  x(t) = p_0 + s(t)\\, u,

with ``u`` a unit direction in the world frame, ``p_0`` the cuff point at the start and ``s(t)`` the imposed
displacement [m] of a motion (:class:`Multisine`, :class:`Chirp`, :class:`PiecewiseVelocity`) less its value
at t = 0, so that the imposed point starts at the cuff point.  The force of the fixture on the robot
[N, world frame] is

.. math::  F = K_a (u u^T)(x - p) + D_a (u u^T)(\\dot x - \\dot p)
            + K_l (I - u u^T)(x - p) + D_l (I - u u^T)(\\dot x - \\dot p),

along the direction with the axial stiffness and damping ``K_a``, ``D_a``, sideways with the lateral ones
``K_l``, ``D_l``.  By default the fixture is a linear stage: it holds the cuff sideways as stiffly as along
the motion (``lateral="held"``), so that gravity cannot pull the hand aside.  With ``lateral="free"`` the
cuff is free sideways: a force acts only along ``u`` and the mass felt along ``u`` is then
:math:`1 / (u^T J M^{-1} J^T u)` (Khatib 1987), where with the cuff held in all three directions it is
:math:`u^T \\Lambda u`, :math:`\\Lambda = (J M^{-1} J^T)^{-1}`.

The fixture acts on the robot as the joint torque :math:`J^T F` (``J`` the 3 x nv linear Jacobian of the cuff
point, world axes), added to the drives' torque before every physics substep (:class:`FixtureDrive`, an actuator
the plant asks per substep: :meth:`sim.physics.plant.CoupledPlant.advance`).

References
----------
O. Khatib, "A unified approach for motion and force control of robot manipulators: the operational space
formulation", IEEE Journal of Robotics and Automation 3(1):43-53, 1987.
M. R. Schroeder, "Synthesis of low-peak-factor signals and binary sequences with low autocorrelation",
IEEE Transactions on Information Theory 16(1):85-89, 1970.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
import pinocchio as pin

from models.errors import ParameterError

__all__ = ["Multisine", "Chirp", "PiecewiseVelocity", "Motion", "HandFixture", "FixtureDrive", "LATERAL_MODES"]

#: How the fixture treats the cuff sideways of the motion: held as a linear stage does, or free.
LATERAL_MODES = ("held", "free")


def _positive(owner: str, name: str, value, unit: str) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float, np.floating, np.integer)) \
            or not math.isfinite(value) or value <= 0:
        raise ParameterError(f"{owner}.{name} must be a finite number > 0 [{unit}], got {value!r}")
    return float(value)


def _nonnegative(owner: str, name: str, value, unit: str) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float, np.floating, np.integer)) \
            or not math.isfinite(value) or value < 0:
        raise ParameterError(f"{owner}.{name} must be a finite number >= 0 [{unit}], got {value!r}")
    return float(value)


@dataclass(frozen=True)
class Multisine:
    """A periodic sum of sines at every multiple of ``resolution_Hz`` in ``band_Hz``, with Schroeder phases.

    .. math::  s(t) = \\sum_i a_i \\sin(2 \\pi f_i t + \\phi_i), \\quad
               \\phi_i = -\\pi i (i - 1) / N  \\quad\\text{(Schroeder 1970)},

    each line with the same velocity amplitude (:math:`a_i \\propto 1 / f_i`, so that a mass-like load sees
    a force spread over the band), scaled so that the peak displacement over a period is ``amplitude_m``.
    The period is ``1 / resolution_Hz`` [s]: an analysis window of that length holds whole periods of every
    line (no leakage with a rectangular window).
    """

    amplitude_m: float = 0.005
    band_Hz: tuple[float, float] = (0.5, 20.0)
    resolution_Hz: float = 0.25

    def __post_init__(self) -> None:
        o = "Multisine"
        _positive(o, "amplitude_m", self.amplitude_m, "m")
        _positive(o, "resolution_Hz", self.resolution_Hz, "Hz")
        lo, hi = _band(o, self.band_Hz)
        object.__setattr__(self, "band_Hz", (lo, hi))
        df = self.resolution_Hz
        n0, n1 = max(1, math.ceil(lo / df - 1e-9)), math.floor(hi / df + 1e-9)
        if n1 < n0:
            raise ParameterError(f"{o}.band_Hz {self.band_Hz!r} holds no multiple of resolution_Hz = {df}")
        f = np.arange(n0, n1 + 1) * df
        i = np.arange(1, len(f) + 1)
        phase = -np.pi * i * (i - 1) / len(f)
        a = 1.0 / f
        t = np.arange(0.0, 1.0 / df, 1.0 / (64 * f[-1]))  # a fine grid over one period for the peak
        peak = np.max(np.abs(np.sin(2 * np.pi * np.outer(t, f) + phase) @ a))
        if len(f) > 4000:
            raise ParameterError(f"{o}: band_Hz {self.band_Hz!r} over resolution_Hz = {df} gives {len(f)} lines; "
                                 "at most 4000 expected")
        self.__dict__["_lines"] = (f, a * self.amplitude_m / peak, phase)  # derived, not a field

    @property
    def frequencies_Hz(self) -> np.ndarray:
        """(n,) ndarray [Hz]: the excited lines."""
        return self._lines[0].copy()

    @property
    def period_s(self) -> float:
        return 1.0 / self.resolution_Hz

    def position_m(self, t_s: float) -> float:
        f, a, ph = self._lines
        return float(a @ np.sin(2 * np.pi * f * t_s + ph))

    def velocity_m_s(self, t_s: float) -> float:
        f, a, ph = self._lines
        return float((2 * np.pi * f * a) @ np.cos(2 * np.pi * f * t_s + ph))


@dataclass(frozen=True)
class Chirp:
    """A logarithmic sine sweep from ``band_Hz[0]`` to ``band_Hz[1]`` over ``sweep_s``, then again.

    .. math::  s(t) = a \\sin \\phi(t), \\quad
               \\phi(t) = 2 \\pi f_0 T \\frac{r^{t/T} - 1}{\\ln r}, \\quad r = f_1 / f_0,

    with ``t`` taken modulo the sweep time ``T`` (the exponential sweep; Farina 2000, AES 108th convention,
    preprint 5093).  The displacement amplitude ``a`` = ``amplitude_m`` is constant over the sweep.
    """

    amplitude_m: float = 0.002
    band_Hz: tuple[float, float] = (0.5, 20.0)
    sweep_s: float = 20.0

    def __post_init__(self) -> None:
        _positive("Chirp", "amplitude_m", self.amplitude_m, "m")
        _positive("Chirp", "sweep_s", self.sweep_s, "s")
        object.__setattr__(self, "band_Hz", _band("Chirp", self.band_Hz))

    def _phase(self, t_s: float) -> tuple[float, float]:
        f0, f1 = self.band_Hz
        T, r = self.sweep_s, f1 / f0
        tau = t_s % T
        if r == 1.0:
            return 2 * np.pi * f0 * tau, 2 * np.pi * f0
        g = r ** (tau / T)
        return 2 * np.pi * f0 * T * (g - 1) / math.log(r), 2 * np.pi * f0 * g

    def position_m(self, t_s: float) -> float:
        return self.amplitude_m * math.sin(self._phase(t_s)[0])

    def velocity_m_s(self, t_s: float) -> float:
        phi, w = self._phase(t_s)
        return self.amplitude_m * w * math.cos(phi)


@dataclass(frozen=True)
class PiecewiseVelocity:
    """Constant speed forward along the direction for ``distance_m``, then back, ``cycles`` times.

    Each cycle: forward at ``speed_m_s`` for ``distance_m / speed_m_s`` [s], a ``pause_s`` at the far end,
    back at the same speed, a ``pause_s`` at the start; after the last cycle the point rests at the start.
    The velocity jumps at the turns (the position is continuous).
    """

    speed_m_s: float = 0.05
    distance_m: float = 0.05
    cycles: int = 1
    pause_s: float = 0.0

    def __post_init__(self) -> None:
        o = "PiecewiseVelocity"
        _positive(o, "speed_m_s", self.speed_m_s, "m/s")
        _positive(o, "distance_m", self.distance_m, "m")
        _nonnegative(o, "pause_s", self.pause_s, "s")
        if isinstance(self.cycles, bool) or not isinstance(self.cycles, (int, np.integer)) or self.cycles < 1:
            raise ParameterError(f"{o}.cycles must be an integer >= 1, got {self.cycles!r}")

    @property
    def cycle_s(self) -> float:
        """float : the time of one cycle [s]."""
        return 2 * self.distance_m / self.speed_m_s + 2 * self.pause_s

    def _state(self, t_s: float) -> tuple[float, float]:
        if t_s < 0 or t_s >= self.cycles * self.cycle_s:
            return 0.0, 0.0
        tau = t_s % self.cycle_s
        go = self.distance_m / self.speed_m_s
        if tau < go:
            return self.speed_m_s * tau, self.speed_m_s
        tau -= go
        if tau < self.pause_s:
            return self.distance_m, 0.0
        tau -= self.pause_s
        if tau < go:
            return self.distance_m - self.speed_m_s * tau, -self.speed_m_s
        return 0.0, 0.0

    def position_m(self, t_s: float) -> float:
        return self._state(t_s)[0]

    def velocity_m_s(self, t_s: float) -> float:
        return self._state(t_s)[1]


#: What a fixture can impose: anything with ``position_m(t_s)`` [m] and ``velocity_m_s(t_s)`` [m/s].
Motion = Multisine | Chirp | PiecewiseVelocity


def _band(owner: str, band) -> tuple[float, float]:
    try:
        lo, hi = (float(x) for x in band)
    except (TypeError, ValueError):
        raise ParameterError(f"{owner}.band_Hz must be two frequencies (low, high) [Hz], got {band!r}") from None
    if not (math.isfinite(lo) and math.isfinite(hi) and 0 < lo < hi):
        raise ParameterError(f"{owner}.band_Hz must be 0 < low < high [Hz], got {band!r}")
    return lo, hi


@dataclass(frozen=True)
class HandFixture:
    r"""A fixture at the robot's hand cuff imposing ``motion`` along ``direction``.

    Parameters
    ----------
    motion : Multisine, Chirp or PiecewiseVelocity
        The imposed displacement s(t) [m] along ``direction``, from the cuff point's start position.
    direction : (3,) unit vector, world frame
    stiffness_N_per_m, damping_N_s_per_m : float
        The coupling (stiff by default: 1e6 N/m and 1000 N s/m, a stiff stage and load cell; our choice).
        Held sideways, the coupling's springs and the robot's mass make a mode at
        :math:`\sqrt{K / m} / 2 \pi`: with K = 1e6 N/m and a mass up to 10 kg it lies above 50 Hz, out of a
        0.5-20 Hz band (with 5e4 N/m and 6 kg it would sit at 14.5 Hz, inside it).  For the semi-implicit
        Euler substep h of the plant (0.25 ms by default) the coupling stays stable while
        :math:`h \sqrt{K / m} < 2` and :math:`h D / m < 2`: with the defaults, for masses down to about
        0.15 kg.
    lateral : {"held", "free"}
        Sideways of the direction: held with the same stiffness and damping (a linear stage), or free.
    cuff : str
        The name of the cuff the fixture holds (the assembly's ``hand`` cuff by default).
    start_rad : tuple of float, optional
        The robot's start posture [rad] (default: the scenario's, through its registration).
    """

    motion: Motion = field(default_factory=Multisine)
    direction: tuple[float, float, float] = (1.0, 0.0, 0.0)
    stiffness_N_per_m: float = 1.0e6
    damping_N_s_per_m: float = 1000.0
    lateral: str = "held"
    cuff: str = "hand"
    start_rad: tuple[float, ...] | None = None

    def __post_init__(self) -> None:
        o = "HandFixture"
        if not all(callable(getattr(self.motion, m, None)) for m in ("position_m", "velocity_m_s")):
            raise ParameterError(f"{o}.motion must have position_m(t_s) and velocity_m_s(t_s) "
                                 f"(Multisine, Chirp, PiecewiseVelocity), got {type(self.motion).__name__}")
        try:
            u = np.asarray(self.direction, dtype=float).reshape(3)
        except (TypeError, ValueError):
            raise ParameterError(f"{o}.direction must be a 3-vector, got {self.direction!r}") from None
        n = float(np.linalg.norm(u))
        if not (np.all(np.isfinite(u)) and abs(n - 1.0) < 1e-6):
            raise ParameterError(f"{o}.direction must be a finite unit 3-vector (world frame), got "
                                 f"{self.direction!r} (norm {n:.6g})")
        object.__setattr__(self, "direction", tuple(float(x) for x in u))
        _positive(o, "stiffness_N_per_m", self.stiffness_N_per_m, "N/m")
        _nonnegative(o, "damping_N_s_per_m", self.damping_N_s_per_m, "N s/m")
        if self.lateral not in LATERAL_MODES:
            raise ParameterError(f"{o}.lateral must be one of {', '.join(LATERAL_MODES)}, got {self.lateral!r}")
        if not isinstance(self.cuff, str) or not self.cuff:
            raise ParameterError(f"{o}.cuff must be a cuff name (str), got {self.cuff!r}")
        if self.start_rad is not None:
            q = np.asarray(self.start_rad, dtype=float).ravel()
            if not np.all(np.isfinite(q)):
                raise ParameterError(f"{o}.start_rad must be finite joint angles [rad], got {self.start_rad!r}")
            object.__setattr__(self, "start_rad", tuple(float(x) for x in q))

    @property
    def unit(self) -> np.ndarray:
        """(3,) ndarray: the direction as an array."""
        return np.array(self.direction)

    def gains(self) -> tuple[np.ndarray, np.ndarray]:
        """(3, 3) stiffness [N/m] and damping [N s/m] matrices of the coupling, world axes."""
        u = self.unit
        P = np.outer(u, u)
        lat = 1.0 if self.lateral == "held" else 0.0
        Q = lat * (np.eye(3) - P)
        return self.stiffness_N_per_m * (P + Q), self.damping_N_s_per_m * (P + Q)


class FixtureDrive:
    """The robot's drives plus the fixture: the actuator the plant asks before every substep.

    ``substep(q, v, dt_s)`` returns the drives' torque (of ``inner``, another actuator) plus :math:`J^T F`,
    ``F`` the fixture's force on the robot at the cuff point for the substep's state and imposed point.
    Call :meth:`begin_tick` before every tick: it sets the time of the tick's first substep and computes
    the fixture's state then (what the tick logs and the hand cuff sensor measures).

    Parameters
    ----------
    fixture : HandFixture
    model : pinocchio.Model
        The plant's robot model (its own Data is made here).
    frame_id : int
        The robot's hand cuff frame.
    q0 : (nq,) ndarray [rad]
        The robot's start posture (gives the cuff point's start position p0).
    """

    def __init__(self, fixture: HandFixture, model: pin.Model, frame_id: int, q0: np.ndarray) -> None:
        self.fixture = fixture
        self._model, self._data, self._fid = model, model.createData(), frame_id
        self._u = fixture.unit
        self._K, self._D = fixture.gains()
        self._motion = fixture.motion
        self.inner = None
        pin.framesForwardKinematics(model, self._data, np.asarray(q0, dtype=float))
        self.start_position_m = self._data.oMf[frame_id].translation.copy()
        self._s0 = self._motion.position_m(0.0)  # the imposed point starts at the cuff point
        self._t0, self._i = 0.0, 0
        #: The fixture's force on the robot [N, world], the imposed point [m] and the cuff point's velocity [m/s]
        #: at the start of the last tick.
        self.force_N, self.position_m, self.cuff_velocity_m_s = np.zeros(3), self.start_position_m.copy(), np.zeros(3)
        self.cuff_rotation = np.eye(3)

    def _state(self, q: np.ndarray, v: np.ndarray, t_s: float, jacobian: bool):
        m, d, fid = self._model, self._data, self._fid
        pin.forwardKinematics(m, d, q, v)
        M = pin.updateFramePlacement(m, d, fid)
        p = M.translation
        pv = pin.getFrameVelocity(m, d, fid, pin.LOCAL_WORLD_ALIGNED).linear
        s, sd = self._motion.position_m(t_s) - self._s0, self._motion.velocity_m_s(t_s)
        x = self.start_position_m + s * self._u
        F = self._K @ (x - p) + self._D @ (sd * self._u - pv)
        J = pin.computeFrameJacobian(m, d, q, fid, pin.LOCAL_WORLD_ALIGNED)[:3] if jacobian else None
        return F, x, pv, M.rotation, J

    def begin_tick(self, t_s: float, q: np.ndarray, v: np.ndarray) -> None:
        """The state of the fixture at the start of the tick at ``t_s`` [s] (robot state ``q``, ``v``)."""
        self._t0, self._i = float(t_s), 0
        F, x, pv, R, _ = self._state(q, v, t_s, False)
        self.force_N, self.position_m, self.cuff_velocity_m_s, self.cuff_rotation = F, x, pv.copy(), R.copy()

    def wrench_in_cuff_frame(self) -> np.ndarray:
        """(6,) ndarray: the fixture's wrench on the robot at the start of the tick, [f; tau] in the cuff frame
        [N, N m] (the force acts at the frame's origin: no moment)."""
        return np.concatenate((self.cuff_rotation.T @ self.force_N, np.zeros(3)))

    def substep(self, q: np.ndarray, v: np.ndarray, dt_s: float) -> np.ndarray:
        """The joint torque over the next substep [N m]: the drives' plus :math:`J^T F`."""
        t = self._t0 + self._i * dt_s
        self._i += 1
        tau = self.inner.substep(q, v, dt_s) if hasattr(self.inner, "substep") else np.asarray(self.inner)
        F, _, _, _, J = self._state(q, v, t, True)
        return tau + J.T @ F
