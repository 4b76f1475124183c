"""An impaired wearer: weakness, spasticity, contracture and tremor beside the wearer's parameters.

:class:`Impairment` gathers four optional parts, each a frozen, validated
record whose joints are named by :data:`models.human.HUMAN_ARM_JOINTS`:

* :class:`Weakness`: each joint's torque capacity scaled by :math:`s_j \\in (0, 1]`;
  the wearer's voluntary torque (:class:`sim.physics.wearer.HumanMotor`) then
  saturates at :math:`s_j \\tau_{max,j}`.
* :class:`Spasticity`: "a motor disorder characterized by a velocity-dependent
  increase in tonic stretch reflexes" [Lance1980]_.  Per spastic joint j, with
  :math:`\\dot q_d = \\dot q_j(t - d)` the joint speed one reflex delay d ago,

  .. math::
      \\tau_{spas,j} = -G_j \\,(|\\dot q_d| - v_{th})_+ \\,\\mathrm{sign}(\\dot q_d),

  only while :math:`\\dot q_d` is in a direction that stretches the spastic
  muscles (``stretched_by``): it opposes the motion that stretches them.
  Joint signs are those of :mod:`models.human` (+ is flexion, abduction,
  internal rotation, pronation, wrist flexion, radial deviation), so the
  default ``stretched_by="negative"`` is a flexor spasticity that resists
  extension, the common pattern of the arm after a stroke (from memory).
* :class:`Contracture`: a reduced range :math:`[l_j, u_j]` with stiff end
  ranges, a linear spring (Hooke's law) beyond each end,

  .. math::
      \\tau_{con,j} = -k\\,(q_j - u_j) \\text{ if } q_j > u_j, \\quad
      k\\,(l_j - q_j) \\text{ if } q_j < l_j, \\quad 0 \\text{ otherwise},

  continuous (zero) at both ends.
* :class:`Tremor`: :math:`\\tau_{tr,j} = A_j \\sin(2\\pi f t + \\varphi)`, one phase for
  all its joints, fixed or drawn from the run's seed.

Spasticity, contracture and tremor are the involuntary part of the wearer's
torque, :math:`\\tau_{inv} = \\tau_{spas} + \\tau_{con} + \\tau_{tr}`, added to
the saturated voluntary torque (weakness limits only what the wearer wills);
a run with an impairment logs it as ``tau_human_impairment``.

Each part has ``.grade("mild" | "moderate" | "severe", joints=...)``: our own
illustrative defaults, chosen so that the grades differ visibly in the
shipped scenarios. They are **not clinical values** and stand for no scale
(neither the Modified Ashworth Scale nor a strength grade).

To add a kind of impairment, see DEVELOPERS.md ("Add an impairment").

References
----------
.. [Lance1980] J. W. Lance, "Symposium synopsis", in R. G. Feldman, R. R. Young,
   W. P. Koella (eds.), *Spasticity: Disordered Motor Control*, Year Book
   Medical Publishers, Chicago, 1980, pp. 485-494 (the definition of spasticity).
.. [FlashHogan1985] T. Flash, N. Hogan, "The coordination of arm movements: an
   experimentally confirmed mathematical model", *Journal of Neuroscience*
   5(7):1688-1703, 1985 (the minimum-jerk movement the completion tests use).
"""

from __future__ import annotations

import math
import zlib
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np

from models.checks import finite, in_range, nonnegative, positive
from models.errors import ParameterError
from models.human import HUMAN_ARM_JOINTS, HUMAN_ARM_LIMITS_RAD

__all__ = ["GRADES", "Weakness", "Spasticity", "Contracture", "Tremor", "Impairment", "ImpairmentTorque",
           "MAX_REFLEX_DELAY_S", "STRETCH_DIRECTIONS"]

#: The impairment grades of the ``.grade`` constructors.
GRADES: tuple[str, ...] = ("mild", "moderate", "severe")
#: Directions of motion that stretch the spastic muscles (joint signs of :mod:`models.human`).
STRETCH_DIRECTIONS: tuple[str, ...] = ("negative", "positive", "both")
#: Longest reflex delay [s] (a project bound; stretch-reflex latencies are tens of milliseconds).
MAX_REFLEX_DELAY_S = 1.0


def _grade(owner: str, grade: str) -> int:
    if grade not in GRADES:
        raise ParameterError(f"{owner}.grade must be one of {', '.join(GRADES)}, got {grade!r}")
    return GRADES.index(grade)


def _joint(owner: str, field_name: str, name: object) -> str:
    if name not in HUMAN_ARM_JOINTS:
        raise ParameterError(f"{owner}.{field_name} names an unknown joint {name!r}; known: "
                             f"{', '.join(HUMAN_ARM_JOINTS)}")
    return str(name)


def _joints(owner: str, joints: Sequence[str] | str) -> tuple[str, ...]:
    js = (joints,) if isinstance(joints, str) else tuple(joints)
    if not js:
        raise ParameterError(f"{owner}: joints must name at least one joint of {', '.join(HUMAN_ARM_JOINTS)}")
    return tuple(_joint(owner, "joints", j) for j in js)


def _per_joint(owner: str, field_name: str, value, check) -> dict[str, float]:
    """``value`` (a number for every arm joint, or a mapping joint name -> number) as a dict in joint order, each
    number passed through ``check(owner, field, x)``."""
    if isinstance(value, Mapping):
        if not value:
            raise ParameterError(f"{owner}.{field_name} must name at least one joint, got an empty mapping")
        named = {_joint(owner, field_name, k): v for k, v in value.items()}
    elif isinstance(value, (int, float)) and not isinstance(value, bool):
        named = dict.fromkeys(HUMAN_ARM_JOINTS, value)
    else:
        raise ParameterError(f"{owner}.{field_name} must be a number or a mapping joint name -> number, "
                             f"got {value!r}")
    return {j: check(owner, f"{field_name}[{j!r}]", named[j]) for j in HUMAN_ARM_JOINTS if j in named}


def _fraction(owner: str, field_name: str, x) -> float:
    v = finite(owner, field_name, x)
    if not 0.0 < v <= 1.0:
        raise ParameterError(f"{owner}.{field_name} must be in (0, 1], got {x!r}")
    return v


@dataclass(frozen=True)
class Weakness:
    """Each joint's torque capacity scaled: the wearer's voluntary torque saturates at ``scale`` x the arm's peak.

    Parameters
    ----------
    scale : float or mapping joint name -> float
        Share of the healthy peak torque (:attr:`models.human.HumanParams.torque_limit_Nm`) in (0, 1]; a
        number applies to every arm joint, a mapping to the joints it names (the others keep 1).

    Notes
    -----
    Grades (illustrative, not clinical): mild 0.6, moderate 0.15, severe 0.1 of the healthy capacity on every
    arm joint.  The moderate value is chosen so that the wearer cannot lift their own arm to the shelf of the
    shipped reach (``scenarios/reach.py``) when the robot carries only itself (``transparent``, ``gravity``): the
    shoulder's 0.15 x 60 N m = 9 N m is below the 12.2 N m that the arm of the m50 subject weighs at the
    shelf posture (pinocchio's generalized gravity of the human model).
    """

    scale: float | Mapping[str, float] = 1.0

    #: Capacity share per grade (mild, moderate, severe); illustrative.
    GRADE_SCALE = (0.6, 0.15, 0.1)

    def __post_init__(self) -> None:
        s = _per_joint("Weakness", "scale", self.scale, _fraction)
        object.__setattr__(self, "scale", {j: s.get(j, 1.0) for j in HUMAN_ARM_JOINTS})

    @classmethod
    def grade(cls, grade: str, joints: Sequence[str] | str = HUMAN_ARM_JOINTS) -> Weakness:
        """The illustrative weakness of ``grade`` on ``joints`` (default: every arm joint)."""
        s = cls.GRADE_SCALE[_grade("Weakness", grade)]
        return cls({j: s for j in _joints("Weakness", joints)})


@dataclass(frozen=True)
class Spasticity:
    """A velocity-dependent resistance of the stretched muscles above a threshold speed, after a reflex delay.

    .. math::
        \\tau_j = -G_j \\,(|\\dot q_j(t - d)| - v_{th})_+ \\,\\mathrm{sign}(\\dot q_j(t - d))

    while :math:`\\dot q_j(t - d)` stretches the spastic muscles (``stretched_by``), else 0 [Lance1980]_.

    Parameters
    ----------
    gain_Nm_s_per_rad : float or mapping joint name -> float
        G >= 0 per spastic joint [N m s/rad] (a number: every arm joint).
    threshold_rad_s : float
        Speed above which the reflex resists, :math:`v_{th}` >= 0 [rad/s].
    reflex_delay_s : float
        d in [0, :data:`MAX_REFLEX_DELAY_S`] [s]; in a run it is rounded to whole control periods (the wearer
        keeps the joint speeds of the last ticks in a ring buffer, so the delay's resolution is one period, 1 ms
        by default).
    stretched_by : {"negative", "positive", "both"}
        The direction of motion that stretches the spastic muscles and is resisted: "negative" (default) is a
        flexor spasticity (it resists extension of the elbow, q decreasing).

    Notes
    -----
    Grades (illustrative, not clinical; stretched by extension): mild G = 0.5 N m s/rad above 1.5 rad/s,
    moderate G = 2 N m s/rad above 1.2 rad/s, severe G = 4 N m s/rad above 0.6 rad/s, all with a 40 ms reflex
    delay (stretch-reflex latencies at the elbow are some tens of milliseconds, from memory).
    """

    gain_Nm_s_per_rad: float | Mapping[str, float]
    threshold_rad_s: float = 1.2
    reflex_delay_s: float = 0.04
    stretched_by: str = "negative"

    GRADE_GAIN_NM_S_PER_RAD = (0.5, 2.0, 4.0)
    GRADE_THRESHOLD_RAD_S = (1.5, 1.2, 0.6)
    GRADE_DELAY_S = 0.04

    def __post_init__(self) -> None:
        o = "Spasticity"
        object.__setattr__(self, "gain_Nm_s_per_rad",
                           _per_joint(o, "gain_Nm_s_per_rad", self.gain_Nm_s_per_rad, nonnegative))
        object.__setattr__(self, "threshold_rad_s", nonnegative(o, "threshold_rad_s", self.threshold_rad_s, "rad/s"))
        object.__setattr__(self, "reflex_delay_s",
                           in_range(o, "reflex_delay_s", self.reflex_delay_s, 0.0, MAX_REFLEX_DELAY_S, "s"))
        if self.stretched_by not in STRETCH_DIRECTIONS:
            raise ParameterError(f"{o}.stretched_by must be one of {', '.join(STRETCH_DIRECTIONS)}, got "
                                 f"{self.stretched_by!r}")

    @classmethod
    def grade(cls, grade: str, joints: Sequence[str] | str = ("human_elbow_flexion",)) -> Spasticity:
        """The illustrative spasticity of ``grade`` on ``joints`` (default: the elbow), resisting extension."""
        i = _grade("Spasticity", grade)
        return cls({j: cls.GRADE_GAIN_NM_S_PER_RAD[i] for j in _joints("Spasticity", joints)},
                   threshold_rad_s=cls.GRADE_THRESHOLD_RAD_S[i], reflex_delay_s=cls.GRADE_DELAY_S)


@dataclass(frozen=True)
class Contracture:
    """A reduced range of motion with stiff end ranges: a linear spring (Hooke's law) beyond each end.

    .. math::
        \\tau_j = -k (q_j - u_j) \\;(q_j > u_j), \\qquad k (l_j - q_j) \\;(q_j < l_j), \\qquad 0 \\text{ otherwise}

    Parameters
    ----------
    range_rad : mapping joint name -> (lower, upper)
        The reduced range [rad], lower < upper.
    stiffness_Nm_per_rad : float
        k > 0 of the end ranges [N m/rad].

    Notes
    -----
    Grades (illustrative, not clinical): the range keeps 80 % (mild), 60 % (moderate) or 40 % (severe) of the
    model's own range (:data:`models.human.HUMAN_ARM_LIMITS_RAD`, AAOS values), about its middle, with
    k = 5, 20 and 50 N m/rad.
    """

    range_rad: Mapping[str, tuple[float, float]]
    stiffness_Nm_per_rad: float = 20.0

    GRADE_RANGE_KEPT = (0.8, 0.6, 0.4)
    GRADE_STIFFNESS_NM_PER_RAD = (5.0, 20.0, 50.0)

    def __post_init__(self) -> None:
        o = "Contracture"
        if not isinstance(self.range_rad, Mapping) or not self.range_rad:
            raise ParameterError(f"{o}.range_rad must be a mapping joint name -> (lower, upper) [rad] naming at "
                                 f"least one joint, got {self.range_rad!r}")
        ranges = {}
        for name, lu in self.range_rad.items():
            j = _joint(o, "range_rad", name)
            if not (isinstance(lu, Sequence) and len(lu) == 2):
                raise ParameterError(f"{o}.range_rad[{j!r}] must be (lower, upper) [rad], got {lu!r}")
            lo, hi = (finite(o, f"range_rad[{j!r}]", x) for x in lu)
            if not lo < hi:
                raise ParameterError(f"{o}.range_rad[{j!r}] must have lower < upper, got {lu!r}")
            ranges[j] = (lo, hi)
        object.__setattr__(self, "range_rad", {j: ranges[j] for j in HUMAN_ARM_JOINTS if j in ranges})
        object.__setattr__(self, "stiffness_Nm_per_rad",
                           positive(o, "stiffness_Nm_per_rad", self.stiffness_Nm_per_rad, "N m/rad"))

    @classmethod
    def grade(cls, grade: str, joints: Sequence[str] | str = ("human_elbow_flexion",)) -> Contracture:
        """The illustrative contracture of ``grade`` on ``joints`` (default: the elbow)."""
        i = _grade("Contracture", grade)
        kept, ranges = cls.GRADE_RANGE_KEPT[i], {}
        for j in _joints("Contracture", joints):
            lo, hi = HUMAN_ARM_LIMITS_RAD[HUMAN_ARM_JOINTS.index(j)]
            mid, half = 0.5 * (lo + hi), 0.5 * kept * (hi - lo)
            ranges[j] = (mid - half, mid + half)
        return cls(ranges, stiffness_Nm_per_rad=cls.GRADE_STIFFNESS_NM_PER_RAD[i])


@dataclass(frozen=True)
class Tremor:
    """A sinusoidal involuntary torque :math:`A_j \\sin(2\\pi f t + \\varphi)`.

    Parameters
    ----------
    amplitude_Nm : float or mapping joint name -> float
        A >= 0 per joint [N m] (a number: every arm joint).
    frequency_Hz : float
        f > 0 [Hz]; a run needs it below the control rate's Nyquist frequency.
    phase_rad : float, optional
        :math:`\\varphi` [rad]; None (default) draws it from the run's seed (uniform in [0, 2 pi)).

    Notes
    -----
    Grades (illustrative, not clinical): 5 Hz (pathological tremors are mostly 4-6 Hz, common practice, from
    memory) with A = 0.3, 0.8 and 1.5 N m.
    """

    amplitude_Nm: float | Mapping[str, float]
    frequency_Hz: float = 5.0
    phase_rad: float | None = None

    GRADE_AMPLITUDE_NM = (0.3, 0.8, 1.5)
    GRADE_FREQUENCY_HZ = 5.0

    def __post_init__(self) -> None:
        o = "Tremor"
        object.__setattr__(self, "amplitude_Nm", _per_joint(o, "amplitude_Nm", self.amplitude_Nm, nonnegative))
        object.__setattr__(self, "frequency_Hz", positive(o, "frequency_Hz", self.frequency_Hz, "Hz"))
        if self.phase_rad is not None:
            object.__setattr__(self, "phase_rad", finite(o, "phase_rad", self.phase_rad))

    @classmethod
    def grade(cls, grade: str, joints: Sequence[str] | str = ("human_elbow_flexion", "human_wrist_flexion"),
              phase_rad: float | None = None) -> Tremor:
        """The illustrative tremor of ``grade`` on ``joints`` (default: elbow and wrist flexion)."""
        a = cls.GRADE_AMPLITUDE_NM[_grade("Tremor", grade)]
        return cls({j: a for j in _joints("Tremor", joints)}, frequency_Hz=cls.GRADE_FREQUENCY_HZ, phase_rad=phase_rad)


@dataclass(frozen=True)
class Impairment:
    """What the wearer's arm cannot do as a healthy arm does: any of the four parts (None: not impaired there)."""

    weakness: Weakness | None = None
    spasticity: Spasticity | None = None
    contracture: Contracture | None = None
    tremor: Tremor | None = None

    def __post_init__(self) -> None:
        for name, kind in (("weakness", Weakness), ("spasticity", Spasticity), ("contracture", Contracture),
                           ("tremor", Tremor)):
            v = getattr(self, name)
            if v is not None and not isinstance(v, kind):
                raise ParameterError(f"Impairment.{name} must be a {kind.__name__} or None, got {v!r}")

    @classmethod
    def grade(cls, grade: str) -> Impairment:
        """All four parts at ``grade`` with their default joints (illustrative, not clinical)."""
        return cls(Weakness.grade(grade), Spasticity.grade(grade), Contracture.grade(grade), Tremor.grade(grade))

    def check_period(self, owner: str, period_s: float) -> None:
        """Raise a ParameterError if a part cannot be run at control period ``period_s`` [s] (a tremor at or
        above the Nyquist frequency 1 / (2 T))."""
        if self.tremor is not None and self.tremor.frequency_Hz >= 0.5 / period_s:
            raise ParameterError(f"{owner}.impairment.tremor.frequency_Hz = {self.tremor.frequency_Hz!r} must be "
                                 f"below the control rate's Nyquist frequency {0.5 / period_s:g} Hz")


class ImpairmentTorque:
    """The involuntary torque of an impaired wearer, one call per control tick, and their capacity scale.

    Parameters
    ----------
    impairment : Impairment
    joint_names : sequence of str
        The joints of the wearer's model, in order (arm joints, after the girdle's if any).
    period_s : float
        Control period T [s]: :meth:`torque` must be called once per period (the reflex delay is kept as
        round(d / T) samples of joint speed).
    seed : int
        The run's seed: the tremor's phase when it is not fixed, from
        ``SeedSequence(seed, spawn_key=(0x1A, crc32("tremor")))``, a stream apart from the run's others.
    """

    def __init__(self, impairment: Impairment, joint_names: Sequence[str], period_s: float, seed: int = 0) -> None:
        impairment.check_period("ImpairmentTorque", period_s)
        self.impairment = impairment
        names = list(joint_names)
        nv = len(names)
        self._nv = nv
        idx = {j: names.index(j) for j in HUMAN_ARM_JOINTS if j in names}
        w, s, c, tr = impairment.weakness, impairment.spasticity, impairment.contracture, impairment.tremor
        #: Share of each joint's healthy torque capacity (nv,).
        self.capacity_scale = np.ones(nv)
        if w is not None:
            for j, x in w.scale.items():
                self.capacity_scale[idx[j]] = x
        self._spas = None
        if s is not None and s.gain_Nm_s_per_rad:
            i = np.array([idx[j] for j in s.gain_Nm_s_per_rad])
            self._spas = (i, np.array(list(s.gain_Nm_s_per_rad.values())), s.threshold_rad_s, s.stretched_by)
            #: Reflex delay in control periods (the ring buffer keeps that many past speeds, plus the current one).
            self.delay_ticks = int(round(s.reflex_delay_s / period_s))
        else:
            self.delay_ticks = 0
        self._con = None
        if c is not None:
            i = np.array([idx[j] for j in c.range_rad])
            lo, hi = (np.array(v) for v in zip(*c.range_rad.values()))
            self._con = (i, lo, hi, c.stiffness_Nm_per_rad)
        self._tr = None
        if tr is not None and tr.amplitude_Nm:
            if tr.phase_rad is None:
                rng = np.random.default_rng(np.random.SeedSequence(seed, spawn_key=(0x1A, zlib.crc32(b"tremor"))))
                phase = float(rng.uniform(0.0, 2.0 * math.pi))
            else:
                phase = tr.phase_rad
            #: The tremor's phase [rad] in this run.
            self.tremor_phase_rad = phase
            self._tr = (np.array([idx[j] for j in tr.amplitude_Nm]), np.array(list(tr.amplitude_Nm.values())),
                        2.0 * math.pi * tr.frequency_Hz, phase)
        self.reset()

    def reset(self) -> None:
        """Forget the joint-speed history (a run starts at rest: the speeds before it read as 0)."""
        n = 0 if self._spas is None else len(self._spas[0])
        self._history = np.zeros((self.delay_ticks + 1, n))
        self._k = 0

    def delayed_speed(self, v: np.ndarray) -> np.ndarray:
        """Push this tick's speeds of the spastic joints and return those of ``delay_ticks`` ticks ago [rad/s]."""
        h, m = self._history, self.delay_ticks + 1
        h[self._k % m] = v
        out = h[(self._k - self.delay_ticks) % m].copy() if self._k >= self.delay_ticks else np.zeros(h.shape[1])
        self._k += 1
        return out

    def torque(self, t_s: float, q: np.ndarray, v: np.ndarray) -> np.ndarray:
        """The involuntary torque (nv,) [N m] at ``t_s`` and state (q, v): spastic + contracture + tremor."""
        tau = np.zeros(self._nv)
        if self._spas is not None:
            i, G, v_th, direction = self._spas
            vd = self.delayed_speed(np.asarray(v, dtype=float)[i])
            excess = np.maximum(np.abs(vd) - v_th, 0.0)
            stretched = (vd < 0.0 if direction == "negative" else vd > 0.0 if direction == "positive"
                         else np.ones(len(vd), bool))
            tau[i] += np.where(stretched, -G * excess * np.sign(vd), 0.0)
        if self._con is not None:
            i, lo, hi, k = self._con
            qi = np.asarray(q, dtype=float)[i]
            tau[i] += np.where(qi > hi, -k * (qi - hi), np.where(qi < lo, k * (lo - qi), 0.0))
        if self._tr is not None:
            i, A, w, phase = self._tr
            tau[i] += A * math.sin(w * t_s + phase)
        return tau
