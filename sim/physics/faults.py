"""Timed faults: what goes wrong with the sensors, the drives, the cuffs or the wearer during a run.

A scenario declares its faults, ``Scenario(faults=(...))``; each is active at
the ticks whose time t satisfies :math:`t_{start} \\le t < t_{end}` and the
run goes on through all of them.  A fault acts at one place of the control
tick (:mod:`sim.loop.simulation`), by overriding one hook of :class:`Fault`:

=================  ===========================================================  ================================
hook               what it changes, in place                                    kinds
=================  ===========================================================  ================================
``encoder``        the joint positions and torques the encoders read (before   :class:`EncoderGlitch`,
                   quantisation and the velocity estimate)                      :class:`StuckEncoder`
``readings``       the measured positions, velocities, torques and cuff         :class:`SensorDropout`,
                   wrenches the controller gets                                 :class:`SensorBiasStep`,
                                                                                :class:`SensorBiasDrift`,
                                                                                :class:`SensorNoiseBurst`,
                                                                                :class:`SensorDelay`
``command``        the torque command the drives take                           :class:`ControlDelay`
``drive``          the torque the drives deliver (every physics substep)        :class:`TorqueLoss`,
                                                                                :class:`StuckDrive`
``coupling``       the factors on each cuff's stiffness and damping             :class:`CuffSlip`
``wearer``         the wearer's joint torque                                    :class:`WearerJerk`
=================  ===========================================================  ================================

A new kind is a frozen dataclass subclass with a ``kind`` string, its own
fields checked in :meth:`Fault.check_fields`, the names it refers to checked in
:meth:`Fault.check_targets`, and one hook; :class:`FaultSchedule` calls the hook
only while the fault is active, with a :class:`FaultState` that carries the
tick, the fault's own generator and memory, and the previous tick's values.

Faults of one hook act in the order of ``scenario.faults``, except that those
whose ``order`` is 0 (the delays, which replace a value by an older one) act
first.  Each fault with noise draws from its own ``numpy.random.Generator``
(:func:`fault_rng`: from the run's seed and the fault's name), so a fault's
draws do not depend on the other faults, and the sensors' streams are those
of a run without faults.

:func:`random_faults` draws a seeded random schedule (a Poisson process of
fault starts) for soak tests.
"""

from __future__ import annotations

import dataclasses
import operator
import zlib
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from types import MappingProxyType
from typing import ClassVar

import numpy as np

from models.checks import finite, in_range, nonnegative, positive, vector
from models.errors import ParameterError

__all__ = ["Fault", "CuffFault", "JointFault", "FaultTargets", "FaultState", "FaultSchedule", "SensorDropout",
           "SensorBiasStep", "SensorBiasDrift", "SensorNoiseBurst", "EncoderGlitch", "StuckEncoder", "SensorDelay",
           "ControlDelay", "TorqueLoss", "StuckDrive", "CuffSlip", "WearerJerk", "FAULT_KINDS", "HOOKS",
           "random_faults", "fault_rng", "check_faults"]

#: The hooks a fault can override, in the order they come in a control tick.
HOOKS: tuple[str, ...] = ("coupling", "encoder", "readings", "command", "drive", "wearer")


@dataclass(frozen=True)
class FaultTargets:
    """What a fault may name: the run's cuffs, the robot's joints and the wearer's joints (in their order)."""

    cuffs: tuple[str, ...]
    joints: tuple[str, ...]
    wearer_joints: tuple[str, ...] = ()


def _one_of(owner: str, field: str, value: object, names: Sequence[str], what: str) -> str:
    if not isinstance(value, str) or value not in names:
        raise ParameterError(f"{owner}.{field} must name one of the {what} ({', '.join(names)}), got {value!r}")
    return value


def _ticks(owner: str, field: str, value: object) -> int:
    try:
        n = operator.index(value)
    except TypeError:
        n = None
    if n is None or isinstance(value, bool) or n < 1:
        raise ParameterError(f"{owner}.{field} must be an integer number of ticks >= 1, got {value!r}")
    return n


@dataclass(frozen=True, kw_only=True)
class Fault:
    """A fault active for :math:`t_{start} \\le t < t_{end}` (the module docstring says how it acts).

    Attributes
    ----------
    name : str
        What the log, the report and the replay call it; unique in a scenario.
    start_s : float [s]
        Start, >= 0.
    end_s : float [s]
        End, > ``start_s``.
    """

    name: str
    start_s: float
    end_s: float
    #: The kind's name in ``meta.json`` and ``metrics.json``.
    kind: ClassVar[str] = "fault"
    #: 0 for a fault that replaces a value by an older one (acts before the others of its hook), else 1.
    order: ClassVar[int] = 1

    def __post_init__(self) -> None:
        o = self.owner
        if not (isinstance(self.name, str) and self.name.strip()):
            raise ParameterError(f"{type(self).__name__}.name must be a non-empty string, got {self.name!r}")
        object.__setattr__(self, "start_s", nonnegative(o, "start_s", self.start_s, "s"))
        end = finite(o, "end_s", self.end_s)
        if not end > self.start_s:
            raise ParameterError(f"{o}.end_s must be after start_s = {self.start_s:g} s, got {self.end_s!r}")
        object.__setattr__(self, "end_s", end)
        self.check_fields()

    @property
    def owner(self) -> str:
        """How an error names this fault: ``Kind('name')``."""
        return f"{type(self).__name__}({self.name!r})"

    def check_fields(self) -> None:
        """Check (and normalise with ``object.__setattr__``) the kind's own fields; raise ParameterError."""

    def check_targets(self, targets: FaultTargets) -> None:
        """Raise ParameterError if the fault names a cuff or joint the run does not have."""

    def history_ticks(self) -> int:
        """How many ticks back the fault reads (:meth:`FaultState.history`); 0 for none."""
        return 0

    def describe(self) -> dict:
        """The fault as ``meta.json`` lists it: name, kind, start_s, end_s and its other fields."""
        params = {f.name: getattr(self, f.name) for f in dataclasses.fields(self)
                  if f.name not in ("name", "start_s", "end_s")}
        params = {k: list(v) if isinstance(v, tuple) else v for k, v in params.items()}
        return {"name": self.name, "kind": self.kind, "start_s": self.start_s, "end_s": self.end_s,
                "parameters": params}

    # -- hooks: each edits its arrays in place; called only while the fault is active ----------------
    def coupling(self, s: FaultState, scale: np.ndarray) -> None:
        """``scale`` (n_cuffs, 2): factors on each cuff's stiffness (column 0) and damping (column 1)."""

    def encoder(self, s: FaultState, q: np.ndarray, tau: np.ndarray) -> None:
        """What the encoders read: joint positions ``q`` [rad] and joint torques ``tau`` [N m] (nv,)."""

    def readings(self, s: FaultState, q: np.ndarray, dq: np.ndarray, tau: np.ndarray, wrench: np.ndarray) -> None:
        """What the controller gets: positions [rad], velocities [rad/s], torques [N m] (nv,), cuff wrenches
        (n_cuffs, 6) [N, N m]."""

    def command(self, s: FaultState, tau_cmd: np.ndarray) -> None:
        """The torque command (nv,) [N m] the drives take."""

    def drive(self, s: FaultState, tau: np.ndarray) -> None:
        """The joint torque (nv,) [N m] the drives deliver (every physics substep, and at the tick's start)."""

    def wearer(self, s: FaultState, tau: np.ndarray) -> None:
        """The wearer's joint torque (nv_human,) [N m]."""


class FaultState:
    """What a fault's hook knows at a tick: the tick, its generator, its memory, the previous values.

    Attributes
    ----------
    k : int
        The tick; ``t_s`` its time [s], ``dt_s`` the control period [s].
    first : bool
        Whether this is the fault's first active tick.
    rng : numpy.random.Generator
        The fault's own generator (seeded from the run's seed).
    memory : dict
        The fault's own values kept between ticks (emptied when it becomes active).
    previous : dict
        The values the last tick ended with, after the faults: ``"q_read"`` (the joint positions the encoders
        read), ``"readings"`` (q, dq, tau, wrench), ``"drive"`` (the delivered torque); None before the first
        tick.
    targets : FaultTargets
    """

    def __init__(self, schedule: FaultSchedule, rng: np.random.Generator) -> None:
        self._schedule = schedule
        self.rng = rng
        self.targets = schedule.targets
        self.memory: dict = {}
        self.k, self.t_s, self.dt_s, self.first = 0, 0.0, schedule.dt_s, False
        self.previous = schedule.previous

    def history(self, what: str, ticks_ago: int):
        """The values of ``what`` ("readings" or "command") as they came in ``ticks_ago`` ticks ago, before any
        fault (the first tick's values for a tick before the run)."""
        return self._schedule.past(what, ticks_ago)

    def cuff(self, name: str) -> int:
        """Index of a cuff (row of the wrench arrays)."""
        return self.targets.cuffs.index(name)

    def joint(self, name: str) -> int:
        """Index of a robot joint."""
        return self.targets.joints.index(name)

    def wearer_joint(self, name: str) -> int:
        """Index of a wearer joint."""
        return self.targets.wearer_joints.index(name)


# -- the kinds ------------------------------------------------------------------------------------------
@dataclass(frozen=True, kw_only=True)
class CuffFault(Fault):
    """A fault on one cuff (its sensor or its strap): ``cuff`` names it, checked against the run's cuffs."""

    cuff: str

    def check_targets(self, targets: FaultTargets) -> None:
        _one_of(self.owner, "cuff", self.cuff, targets.cuffs, "run's cuffs")


@dataclass(frozen=True, kw_only=True)
class JointFault(Fault):
    """A fault on one robot joint (its encoder or its drive): ``joint`` names it, checked against the robot's."""

    joint: str

    def check_targets(self, targets: FaultTargets) -> None:
        _one_of(self.owner, "joint", self.joint, targets.joints, "robot's joints")


@dataclass(frozen=True, kw_only=True)
class SensorDropout(CuffFault):
    """A cuff's force/torque sensor drops out: its reading is 0 (``mode="zero"``) or stays at the last reading
    before the fault (``mode="stuck"``), on all six axes, then comes back (common practice)."""

    mode: str = "zero"
    kind: ClassVar[str] = "sensor_dropout"

    def check_fields(self) -> None:
        if self.mode not in ("zero", "stuck"):
            raise ParameterError(f"{self.owner}.mode must be 'zero' or 'stuck', got {self.mode!r}")

    def readings(self, s, q, dq, tau, wrench):
        c = s.cuff(self.cuff)
        if self.mode == "zero":
            wrench[c] = 0.0
            return
        if s.first:
            prev = s.previous["readings"]
            s.memory["held"] = (wrench[c] if prev is None else prev[3][c]).copy()
        wrench[c] = s.memory["held"]


@dataclass(frozen=True, kw_only=True)
class SensorBiasStep(CuffFault):
    """A step of bias on a cuff's force/torque reading: :math:`y = y_0 + b` during the fault."""

    force_N: tuple[float, float, float] = (0.0, 0.0, 0.0)
    torque_Nm: tuple[float, float, float] = (0.0, 0.0, 0.0)
    kind: ClassVar[str] = "sensor_bias_step"

    def check_fields(self) -> None:
        object.__setattr__(self, "force_N", vector(self.owner, "force_N", self.force_N, 3))
        object.__setattr__(self, "torque_Nm", vector(self.owner, "torque_Nm", self.torque_Nm, 3))

    def readings(self, s, q, dq, tau, wrench):
        wrench[s.cuff(self.cuff)] += np.array(self.force_N + self.torque_Nm)


@dataclass(frozen=True, kw_only=True)
class SensorBiasDrift(CuffFault):
    """A bias that grows linearly on a cuff's force/torque reading: :math:`y = y_0 + r (t - t_{start})` during
    the fault (a thermal drift; common practice), gone after it (the sensor is tared again)."""

    rate_N_per_s: tuple[float, float, float] = (0.0, 0.0, 0.0)
    rate_Nm_per_s: tuple[float, float, float] = (0.0, 0.0, 0.0)
    kind: ClassVar[str] = "sensor_bias_drift"

    def check_fields(self) -> None:
        object.__setattr__(self, "rate_N_per_s", vector(self.owner, "rate_N_per_s", self.rate_N_per_s, 3))
        object.__setattr__(self, "rate_Nm_per_s", vector(self.owner, "rate_Nm_per_s", self.rate_Nm_per_s, 3))

    def readings(self, s, q, dq, tau, wrench):
        wrench[s.cuff(self.cuff)] += np.array(self.rate_N_per_s + self.rate_Nm_per_s) * (s.t_s - self.start_s)


@dataclass(frozen=True, kw_only=True)
class SensorNoiseBurst(CuffFault):
    """Extra white Gaussian noise on a cuff's force/torque reading: :math:`y = y_0 + \\sigma \\circ n`,
    :math:`n \\sim \\mathcal N(0, I_6)` drawn from the fault's own seeded generator every active tick."""

    std_N: float = 0.0
    std_Nm: float = 0.0
    kind: ClassVar[str] = "sensor_noise_burst"

    def check_fields(self) -> None:
        object.__setattr__(self, "std_N", nonnegative(self.owner, "std_N", self.std_N, "N"))
        object.__setattr__(self, "std_Nm", nonnegative(self.owner, "std_Nm", self.std_Nm, "N m"))

    def readings(self, s, q, dq, tau, wrench):
        std = np.array((self.std_N,) * 3 + (self.std_Nm,) * 3)
        wrench[s.cuff(self.cuff)] += std * s.rng.standard_normal(6)


@dataclass(frozen=True, kw_only=True)
class EncoderGlitch(JointFault):
    """A spike on one joint's encoder: it reads :math:`q + \\Delta q` while the fault lasts (make it one or a
    few ticks long); the velocity estimate sees the jump, as on a real drive (common practice)."""

    spike_rad: float = 0.0
    kind: ClassVar[str] = "encoder_glitch"

    def check_fields(self) -> None:
        object.__setattr__(self, "spike_rad", finite(self.owner, "spike_rad", self.spike_rad))

    def encoder(self, s, q, tau):
        q[s.joint(self.joint)] += self.spike_rad


@dataclass(frozen=True, kw_only=True)
class StuckEncoder(JointFault):
    """One joint's encoder holds its last reading: it reads the position of the tick before the fault, so the
    measured position stays at that reading and the velocity estimate decays to 0."""

    kind: ClassVar[str] = "stuck_encoder"

    def encoder(self, s, q, tau):
        j = s.joint(self.joint)
        if s.first:
            prev = s.previous["q_read"]
            s.memory["held"] = float(q[j] if prev is None else prev[j])
        q[j] = s.memory["held"]


@dataclass(frozen=True, kw_only=True)
class SensorDelay(Fault):
    """Extra transport delay of every sensor: the controller gets the readings (encoders, joint torques, cuff
    wrenches) of ``ticks`` ticks before, :math:`y_k = y^0_{k-d}`."""

    ticks: int = 1
    kind: ClassVar[str] = "sensor_delay"
    order: ClassVar[int] = 0

    def check_fields(self) -> None:
        object.__setattr__(self, "ticks", _ticks(self.owner, "ticks", self.ticks))

    def history_ticks(self) -> int:
        return self.ticks

    def readings(self, s, q, dq, tau, wrench):
        for now, old in zip((q, dq, tau, wrench), s.history("readings", self.ticks)):
            now[...] = old


@dataclass(frozen=True, kw_only=True)
class ControlDelay(Fault):
    """Extra control delay: the drives take the command of ``ticks`` ticks before, :math:`u_k = u^0_{k-d}`.

    :math:`u^0` is the command after the run's own control delay (``Scenario.control_delay_ticks``): the two add.
    """

    ticks: int = 1
    kind: ClassVar[str] = "control_delay"
    order: ClassVar[int] = 0

    def check_fields(self) -> None:
        object.__setattr__(self, "ticks", _ticks(self.owner, "ticks", self.ticks))

    def history_ticks(self) -> int:
        return self.ticks

    def command(self, s, tau_cmd):
        tau_cmd[...] = s.history("command", self.ticks)


@dataclass(frozen=True, kw_only=True)
class TorqueLoss(JointFault):
    """One joint's drive delivers no torque (a tripped amplifier, a broken cable): :math:`\\tau_j = 0`."""

    kind: ClassVar[str] = "torque_loss"

    def drive(self, s, tau):
        tau[s.joint(self.joint)] = 0.0


@dataclass(frozen=True, kw_only=True)
class StuckDrive(JointFault):
    """One joint's drive holds the torque it delivered just before the fault, whatever the command."""

    kind: ClassVar[str] = "stuck_drive"

    def drive(self, s, tau):
        j = s.joint(self.joint)
        if "held" not in s.memory:
            prev = s.previous["drive"]
            s.memory["held"] = float(tau[j] if prev is None else prev[j])
        tau[j] = s.memory["held"]


@dataclass(frozen=True, kw_only=True)
class CuffSlip(CuffFault):
    """A cuff slips on the limb: its stiffness and damping are multiplied by ``factor`` in (0, 1], so for the
    same displacement the spring force is ``factor`` times as large (Hooke's law, :math:`f = K e`)."""

    factor: float = 0.2
    kind: ClassVar[str] = "cuff_slip"

    def check_fields(self) -> None:
        x = finite(self.owner, "factor", self.factor)
        if not 0.0 < x <= 1.0:
            raise ParameterError(f"{self.owner}.factor must be in (0, 1], got {self.factor!r}")
        object.__setattr__(self, "factor", x)

    def coupling(self, s, scale):
        scale[s.cuff(self.cuff)] *= self.factor


@dataclass(frozen=True, kw_only=True)
class WearerJerk(Fault):
    """A sudden jerk of the wearer: a rectangular pulse of ``torque_Nm`` added to one wearer joint's torque
    for the fault's duration (after the wearer's own saturation)."""

    joint: str
    torque_Nm: float
    kind: ClassVar[str] = "wearer_jerk"

    def check_fields(self) -> None:
        object.__setattr__(self, "torque_Nm", finite(self.owner, "torque_Nm", self.torque_Nm))

    def check_targets(self, targets: FaultTargets) -> None:
        _one_of(self.owner, "joint", self.joint, targets.wearer_joints, "wearer's joints")

    def wearer(self, s, tau):
        tau[s.wearer_joint(self.joint)] += self.torque_Nm


#: The shipped kinds, by their ``kind`` name.
FAULT_KINDS: Mapping[str, type[Fault]] = MappingProxyType({c.kind: c for c in (
    SensorDropout, SensorBiasStep, SensorBiasDrift, SensorNoiseBurst, EncoderGlitch, StuckEncoder, SensorDelay,
    ControlDelay, TorqueLoss, StuckDrive, CuffSlip, WearerJerk)})


def fault_rng(seed: int, name: str) -> np.random.Generator:
    """The generator of the fault ``name`` in a run of ``seed``: ``SeedSequence(seed, spawn_key=(0xFA, crc32))``.

    The CRC-32 of the UTF-8 name (``zlib.crc32``) makes the stream depend on the seed and the name alone; the
    spawn key of length 2 keeps it apart from the sensors' streams (``SeedSequence(seed).spawn``, keys of
    length 1).
    """
    return np.random.default_rng(np.random.SeedSequence(seed, spawn_key=(0xFA, zlib.crc32(name.encode("utf-8")))))


def check_faults(faults: object, owner: str = "Scenario") -> tuple[Fault, ...]:
    """``faults`` as a tuple of :class:`Fault` with distinct names, or a ParameterError naming the culprit."""
    if isinstance(faults, Fault):
        faults = (faults,)
    try:
        out = tuple(faults)
    except TypeError:
        raise ParameterError(f"{owner}.faults must be a tuple of faults (sim.SensorDropout(...), ...), "
                             f"got {faults!r}") from None
    seen = set()
    for i, f in enumerate(out):
        if not isinstance(f, Fault):
            raise ParameterError(f"{owner}.faults[{i}] must be a fault (sim.SensorDropout(...), ...), got {f!r}")
        if f.name in seen:
            raise ParameterError(f"{owner}.faults[{i}].name must be unique in the scenario, got {f.name!r} twice")
        seen.add(f.name)
    return out


# -- the schedule -------------------------------------------------------------------------------------
class _FaultyDrives:
    """The drives with the active drive faults applied to the torque they deliver at every substep.

    It has no ``lag_arrays``: the plant asks it for the torque of every substep
    (:meth:`sim.physics.plant.CoupledPlant.advance`).
    """

    def __init__(self, schedule: FaultSchedule, inner) -> None:
        self._schedule, self._inner = schedule, inner

    def substep(self, q: np.ndarray, v: np.ndarray, dt_s: float) -> np.ndarray:
        return self._schedule.applied(self._inner.substep(q, v, dt_s))


class FaultSchedule:
    """The faults of one run, asked by the control loop at each hook of a tick (the module docstring).

    Parameters
    ----------
    faults : sequence of Fault
    targets : FaultTargets
        The run's cuffs and joints; every fault's names are checked against them here.
    dt_s : float [s]
        Control period.
    rngs : sequence of numpy.random.Generator
        One per fault (the run spawns them from its seed).

    Each hook method returns its inputs untouched (the very objects) when no
    fault of that hook is active, so a tick without an active fault does the
    arithmetic of a run without faults.
    """

    def __init__(self, faults: Sequence[Fault], targets: FaultTargets, dt_s: float,
                 rngs: Sequence[np.random.Generator]) -> None:
        self.faults = check_faults(faults)
        for f in self.faults:
            f.check_targets(targets)
        if len(rngs) != len(self.faults):
            raise ParameterError(f"FaultSchedule needs one generator per fault ({len(self.faults)}), got {len(rngs)}")
        self.targets, self.dt_s = targets, positive("FaultSchedule", "dt_s", dt_s, "s")
        self.previous: dict = {"q_read": None, "readings": None, "drive": None}
        self.states = [FaultState(self, r) for r in rngs]
        order = sorted(range(len(self.faults)), key=lambda i: (self.faults[i].order, i))
        # per hook, the faults (by index, in the order they act) that override it
        self._by_hook = {h: [i for i in order if getattr(type(self.faults[i]), h) is not getattr(Fault, h)]
                         for h in HOOKS}
        self._depth = max((f.history_ticks() for f in self.faults), default=0)
        self._history: dict[str, list] = {"readings": [], "command": []}
        self.active = np.zeros(len(self.faults), dtype=bool)
        self._live: dict[str, list[int]] = {h: [] for h in HOOKS}
        self._scale: np.ndarray | None = None

    def __len__(self) -> int:
        return len(self.faults)

    def begin_tick(self, k: int, t_s: float) -> np.ndarray:
        """Mark the faults active at tick ``k`` (time ``t_s`` [s]); returns the flags (n_faults,) bool (a copy)."""
        for i, f in enumerate(self.faults):
            on = f.start_s <= t_s < f.end_s
            s = self.states[i]
            s.k, s.t_s = k, t_s
            s.first = on and not self.active[i]
            if s.first:
                s.memory = {}
            self.active[i] = on
        self._live = {h: [i for i in idx if self.active[i]] for h, idx in self._by_hook.items()}
        return self.active.copy()

    def _apply(self, hook: str, *arrays) -> None:
        for i in self._live[hook]:
            getattr(self.faults[i], hook)(self.states[i], *arrays)

    def past(self, what: str, ticks_ago: int):
        """The values of ``what`` recorded ``ticks_ago`` ticks ago (the oldest kept, at the run's start)."""
        h = self._history[what]
        return h[max(0, len(h) - 1 - ticks_ago)]

    def _record(self, what: str, value) -> None:
        if self._depth:
            h = self._history[what]
            h.append(tuple(np.array(a, dtype=float) for a in value) if isinstance(value, tuple)
                     else np.array(value, dtype=float))
            if len(h) > self._depth + 1:
                del h[0]

    # -- the hooks, in the order of a tick -------------------------------------------------------------
    def coupling(self, plant) -> None:
        """Set each cuff's stiffness and damping factors on ``plant`` (:meth:`CoupledPlant.scale_cuffs`) when
        they change."""
        if not plant.cuffs or not self._by_hook["coupling"]:
            return
        scale = np.ones((len(plant.cuffs), 2))
        self._apply("coupling", scale)
        if self._scale is None or not np.array_equal(scale, self._scale):
            plant.scale_cuffs(scale)
            self._scale = scale

    def encoder(self, q: np.ndarray, tau: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """What the encoders read, from the true joint positions and torques."""
        if self._live["encoder"]:
            q, tau = np.array(q, dtype=float), np.array(tau, dtype=float)
            self._apply("encoder", q, tau)
        if self._by_hook["encoder"]:
            self.previous["q_read"] = np.array(q, dtype=float)
        return q, tau

    def readings(self, q, dq, tau, wrench):
        """The readings the controller gets, from those of the sensors (new read-only arrays if changed)."""
        self._record("readings", (q, dq, tau, wrench))
        if self._live["readings"]:
            q, dq, tau, wrench = (np.array(a, dtype=float) for a in (q, dq, tau, wrench))
            self._apply("readings", q, dq, tau, wrench)
            for a in (q, dq, tau, wrench):
                a.setflags(write=False)
        if self._by_hook["readings"]:
            self.previous["readings"] = (q, dq, tau, wrench)
        return q, dq, tau, wrench

    def command(self, tau_cmd: np.ndarray) -> np.ndarray:
        """The command the drives take, from the controller's."""
        self._record("command", tau_cmd)
        if self._live["command"]:
            tau_cmd = np.array(tau_cmd, dtype=float)
            self._apply("command", tau_cmd)
        return tau_cmd

    def drives(self, actuators):
        """What the plant steps this tick: ``actuators``, or them with the active drive faults applied."""
        return _FaultyDrives(self, actuators) if self._live["drive"] else actuators

    def applied(self, tau: np.ndarray) -> np.ndarray:
        """The torque the drives deliver, from what they would deliver (a new array if changed)."""
        if self._live["drive"]:
            tau = np.array(tau, dtype=float)
            self._apply("drive", tau)
        if self._by_hook["drive"]:
            self.previous["drive"] = np.array(tau, dtype=float)
        return tau

    def wearer(self, tau: np.ndarray) -> np.ndarray:
        """The wearer's joint torque, from the one they produce."""
        if self._live["wearer"]:
            tau = np.array(tau, dtype=float)
            self._apply("wearer", tau)
        return tau


# -- a random schedule, for soak tests ------------------------------------------------------------------
def random_faults(seed: int, duration_s: float, cuffs: Sequence[str], joints: Sequence[str],
                  rate_per_s: float = 0.5, wearer_joints: Sequence[str] = (),
                  max_length_s: float = 0.5) -> tuple[Fault, ...]:
    """A seeded random fault schedule: starts of a Poisson process of rate ``rate_per_s`` [1/s] over
    ``duration_s`` [s], each a kind drawn uniformly with moderate random parameters.

    Fault lengths are uniform in [2 ms, ``max_length_s``] (encoder glitches 2-4 ms) and every fault starts at
    least 2 ms before the end, so each is active for at least one tick of 1 ms; faults may overlap.
    Wearer jerks are drawn only if ``wearer_joints`` are given.  The same arguments give the same faults
    (``numpy.random.default_rng(seed)``); the times of a Poisson process are cumulative sums of exponential
    gaps of mean 1 / rate (e.g. Ross, *Introduction to Probability Models*, ch. 5).
    """
    o = "random_faults"
    if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or seed < 0:
        raise ParameterError(f"{o}.seed must be an integer >= 0, got {seed!r}")
    duration_s = positive(o, "duration_s", duration_s, "s")
    rate_per_s = positive(o, "rate_per_s", rate_per_s, "1/s")
    max_length_s = in_range(o, "max_length_s", max_length_s, 2e-3, 60.0, "s")
    cuffs, joints, wearer_joints = tuple(cuffs), tuple(joints), tuple(wearer_joints)
    if not cuffs or not joints:
        raise ParameterError(f"{o} needs at least one cuff and one joint, got cuffs={cuffs!r}, joints={joints!r}")
    rng = np.random.default_rng(seed)
    kinds = [k for k in FAULT_KINDS if k != "wearer_jerk" or wearer_joints]
    out: list[Fault] = []
    t = rng.exponential(1.0 / rate_per_s)
    while t < duration_s - 2e-3:
        kind = kinds[int(rng.integers(len(kinds)))]
        length = (float(rng.integers(2, 5)) * 1e-3 if kind == "encoder_glitch"
                  else float(rng.uniform(2e-3, max_length_s)))
        start = round(float(t), 6)
        base = {"name": f"{kind} {len(out) + 1}", "start_s": start, "end_s": start + length}
        cuff = cuffs[int(rng.integers(len(cuffs)))]
        joint = joints[int(rng.integers(len(joints)))]
        sign = float(rng.choice((-1.0, 1.0)))
        if kind == "sensor_dropout":
            f = SensorDropout(**base, cuff=cuff, mode=("zero", "stuck")[int(rng.integers(2))])
        elif kind == "sensor_bias_step":
            f = SensorBiasStep(**base, cuff=cuff, force_N=tuple(rng.uniform(-5.0, 5.0, 3)))
        elif kind == "sensor_bias_drift":
            f = SensorBiasDrift(**base, cuff=cuff, rate_N_per_s=tuple(rng.uniform(-10.0, 10.0, 3)))
        elif kind == "sensor_noise_burst":
            f = SensorNoiseBurst(**base, cuff=cuff, std_N=float(rng.uniform(0.5, 3.0)), std_Nm=0.05)
        elif kind == "encoder_glitch":
            f = EncoderGlitch(**base, joint=joint, spike_rad=sign * float(rng.uniform(0.005, 0.05)))
        elif kind == "stuck_encoder":
            f = StuckEncoder(**base, joint=joint)
        elif kind == "sensor_delay":
            f = SensorDelay(**base, ticks=int(rng.integers(1, 6)))
        elif kind == "control_delay":
            f = ControlDelay(**base, ticks=int(rng.integers(1, 6)))
        elif kind == "torque_loss":
            f = TorqueLoss(**base, joint=joint)
        elif kind == "stuck_drive":
            f = StuckDrive(**base, joint=joint)
        elif kind == "cuff_slip":
            f = CuffSlip(**base, cuff=cuff, factor=float(rng.uniform(0.1, 0.8)))
        else:
            f = WearerJerk(**base, joint=wearer_joints[int(rng.integers(len(wearer_joints)))],
                           torque_Nm=sign * float(rng.uniform(0.5, 3.0)))
        out.append(f)
        t += rng.exponential(1.0 / rate_per_s)
    return tuple(out)
