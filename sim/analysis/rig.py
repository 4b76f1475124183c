"""A one-axis test rig for a sampled virtual wall: a mass with physical viscous damping and the sampled wall law.

The rig is the device of Colgate & Schenkel (1997): a mass m [kg] with a
physical damper b [N s/m], whose position x [m] (penetration into the wall,
positive inward) is sampled every T [s]; the controller computes, from the
sample of ``sensor_delay_ticks`` ticks before,

.. math:: F_k = K x_{k-d_s} + B \\, (x_{k-d_s} - x_{k-d_s-1}) / T \\quad (x_{k-d_s} > 0;\\ 0 \\text{ otherwise})

and the drive holds it (zero-order hold) over the interval that starts
``control_delay_ticks`` ticks later: the total delay is
:math:`d = d_s + d_c`.  Two drives per cell:

* the worst drive (:func:`drive_energy_returned_J`): the handle moved at a
  piecewise-constant velocity through sampled cosines :math:`x_k = x_0 + A
  \\cos \\omega k T` at the frequencies :math:`\\omega T = \\pi j / J`,
  j = 1..J, up to Nyquist, in contact throughout.  A sinusoidal velocity would
  underestimate the damper term (at Nyquist it gives :math:`4/\\pi^2 \\approx
  0.405\\,B` instead of B); a piecewise-constant one is the worst case of
  Colgate & Schenkel (1997).  The energy the device gives back at its handle
  over one cycle, :math:`-\\oint (b v + F) v\\,dt` (the mass is lossless over a
  cycle), positive: active;
* the wearer's push (:func:`push_response`): a force on the mass from the
  surface, ramped up, held and released; the contact is unstable when the
  oscillation about the quasi-static penetration grows, when the mass bounces
  off the wall while pushed, or when the state leaves every bound.

References
----------
.. [ColgateSchenkel1997] Colgate J.E., Schenkel G.G. (1997), "Passivity of a class of sampled-data systems:
   application to haptic interfaces", Journal of Robotic Systems 14(1):37-47.
.. [ColgateBrown1994] Colgate J.E., Brown J.M. (1994), "Factors affecting the Z-width of a haptic display",
   Proc. IEEE International Conference on Robotics and Automation, 3205-3210.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from models.errors import ParameterError

__all__ = ["RigParams", "RigCell", "rig_cell", "drive_energy_returned_J", "push_response", "PushResponse",
           "CELL_CLASSES",
           "rig_passive", "rig_max_passive_stiffness_N_per_m", "DRIVE_FREQUENCIES",
           "DRIVE_AMPLITUDE_M", "PUSH_FORCE_N", "GROWTH_RATIO"]

#: The classes of a cell of a wall map.
CELL_CLASSES = ("passive", "active", "unstable")
#: J: the worst drive's frequencies are :math:`\omega T = \pi j / J`, j = 1..J (resolution pi/48: the passivity
#: boundary is found to well within 1 % in stiffness for the delays met here; common practice).
DRIVE_FREQUENCIES = 48
#: Position amplitude A of the worst drive [m], about a mean penetration of 2 A (so in contact throughout).
DRIVE_AMPLITUDE_M = 1e-4
#: The wearer's push on the rig [N]: a firm push of a hand (common practice for upper-limb contact tasks).
PUSH_FORCE_N = 20.0
#: A push is "growing" when the oscillation about the quasi-static penetration in the last third of the hold is
#: larger than this times that of the first third (common practice).
GROWTH_RATIO = 2.0
#: Oscillation below this is no oscillation [m] (a tenth of a micrometre; common practice).
_FLOOR_M = 1e-7
#: A push that leaves this far from the wall [m] ran away.
_RUNAWAY_M = 1.0


@dataclass(frozen=True)
class RigParams:
    """The one-axis rig.

    Attributes
    ----------
    mass_kg : float [kg]  moving mass, > 0.
    damping_N_s_per_m : float [N s/m]  physical viscous damping b, >= 0.
    period_s : float [s]  control period T, > 0.
    sensor_delay_ticks : int  ticks between a position sample and its use, >= 0.
    control_delay_ticks : int  ticks between a command and its hold, >= 0.
    substeps : int  physics steps per control period, >= 1.
    """

    mass_kg: float = 1.0
    damping_N_s_per_m: float = 0.0
    period_s: float = 1e-3
    sensor_delay_ticks: int = 0
    control_delay_ticks: int = 0
    substeps: int = 4

    def __post_init__(self) -> None:
        for name, low, strict in (("mass_kg", 0.0, True), ("damping_N_s_per_m", 0.0, False),
                                  ("period_s", 0.0, True)):
            v = getattr(self, name)
            ok = isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v) and (
                v > low if strict else v >= low)
            if not ok:
                raise ParameterError(f"RigParams.{name} must be a finite number {'>' if strict else '>='} {low:g}, "
                                     f"got {v!r}")
            object.__setattr__(self, name, float(v))
        for name, low in (("sensor_delay_ticks", 0), ("control_delay_ticks", 0), ("substeps", 1)):
            v = getattr(self, name)
            if isinstance(v, bool) or not isinstance(v, (int, np.integer)) or v < low:
                raise ParameterError(f"RigParams.{name} must be an integer >= {low}, got {v!r}")
            object.__setattr__(self, name, int(v))

    @property
    def delay_ticks(self) -> int:
        """int : the total delay d = sensor + control delay [ticks]."""
        return self.sensor_delay_ticks + self.control_delay_ticks


@dataclass(frozen=True)
class PushResponse:
    """The wearer's push on the rig: the net work of wall and damper on the mass [J] (positive: active), the
    contact onsets after the first, whether the oscillation grew, whether the state stayed bounded."""

    energy_returned_J: float
    bounce_count: int
    growing: bool
    finite: bool


@dataclass(frozen=True)
class RigCell:
    """One cell of a rig wall map.

    ``energy_returned_J``: the worst drive's energy given back per cycle at
    the handle [J] (device port: wall and physical damper), at
    ``worst_frequency_Hz``; ``push``: the wearer's push; ``cls``: one of
    :data:`CELL_CLASSES` (unstable first, then active if
    ``energy_returned_J`` > 0 or the push's is, else passive).
    """

    stiffness_N_per_m: float
    damping_N_s_per_m: float
    energy_returned_J: float
    worst_frequency_Hz: float
    push: PushResponse
    cls: str


def _wall_force(p_now: np.ndarray, p_prev: np.ndarray, K: float, B: float, T: float) -> np.ndarray:
    """The sampled one-sided law: :math:`K p + B (p - p_{prev})/T` where the sample p > 0, else 0 [N]."""
    return np.where(p_now > 0.0, K * p_now + B * (p_now - p_prev) / T, 0.0)


def drive_energy_returned_J(K: float, B: float, params: RigParams, *, frequencies: int = DRIVE_FREQUENCIES,
                            amplitude_m: float = DRIVE_AMPLITUDE_M) -> tuple[np.ndarray, np.ndarray]:
    """The energy the rig gives back at its handle per cycle [J] under the worst drive, at each frequency.

    The handle follows :math:`x_k = 2A + A \\cos(\\omega k T)` at the ticks and
    moves at constant velocity in between (piecewise-constant velocity,
    the worst case of [ColgateSchenkel1997]_), for :math:`\\omega T = \\pi j/J`,
    j = 1..J; the run is 2J ticks (j whole cycles), integrated on the rig's
    substeps, after a periodic start (the delay lines hold the drive's own
    past samples).  Returned per cycle:

    .. math:: E = -\\frac{1}{j} \\int_0^{2JT} (b\\, v + F)\\, v \\, dt

    Returns ``(frequency_Hz, energy_J)``, each (J,).
    """
    T, h, n = params.period_s, params.period_s / params.substeps, params.substeps
    j = np.arange(1, frequencies + 1, dtype=float)
    wT = math.pi * j / frequencies
    ticks = 2 * frequencies
    ds, dc = params.sensor_delay_ticks, params.control_delay_ticks
    A = float(amplitude_m)

    def sample(k: int) -> np.ndarray:  # the handle's position at tick k [m], every frequency at once
        return 2.0 * A + A * np.cos(wT * k)

    # the commands in flight at t = 0 (made at ticks -dc..-1 from the periodic past)
    pending = [_wall_force(sample(k - ds), sample(k - ds - 1), K, B, T) for k in range(-dc, 0)]
    energy = np.zeros_like(wT)
    b = params.damping_N_s_per_m
    for k in range(ticks):
        pending.append(_wall_force(sample(k - ds), sample(k - ds - 1), K, B, T))  # the controller at tick k
        F = pending.pop(0)  # held over [k T, (k + 1) T)
        v = (sample(k + 1) - sample(k)) / T
        for _ in range(n):  # the substeps: the velocity and the held force are constant over them
            energy -= (b * v + F) * v * h
    return wT / (2.0 * math.pi * T), energy / j


def push_response(K: float, B: float, params: RigParams, *, force_N: float = PUSH_FORCE_N,
                  ramp_s: float = 0.2, hold_s: float = 0.6, free_s: float = 0.3) -> PushResponse:
    """The wearer's push: the mass starts at rest on the surface (x = 0); a force ramps up (half cosine,
    ``ramp_s``), is held (``hold_s``), ramps down, and the mass is left free (``free_s``).

    Semi-implicit Euler on the substeps, :math:`m \\dot v = F_h - b v - F`, F
    the sampled wall force held by the drive.  ``energy_returned_J``: the net
    work of the wall and the physical damper on the mass, :math:`-\\int (F + b v) v\\,dt`
    (positive: the device gave back more than it took, i.e. it was active; the
    mass, lossless, is left out, as in [ColgateSchenkel1997]_); ``bounce_count``: contact onsets after the first
    until the end of the hold (a push enters the wall once; while the force ramps down the mass may leave and
    touch again harmlessly); ``growing``: the deviation from the
    quasi-static penetration :math:`F_h/K` over the last third of the hold
    peaks higher than :data:`GROWTH_RATIO` times that of the first third (and
    above a tenth of a micrometre).
    """
    T, n = params.period_s, params.substeps
    h = T / n
    m, b = params.mass_kg, params.damping_N_s_per_m
    ds, dc = params.sensor_delay_ticks, params.control_delay_ticks
    n_ramp, n_hold, n_free = (max(1, round(s / T)) for s in (ramp_s, hold_s, free_s))
    ticks = 2 * n_ramp + n_hold + n_free
    k_ = np.arange(ticks)
    up = 0.5 * (1.0 - np.cos(np.pi * np.clip(k_ / n_ramp, 0.0, 1.0)))
    down = 0.5 * (1.0 + np.cos(np.pi * np.clip((k_ - n_ramp - n_hold) / n_ramp, 0.0, 1.0)))
    push = force_N * np.minimum(up, down)
    samples = [0.0] * (ds + 2)  # the sensor's line: the mass at rest on the surface
    pending = [0.0] * dc
    x = v = 0.0
    pos = np.zeros(ticks + 1)
    work = 0.0
    finite = True
    for k in range(ticks):
        samples.append(x)
        p_now, p_prev = samples[-1 - ds], samples[-2 - ds]
        pending.append(K * p_now + B * (p_now - p_prev) / T if p_now > 0.0 else 0.0)
        samples.pop(0)
        F = pending.pop(0)
        for _ in range(n):
            v += h * (push[k] - b * v - F) / m
            x += h * v
            work -= (F + b * v) * v * h
        pos[k + 1] = x
        if not (math.isfinite(x) and abs(x) < _RUNAWAY_M):
            finite = False
            pos = pos[:k + 2]
            break
    inside = pos[:n_ramp + n_hold + 1] > 0.0  # up to the end of the hold: a release may leave and touch again
    onsets = int(np.count_nonzero(inside[1:] & ~inside[:-1])) + int(inside[0])
    growing = not finite
    if finite:
        lo, hi = n_ramp, n_ramp + n_hold
        dev = np.abs(pos[lo:hi] - force_N / K) if K > 0 else np.abs(np.diff(pos[lo:hi]))
        third = max(1, len(dev) // 3)
        first, last = dev[:third].max(), dev[-third:].max()
        growing = bool(last > _FLOOR_M and last > GROWTH_RATIO * first)
    return PushResponse(energy_returned_J=float(work) if finite else math.inf,
                        bounce_count=max(0, onsets - 1), growing=growing, finite=finite)


def _active_floor_J(K: float) -> float:
    """Energy below which a cycle's figure is round-off [J]: 1e-9 of the drive's spring energy K A^2."""
    return 1e-9 * K * DRIVE_AMPLITUDE_M ** 2


def rig_passive(K: float, B: float, params: RigParams) -> bool:
    """Whether the worst drive finds the rig passive at stiffness K and damping B (no frequency gives energy back)."""
    _, e = drive_energy_returned_J(K, B, params)
    return bool(e.max() <= _active_floor_J(K))


def rig_max_passive_stiffness_N_per_m(B: float, params: RigParams, *, upper_N_per_m: float = 1e7,
                                      rel_tol: float = 1e-4) -> float:
    """The largest stiffness [N/m] the worst drive finds passive, by bisection on :func:`rig_passive`
    (0 if even a vanishing stiffness is active; ``upper_N_per_m`` if that one is passive).  The simulated
    counterpart of :func:`sim.analysis.passivity.max_passive_stiffness_N_per_m`."""
    lo, hi = 0.0, float(upper_N_per_m)
    if rig_passive(hi, B, params):
        return hi
    if not rig_passive(1e-9 * hi, B, params):
        return 0.0
    lo = 1e-9 * hi
    while hi - lo > rel_tol * hi:
        mid = 0.5 * (lo + hi)
        lo, hi = (mid, hi) if rig_passive(mid, B, params) else (lo, mid)
    return lo


def rig_cell(stiffness_N_per_m: float, damping_N_s_per_m: float, params: RigParams) -> RigCell:
    """One cell of the rig's wall map: the worst drive and the wearer's push at stiffness K and damping B.

    Class: ``"unstable"`` if the push ran away, grew or bounced; else ``"active"`` if
    the worst drive gave energy back at the handle (more than a round-off
    floor, 1e-9 of :math:`K A^2`) or the push's device did; else ``"passive"``.
    """
    K, B = float(stiffness_N_per_m), float(damping_N_s_per_m)
    if not (math.isfinite(K) and K > 0):
        raise ParameterError(f"stiffness must be a finite number > 0 [N/m], got {stiffness_N_per_m!r}")
    if not (math.isfinite(B) and B >= 0):
        raise ParameterError(f"damping must be a finite number >= 0 [N s/m], got {damping_N_s_per_m!r}")
    f, e = drive_energy_returned_J(K, B, params)
    i = int(np.argmax(e))
    push = push_response(K, B, params)
    if not push.finite or push.growing or push.bounce_count > 0:
        cls = "unstable"
    elif e[i] > _active_floor_J(K) or push.energy_returned_J > _active_floor_J(K):
        cls = "active"
    else:
        cls = "passive"
    return RigCell(K, B, float(e[i]), float(f[i]), push, cls)
