"""Wall stability map: a virtual wall's class (passive, active, unstable) over a grid of stiffness x damping.

Two set-ups:

* ``"rig"``: the one-axis rig of :mod:`sim.analysis.rig` (a mass with
  physical viscous damping, the sampled wall law, zero-order hold, sensor and
  control delays), each cell driven the worst way (piecewise-constant
  velocity) and by a push; its defaults come from the scenario
  (:func:`rig_params_for`);
* ``"exo"``: the full exoskeleton: the scenario's ``walls`` variant with its
  plane wall's law replaced cell by cell (:func:`exo_cell_scenario`), run for
  ``duration_s`` (default: the first push-release cycle of the intent,
  :func:`first_cycle_s`) and classified from the run's wall metrics and log
  (:func:`classify_exo_run`).  Its drive is a parameter: ``"wearer"`` (the
  scenario's own wearer pushes) or ``"fixture"`` (the worst way: the robot
  alone, its hand cuff moved at piecewise-constant velocity through the wall
  and back by a :class:`~sim.physics.fixture.HandFixture`, :func:`fixture_drive_cell`).

The grid (stiffness x damping, optionally x period x control delay) is an
embarrassingly parallel map: cells run in a pool of local processes
(:class:`concurrent.futures.ProcessPoolExecutor`, forked on Linux like a
sweep's workers) or on an existing Dask cluster, and come back in grid
order whatever the executor, so the same cells give the same table.  A
sweep's executor (:mod:`sim.experiments.sweep`) is built around run folders,
baselines shared between controllers and resuming; a cell needs none of
that, so a plain process pool does the job.

References
----------
.. [ColgateSchenkel1997] Colgate J.E., Schenkel G.G. (1997), "Passivity of a class of sampled-data systems:
   application to haptic interfaces", Journal of Robotic Systems 14(1):37-47.
.. [ColgateBrown1994] Colgate J.E., Brown J.M. (1994), "Factors affecting the Z-width of a haptic display",
   Proc. IEEE International Conference on Robotics and Automation, 3205-3210.
.. [Khatib1987] Khatib O. (1987), "A unified approach for motion and force control of robot manipulators: the
   operational space formulation", IEEE Journal of Robotics and Automation 3(1):43-53.
"""

from __future__ import annotations

import csv
import dataclasses
import math
import shutil
import tempfile
import time
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from types import MappingProxyType

import numpy as np
import pinocchio as pin

from controllers.tasks import WallLaw
from models.cuffs import CuffParams
from models.errors import ParameterError
from sim.analysis.metrics import plane_penetration_m, wall_bounce_count, wall_cycle_energy_returned_J
from sim.analysis.passivity import max_passive_stiffness_N_per_m, passivity_damping_N_s_per_m
from sim.analysis.rig import GROWTH_RATIO, RigParams, rig_cell
from sim.experiments.cluster import map_in_order
from sim.loop.runlog import load_run
from sim.loop.scenario import Scenario
from sim.loop.simulation import SimulationError, build_assembly
from sim.physics.fixture import HandFixture, PiecewiseVelocity

__all__ = ["WallMapCell", "WallMapTask", "WallMap", "wall_map", "write_wall_map", "map_cell", "rig_params_for",
           "exo_cell_scenario", "classify_exo_run", "first_cycle_s", "scenario_wall_law", "SETUPS", "DRIVES",
           "WallMapError", "CSV_COLUMNS", "EXO_GROWTH_FLOOR_M", "EXO_GROWTH_WINDOW_S",
           "EXO_UNSTABLE_BOUNCES", "boundaries",
           "largest_passive", "fixture_drive_cell", "fixture_cycle_energies_J", "FIXTURE_SPEEDS_M_S",
           "FIXTURE_DEPTH_M", "FIXTURE_CYCLES", "FIXTURE_PAUSE_S", "FIXTURE_STIFFNESS_N_PER_M",
           "FIXTURE_DAMPING_N_S_PER_M"]

SETUPS = ("rig", "exo")
#: Drives of the exo set-up: the scenario's wearer, or a hand fixture at piecewise-constant velocity.  A new drive
#: is a name here and a branch in :func:`_exo_cell`, where the cell's run is made (the wearer's:
#: ``simulate(scenario, "walls", folder)``; the fixture's: :func:`fixture_drive_cell`).
DRIVES = ("wearer", "fixture")
#: Speeds of the fixture drive [m/s]: slow, medium and fast reaching speeds; a cell takes the worst of them.
FIXTURE_SPEEDS_M_S = (0.05, 0.2, 0.5)
#: How far past the plane the fixture takes the hand cuff point [m]: 2 cm, a force K d = 12 N on the scenario's
#: 600 N/m wall, of the order of a wearer's push held against it (our choice).
FIXTURE_DEPTH_M = 0.02
#: Push-release cycles per speed, and the rest at each end of a cycle [s] (the robot comes to rest, so a cycle's
#: energy holds no kinetic energy; our choice).
FIXTURE_CYCLES = 2
FIXTURE_PAUSE_S = 0.3
#: The fixture's coupling along the normal [N/m], [N s/m]: the hand cuff's own (models.cuffs.CuffParams, first
#: axis), i.e. a velocity source strapped on as the wearer is.  A rigid stage (1e6 N/m, 1000 N s/m) makes the
#: robot's force-fed back controller chatter against it whatever the wall (hundreds of N at 600 N/m): what is
#: then measured is that loop, not the wall.
FIXTURE_STIFFNESS_N_PER_M = float(CuffParams().stiffness_N_per_m[0])
FIXTURE_DAMPING_N_S_PER_M = float(CuffParams().damping_N_s_per_m[0])
#: Oscillation of the wall-normal penetration below this is no oscillation on the exoskeleton [m] (0.5 mm: above
#: what a smooth push and release leave in the 50 Hz high-pass of :func:`_growing`, about 0.1 mm on wall_push;
#: common practice).
EXO_GROWTH_FLOOR_M = 5e-4
#: Bounces (``wall_bounce_count``) from which an exo contact is unstable: repeated ones (a single rebound on
#: entry can end in a stable contact; common practice).
EXO_UNSTABLE_BOUNCES = 2
#: Window of the moving average that :func:`_growing` removes from the penetration [s] (a 50 Hz high-pass: the
#: wearer's movement stays below it, a sampled wall's contact oscillation above).
EXO_GROWTH_WINDOW_S = 0.02


class WallMapError(ParameterError):
    """A wall map that cannot be made as asked (a scenario without a plane wall, a bad grid)."""


@dataclass(frozen=True)
class WallMapTask:
    """One cell to compute: the set-up, the wall law, period and delays, and what the set-up needs.

    ``scenario`` is the exo cell's scenario (already with the cell's wall, period, delay and duration);
    ``rig`` the rig's parameters (already with the cell's period and delay).
    """

    index: int
    setup: str
    stiffness_N_per_m: float
    damping_N_s_per_m: float
    period_s: float
    control_delay_ticks: int
    rig: RigParams | None = None
    scenario: Scenario | None = None
    drive: str = "wearer"
    folder: str | None = None


@dataclass(frozen=True)
class WallMapCell:
    """One cell of a wall map.

    Attributes
    ----------
    setup : str  ``"rig"`` or ``"exo"``.
    stiffness_N_per_m, damping_N_s_per_m : float  the wall's law K [N/m], B [N s/m].
    period_s : float [s]  control period; control_delay_ticks : int; delay_ticks : int (total, as in the bound).
    cls : str  ``"passive"``, ``"active"`` or ``"unstable"``.
    energy_returned_J : float or None [J]  rig: the worst drive's energy given back per cycle at the handle;
        exo driven by the wearer: ``wall_energy_returned_J`` (the largest over the push-release cycles; None
        without a finished one); by the fixture: the largest of :func:`fixture_cycle_energies_J` over speeds.
    push_energy_returned_J : float or None [J]  rig: the push's; exo: None.
    bounce_count : int  repeated bounces; growing : bool  growing oscillation of the penetration.
    analytic_passive : bool  whether the analytic bound holds (rig: its b; exo: the rig's b at the same mass).
    error : str  a failed cell's one-line reason ('' if none); elapsed_s : float [s] wall-clock time.
    """

    setup: str
    stiffness_N_per_m: float
    damping_N_s_per_m: float
    period_s: float
    control_delay_ticks: int
    delay_ticks: int
    cls: str
    energy_returned_J: float | None
    push_energy_returned_J: float | None
    bounce_count: int
    growing: bool
    analytic_passive: bool
    error: str = ""
    elapsed_s: float = 0.0


#: Columns of ``wallmap.csv``: every field but the wall-clock ``elapsed_s``, so the same cells give the same file.
CSV_COLUMNS = tuple(f.name for f in dataclasses.fields(WallMapCell) if f.name != "elapsed_s")


@dataclass(frozen=True)
class WallMap:
    """A wall map: its cells in grid order (stiffness fastest, then damping, period, delay) and its settings."""

    cells: tuple[WallMapCell, ...]
    setup: str
    scenario_name: str
    rig: RigParams
    stiffness_N_per_m: tuple[float, ...]
    damping_N_s_per_m: tuple[float, ...]
    periods_s: tuple[float, ...]
    control_delays_ticks: tuple[int, ...]
    default_law: tuple[float, float]
    drive: str
    duration_s: float | None
    elapsed_s: float
    executor: str


# -- the scenario's wall and the rig's defaults --------------------------------------------------------------------
def _plane_index(scenario: Scenario) -> int:
    for i, w in enumerate(scenario.walls):
        if isinstance(w, tuple) and w and w[0] == "wall_plane":
            return i
    raise WallMapError(f"scenario {scenario.name!r} has no 'wall_plane' in its walls; a wall map needs one")


def scenario_wall_law(scenario: Scenario) -> WallLaw:
    """The law (stiffness, damping) of the scenario's plane wall."""
    spec = dict(scenario.walls[_plane_index(scenario)][1])
    law = spec.get("law", WallLaw())
    return law if isinstance(law, WallLaw) else WallLaw(*law)


def _wall_normal(scenario: Scenario) -> np.ndarray:
    n = np.asarray(dict(scenario.walls[_plane_index(scenario)][1])["normal"], dtype=float)
    return n / np.linalg.norm(n)


def rig_params_for(scenario: Scenario, *, period_s: float | None = None,
                   control_delay_ticks: int | None = None) -> RigParams:
    """The rig that stands for the scenario's exoskeleton along its wall's normal n, at the start posture.

    * ``mass_kg``: the robot's operational-space mass along n at the intent's
      start posture, :math:`m_n = 1 / (n^T J M^{-1} J^T n)` ([Khatib1987]_;
      J the hand point's translational Jacobian in the world frame, M the
      joint mass matrix with the drives' armature);
    * ``damping_N_s_per_m``: the joints' viscous friction D seen along n,
      :math:`b_n = m_n^2\\, n^T J M^{-1} D M^{-1} J^T n` (the same projection of
      the joint damping);
    * ``period_s``: the scenario's control period; ``sensor_delay_ticks``: 0
      (the encoders sample the joints without a delay line); ``control_delay_ticks``:
      the scenario's; ``substeps``: the scenario's.
    """
    a = build_assembly(scenario)
    arm, q = a.exo, np.asarray(a.q_exo0, dtype=float)
    model, data = arm.model, arm.model.createData()
    M = pin.crba(model, data, q)
    M = np.triu(M) + np.triu(M, 1).T
    M[np.diag_indices_from(M)] += model.armature
    pin.computeJointJacobians(model, data, q)
    pin.updateFramePlacements(model, data)
    J = pin.getFrameJacobian(model, data, arm.frame_id(arm.hand_frame), pin.LOCAL_WORLD_ALIGNED)[:3]
    n = _wall_normal(scenario)
    u = np.linalg.solve(M, J.T @ n)  # M^-1 J^T n
    m_n = 1.0 / float(n @ J @ u)
    b_n = m_n ** 2 * float(u @ (np.asarray(model.damping) * u))
    return RigParams(mass_kg=m_n, damping_N_s_per_m=b_n,
                     period_s=scenario.control_period_s if period_s is None else float(period_s),
                     sensor_delay_ticks=0,
                     control_delay_ticks=scenario.control_delay_ticks if control_delay_ticks is None
                     else control_delay_ticks,
                     substeps=scenario.substeps)


def first_cycle_s(scenario: Scenario) -> float:
    """The end of the intent's first push-release cycle [s]: its start hold and its first two vias (in and back
    out), or the whole run if it has fewer vias."""
    intent = scenario.intent
    vias = getattr(intent, "vias", ())
    if len(vias) < 2:
        return scenario.duration_s
    t = float(getattr(intent, "start_hold_s", 0.0)) + sum(v.move_s + v.hold_s for v in vias[:2])
    return min(t, scenario.duration_s)


def exo_cell_scenario(scenario: Scenario, stiffness_N_per_m: float, damping_N_s_per_m: float, *,
                      period_s: float | None = None, control_delay_ticks: int | None = None,
                      duration_s: float | None = None) -> Scenario:
    """The scenario with its plane wall's law replaced by (K, B), and the period, delay and duration given."""
    i = _plane_index(scenario)
    name, spec = scenario.walls[i]
    spec = dict(spec)
    law = spec.get("law", WallLaw())
    law = WallLaw(float(stiffness_N_per_m), float(damping_N_s_per_m)) if not isinstance(law, WallLaw) else \
        dataclasses.replace(law, stiffness_N_per_m=float(stiffness_N_per_m),
                            damping_N_s_per_m=float(damping_N_s_per_m))
    spec["law"] = (law.stiffness_N_per_m, law.damping_N_s_per_m)
    walls = tuple((name, spec) if j == i else w for j, w in enumerate(scenario.walls))
    changes = {"walls": walls, "duration_s": first_cycle_s(scenario) if duration_s is None else float(duration_s)}
    if period_s is not None:
        changes["control_period_s"] = float(period_s)
    if control_delay_ticks is not None:
        changes["control_delay_ticks"] = int(control_delay_ticks)
    return dataclasses.replace(scenario, **changes)


# -- one cell ---------------------------------------------------------------------------------------------------------
def _growing(pen: np.ndarray, dt_s: float) -> bool:
    """Whether the oscillation of the penetration grows over the longest contact.

    Its deviation from a :data:`EXO_GROWTH_WINDOW_S` moving average peaks in the last third more than
    :data:`~sim.analysis.rig.GROWTH_RATIO` times as high as in the second third (the first holds the entry),
    and above :data:`EXO_GROWTH_FLOOR_M`."""
    inside = pen > 0.0
    if not inside.any():
        return False
    edges = np.flatnonzero(np.diff(np.concatenate(([0], inside.astype(int), [0]))))
    starts, ends = edges[0::2], edges[1::2]
    j = int(np.argmax(ends - starts))
    seg = pen[starts[j]:ends[j]]
    w = max(1, round(EXO_GROWTH_WINDOW_S / dt_s))
    if len(seg) < 3 * w:
        return False
    smooth = np.convolve(seg, np.ones(w) / w, mode="same")
    dev = np.abs(seg - smooth)[w // 2: len(seg) - w // 2]
    third = len(dev) // 3
    if third < 1:
        return False
    mid, last = dev[third:2 * third].max(), dev[2 * third:].max()
    return bool(last > EXO_GROWTH_FLOOR_M and last > GROWTH_RATIO * mid)


def classify_exo_run(metrics: dict, penetration_m: np.ndarray, dt_s: float) -> tuple[str, bool]:
    """An exo cell's class from its run's wall metrics and its log.

    ``"unstable"`` when the hand bounced repeatedly (``wall_bounce_count`` >=
    :data:`EXO_UNSTABLE_BOUNCES`) or the penetration's oscillation grew
    (:func:`_growing`); ``"active"`` when a push-release cycle gave energy back
    (``wall_energy_returned_J`` > 0, [ColgateSchenkel1997]_); else ``"passive"``.
    Returns ``(class, growing)``."""
    growing = _growing(np.asarray(penetration_m, dtype=float), dt_s)
    if growing or (metrics.get("wall_bounce_count") or 0) >= EXO_UNSTABLE_BOUNCES:
        return "unstable", growing
    returned = metrics.get("wall_energy_returned_J")
    return ("active" if returned is not None and returned > 0 else "passive"), growing


def fixture_cycle_energies_J(force_N: np.ndarray, penetration_m: np.ndarray, cycle_ticks: int,
                             cycles: int) -> list[float]:
    """Energy the wall (with the robot and its controller) gave back to the fixture per cycle [J].

    .. math:: E_c = -\\sum_{k=cN}^{(c+1)N-1} F_k \\, (p_{k+1} - p_k)

    F the fixture's force on the robot along the wall normal n (positive pushing into the wall) and p the
    imposed point's penetration :math:`n^T (x - x_0)`, over the N ticks of cycle c
    (:func:`sim.analysis.metrics.wall_cycle_energy_returned_J`).  Each cycle starts and ends at rest, so the
    kinetic energy cancels; positive: the robot gave the fixture net energy back, i.e. it was active
    at the hand ([ColgateSchenkel1997]_)."""
    F = np.asarray(force_N, dtype=float)
    p = np.asarray(penetration_m, dtype=float)
    return [wall_cycle_energy_returned_J(F, p, c * cycle_ticks, (c + 1) * cycle_ticks) for c in range(cycles)]


def fixture_drive_cell(scenario: Scenario, speed_m_s: float, *, depth_m: float = FIXTURE_DEPTH_M,
                       cycles: int = FIXTURE_CYCLES, pause_s: float = FIXTURE_PAUSE_S) -> dict:
    """One fixture run of an exo cell: the robot alone driven through the wall and back at ``speed_m_s``.

    The robot runs alone (``mode="exo_alone"``) under the scenario's ``walls`` variant (the cell's wall law,
    :func:`exo_cell_scenario`) from the scenario's start posture, its hand cuff held by a
    :class:`~sim.physics.fixture.HandFixture` whose :class:`~sim.physics.fixture.PiecewiseVelocity` motion
    moves the imposed point along the wall normal n from the cuff point's start (in front of the plane, at a
    penetration :math:`p_0 < 0`) to ``depth_m`` past the plane (distance :math:`d - p_0`) and back, ``cycles``
    times, with ``pause_s`` at rest at each end.

    What is measured: the fixture imposes the motion through a coupling as stiff as the hand cuff
    (:data:`FIXTURE_STIFFNESS_N_PER_M`), in series with the robot; the energy it gets back over a cycle,
    :math:`-\\oint F \\cdot dx` (:func:`fixture_cycle_energies_J`), is the passivity of the robot, its
    controller and the wall law as seen at the hand under the worst drive (piecewise-constant velocity)
    that Colgate & Schenkel's condition is about ([ColgateSchenkel1997]_); the coupling itself is a passive
    spring-damper and only adds dissipation.  The safety monitor is off: the velocity steps load the coupling
    by :math:`D \\Delta v` and the monitor would switch the robot off, which is not the wall's behaviour.

    Returns
    -------
    dict  ``cls`` (``"passive"``, ``"active"``, ``"unstable"``), ``energies_J`` (per cycle, [J]),
    ``growing`` (the robot hand point's penetration oscillating and growing, :func:`_growing`, over the rests
    past the plane), ``bounce_count`` (:func:`~sim.analysis.metrics.wall_bounce_count` of the robot hand point;
    from :data:`EXO_UNSTABLE_BOUNCES` on, unstable as under the wearer), ``error``,
    ``start_penetration_m`` (p0 [m]) and ``max_penetration_m`` (the imposed point's deepest [m]; None if the
    run failed).
    """
    from sim.loop.simulation import Simulation

    spec = dict(scenario.walls[_plane_index(scenario)][1])
    n = _wall_normal(scenario)
    a = build_assembly(scenario)
    arm = a.exo
    data = arm.model.createData()
    pin.framesForwardKinematics(arm.model, data, np.asarray(a.q_exo0, dtype=float))
    p0 = float(plane_penetration_m(data.oMf[arm.frame_id(arm.hand_frame)].translation, spec["point_m"], n))
    motion = PiecewiseVelocity(speed_m_s=float(speed_m_s), distance_m=depth_m - min(p0, 0.0), cycles=cycles,
                               pause_s=pause_s)
    fixture = HandFixture(motion, direction=tuple(n), stiffness_N_per_m=FIXTURE_STIFFNESS_N_PER_M,
                          damping_N_s_per_m=FIXTURE_DAMPING_N_S_PER_M)
    dt = scenario.control_period_s
    cycle_ticks = round(motion.cycle_s / dt)
    sc = dataclasses.replace(scenario, duration_s=cycles * cycle_ticks * dt + 2 * dt, safety=None)
    out = {"cls": "unstable", "energies_J": [], "growing": False, "bounce_count": 0, "error": "",
           "start_penetration_m": p0,
           "max_penetration_m": None}
    try:
        traj = Simulation(sc, "walls", mode="exo_alone", fixture=fixture).run()
    except SimulationError as e:  # a non-finite state or command: the contact blew up
        return {**out, "error": str(e).splitlines()[0][:200]}
    F = np.asarray(traj.arrays["fixture_force_N"]) @ n
    pen = plane_penetration_m(traj.arrays["fixture_position_m"], spec["point_m"], n)
    hand = plane_penetration_m(traj.arrays["p_hand_exo"], spec["point_m"], n)
    if not (np.all(np.isfinite(F)) and np.all(np.isfinite(hand))):
        return {**out, "error": "non-finite fixture force or hand position"}
    energies = fixture_cycle_energies_J(F, pen, cycle_ticks, cycles)
    # growth only while the imposed point rests past the plane: elsewhere the velocity steps alone bend the hand's
    # path by about dv w / 8 (0.5 mm at 0.2 m/s over the 20 ms window), which is no oscillation
    go, rest = round(motion.distance_m / motion.speed_m_s / dt), round(pause_s / dt)
    growing = any(_growing(hand[c * cycle_ticks + go: c * cycle_ticks + go + rest], dt) for c in range(cycles))
    bounces = wall_bounce_count(hand, dt)
    cls = "unstable" if growing or bounces >= EXO_UNSTABLE_BOUNCES else ("active" if max(energies) > 0 else "passive")
    return {**out, "cls": cls, "energies_J": energies, "growing": growing, "bounce_count": bounces,
            "max_penetration_m": float(pen.max())}


def _exo_cell(task: WallMapTask) -> WallMapCell:
    from sim.experiments.run import evaluate_run
    from sim.loop.simulate import simulate

    sc = task.scenario
    if task.drive == "fixture":
        return _fixture_cell(task)
    law = scenario_wall_law(sc)
    spec = dict(sc.walls[_plane_index(sc)][1])
    wall = {"point_m": spec["point_m"], "normal": spec["normal"], "sensor": spec.get("sensor", "hand"),
            "stiffness_N_per_m": law.stiffness_N_per_m, "damping_N_s_per_m": law.damping_N_s_per_m,
            "rendered": True}
    folder = Path(task.folder)
    if folder.exists():
        shutil.rmtree(folder)
    common = {"energy_returned_J": None, "push_energy_returned_J": None, "bounce_count": 0, "growing": False}
    try:
        simulate(sc, "walls", folder)
    except SimulationError as e:  # a non-finite state or command: the contact blew up
        return dataclasses.replace(_blank(task), cls="unstable", error=" ".join(str(e).split()), **common)
    metrics = evaluate_run(folder, wall=wall, force_limits_N=sc.force_limits_N)
    run = load_run(folder)
    pen = plane_penetration_m(run.arrays["p_hand_human"], wall["point_m"], wall["normal"])
    if not np.all(np.isfinite(pen)):
        return dataclasses.replace(_blank(task), cls="unstable", error="non-finite hand position", **common)
    cls, growing = classify_exo_run(metrics, pen, float(run.meta["dt_s"]))
    return dataclasses.replace(_blank(task), cls=cls, energy_returned_J=metrics.get("wall_energy_returned_J"),
                               bounce_count=int(metrics.get("wall_bounce_count") or 0), growing=growing)


_RANK = MappingProxyType({"passive": 0, "active": 1, "unstable": 2})


def _fixture_cell(task: WallMapTask) -> WallMapCell:
    """An exo cell under the fixture drive: the worst of :data:`FIXTURE_SPEEDS_M_S` (class, then energy)."""
    runs = [fixture_drive_cell(task.scenario, v) for v in FIXTURE_SPEEDS_M_S]
    worst = max(runs, key=lambda r: _RANK[r["cls"]])
    energies = [e for r in runs for e in r["energies_J"]]
    return dataclasses.replace(_blank(task), cls=worst["cls"], energy_returned_J=max(energies) if energies else None,
                               bounce_count=max(r["bounce_count"] for r in runs),
                               growing=any(r["growing"] for r in runs), error=worst["error"])


def _blank(task: WallMapTask) -> WallMapCell:
    rig = task.rig
    b_needed = passivity_damping_N_s_per_m(task.stiffness_N_per_m, task.period_s, task.damping_N_s_per_m,
                                           rig.delay_ticks)
    return WallMapCell(setup=task.setup, stiffness_N_per_m=task.stiffness_N_per_m,
                       damping_N_s_per_m=task.damping_N_s_per_m, period_s=task.period_s,
                       control_delay_ticks=task.control_delay_ticks, delay_ticks=rig.delay_ticks, cls="passive",
                       energy_returned_J=None, push_energy_returned_J=None, bounce_count=0, growing=False,
                       analytic_passive=bool(rig.damping_N_s_per_m > b_needed))


def map_cell(task: WallMapTask) -> WallMapCell:
    """Compute one cell (what a worker process or a Dask task runs)."""
    t0 = time.perf_counter()
    if task.setup == "rig":
        c = rig_cell(task.stiffness_N_per_m, task.damping_N_s_per_m, task.rig)
        cell = dataclasses.replace(_blank(task), cls=c.cls, energy_returned_J=c.energy_returned_J,
                                   push_energy_returned_J=c.push.energy_returned_J,
                                   bounce_count=c.push.bounce_count, growing=c.push.growing)
    else:
        cell = _exo_cell(task)
    return dataclasses.replace(cell, elapsed_s=time.perf_counter() - t0)


# -- the grid -----------------------------------------------------------------------------------------------------
def _values(name: str, values, *, integer: bool = False, positive: bool = True) -> tuple:
    vals = tuple(values)
    if not vals:
        raise WallMapError(f"{name} must hold at least one value")
    out = []
    for v in vals:
        if integer:
            if isinstance(v, bool) or not isinstance(v, (int, np.integer)) or v < 0:
                raise WallMapError(f"{name} must hold integers >= 0, got {v!r}")
            out.append(int(v))
        else:
            ok = isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v) and (
                v > 0 if positive else v >= 0)
            if not ok:
                raise WallMapError(f"{name} must hold finite numbers {'>' if positive else '>='} 0, got {v!r}")
            out.append(float(v))
    if len(set(out)) != len(out):
        raise WallMapError(f"{name} holds a value twice: {list(vals)!r}")
    return tuple(out)


def wall_map(scenario: Scenario, stiffness_N_per_m: Sequence[float], damping_N_s_per_m: Sequence[float], *,
             setup: str = "rig", periods_s: Sequence[float] | None = None,
             control_delays_ticks: Sequence[int] | None = None, rig: RigParams | None = None,
             drive: str = "wearer", duration_s: float | None = None, jobs: int = 1,
             dask_address: str | None = None, work_dir: str | Path | None = None) -> WallMap:
    """The class of every cell of stiffness x damping (x period x control delay) on the rig or the exoskeleton.

    Parameters
    ----------
    scenario : Scenario  with a ``wall_plane`` in its walls (its law is the map's default cell).
    stiffness_N_per_m, damping_N_s_per_m : sequences [N/m], [N s/m]  the grid's axes.
    setup : ``"rig"`` or ``"exo"``.
    periods_s, control_delays_ticks : optional sequences  default: the scenario's period and control delay.
    rig : RigParams, optional  the rig (default :func:`rig_params_for`; its period and control delay are
        replaced by each cell's).  The exo cells' analytic column uses the same rig's damping.
    drive : ``"wearer"`` or ``"fixture"``  the exo set-up's drive: the scenario's wearer, or a hand fixture
        moving the robot's hand cuff through the wall and back at piecewise-constant velocity
        (:func:`fixture_drive_cell`, the worst of :data:`FIXTURE_SPEEDS_M_S`).
    duration_s : float, optional  the exo cells' duration (default :func:`first_cycle_s`).
    jobs : int  local processes (1: this one); ignored with ``dask_address``.
    dask_address : str, optional  an existing Dask scheduler; workers must see ``work_dir`` at the same path.
    work_dir : path, optional  where the exo cells' run folders go (default: a temporary folder, removed).
    """
    if setup not in SETUPS:
        raise WallMapError(f"setup must be one of {', '.join(SETUPS)}, got {setup!r}")
    if drive not in DRIVES:
        raise WallMapError(f"drive must be one of {', '.join(DRIVES)}, got {drive!r}")
    if isinstance(jobs, bool) or not isinstance(jobs, int) or jobs < 1:
        raise WallMapError(f"jobs must be an integer >= 1, got {jobs!r}")
    Ks = _values("stiffness_N_per_m", stiffness_N_per_m)
    Bs = _values("damping_N_s_per_m", damping_N_s_per_m, positive=False)
    Ts = _values("periods_s", (scenario.control_period_s,) if periods_s is None else periods_s)
    Ds = _values("control_delays_ticks", (scenario.control_delay_ticks,) if control_delays_ticks is None
                 else control_delays_ticks, integer=True)
    if drive == "fixture" and duration_s is not None:
        raise WallMapError(f"duration_s applies to the wearer drive only (the fixture's runs last its "
                           f"{FIXTURE_CYCLES} cycles), got {duration_s!r}")
    if duration_s is not None and not (math.isfinite(duration_s) and duration_s > 0):
        raise WallMapError(f"duration_s must be a finite number > 0 [s], got {duration_s!r}")
    default = scenario_wall_law(scenario)
    base_rig = rig_params_for(scenario) if rig is None else rig
    tmp = None
    if setup == "exo" and work_dir is None:
        tmp = tempfile.mkdtemp(prefix="exosandbox-wallmap-")
    root = Path(work_dir if work_dir is not None else (tmp or "."))
    tasks = []
    for T in Ts:
        for d in Ds:
            cell_rig = dataclasses.replace(base_rig, period_s=T, control_delay_ticks=d)
            for B in Bs:
                for K in Ks:
                    sc = folder = None
                    if setup == "exo":  # built here: a bad period or delay is refused before anything runs
                        sc = exo_cell_scenario(scenario, K, B, period_s=T, control_delay_ticks=d,
                                               duration_s=duration_s)
                        folder = str(root / f"T{T:g}-d{d}" / f"B{B:g}" / f"K{K:g}")
                    tasks.append(WallMapTask(len(tasks), setup, K, B, T, d, rig=cell_rig, scenario=sc,
                                             drive=drive, folder=folder))
    t0 = time.perf_counter()
    try:
        cells, executor = map_in_order(map_cell, tasks, jobs=jobs, dask_address=dask_address, error=WallMapError)
    finally:
        if tmp is not None:
            shutil.rmtree(tmp, ignore_errors=True)
    return WallMap(cells=tuple(cells), setup=setup, scenario_name=scenario.name, rig=base_rig,
                   stiffness_N_per_m=Ks, damping_N_s_per_m=Bs, periods_s=Ts, control_delays_ticks=Ds,
                   default_law=(default.stiffness_N_per_m, default.damping_N_s_per_m), drive=drive,
                   duration_s=(duration_s if duration_s is not None else first_cycle_s(scenario))
                   if setup == "exo" and drive == "wearer" else None,
                   elapsed_s=time.perf_counter() - t0, executor=executor)


# -- output ---------------------------------------------------------------------------------------------------------
def largest_passive(cells: Sequence[WallMapCell]) -> dict[tuple[float, int, float], float | None]:
    """The largest passive stiffness of the grid [N/m] per (period, control delay, damping) (None if none)."""
    out: dict[tuple[float, int, float], float | None] = {}
    for c in cells:
        key = (c.period_s, c.control_delay_ticks, c.damping_N_s_per_m)
        best = out.get(key)
        if c.cls == "passive" and (best is None or c.stiffness_N_per_m > best):
            out[key] = c.stiffness_N_per_m
        else:
            out.setdefault(key, None)
    return out


def boundaries(result: WallMap, points: int = 121) -> dict[tuple[float, int], dict[str, tuple]]:
    """The analytic boundaries to draw per (period, total delay): the largest passive stiffness over damping
    for the rig's b, exact ([ColgateSchenkel1997]_, numerically), without delay (:math:`K = 2(b - |B|)/T`) and
    without virtual damping (:math:`K = 2b/(T(2d+1))`)."""
    b = result.rig.damping_N_s_per_m
    Bs = np.linspace(0.0, max(result.damping_N_s_per_m) * 1.05 + 1e-9, points)
    out = {}
    for T in result.periods_s:
        for dc in result.control_delays_ticks:
            d = result.rig.sensor_delay_ticks + dc
            exact = np.array([max_passive_stiffness_N_per_m(b, T, B, d) for B in Bs])
            curves = {"passivity bound (exact)": (Bs, exact, "exact")}
            if d > 0:
                curves["b > KT/2 + |B| (no delay)"] = (Bs, 2.0 * (b - np.abs(Bs)) / T, "no delay")
                curves["b > KT(2d+1)/2 (B = 0)"] = (Bs, np.full_like(Bs, 2.0 * b / (T * (2 * d + 1))), "no damping")
            out[(T, d)] = curves
    return out


def write_wall_map(result: WallMap, out_dir: str | Path) -> dict[str, Path]:
    """Write ``wallmap.csv`` (every cell), ``wallmap.png`` (one panel per period and delay) and ``report.md``."""
    from sim.analysis.tables import write_text
    from sim.output.report import CAUTION, fmt, markdown_table
    from sim.output.wallmap_plot import plot_wall_map

    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    csv_path = out / "wallmap.csv"
    with csv_path.open("w", newline="", encoding="utf-8") as f:
        w = csv.writer(f)
        w.writerow(CSV_COLUMNS)
        for c in result.cells:
            w.writerow(["" if getattr(c, k) is None else (repr(getattr(c, k)) if isinstance(getattr(c, k), float)
                                                          else getattr(c, k)) for k in CSV_COLUMNS])
    b = result.rig.damping_N_s_per_m
    driven = f", driven by the {result.drive}" if result.setup == "exo" else ""
    whose = "its" if result.setup == "rig" else "the rig's"
    png = plot_wall_map(result.cells, out / "wallmap.png", boundaries=boundaries(result),
                        default_law=result.default_law,
                        title=f"{result.scenario_name}: wall map on the {result.setup}{driven}; bound for {whose} "
                              f"physical damping b = {fmt(b)} N s/m")
    rows = []
    for (T, d, B), K in largest_passive(result.cells).items():
        rig = dataclasses.replace(result.rig, period_s=T, control_delay_ticks=d)
        rows.append([f"{1e3 * T:g}", str(rig.delay_ticks), fmt(B), "none" if K is None else fmt(K),
                     fmt(max_passive_stiffness_N_per_m(b, T, B, rig.delay_ticks))])
    K0, B0 = result.default_law
    default = [c for c in result.cells if c.stiffness_N_per_m == K0 and c.damping_N_s_per_m == B0]
    counts = {k: sum(c.cls == k for c in result.cells) for k in ("passive", "active", "unstable")}
    setup = ("the one-axis rig (a mass with physical viscous damping, the sampled wall law, zero-order hold, "
             "sensor and control delays), each cell driven at a piecewise-constant velocity through sampled "
             "cosines up to Nyquist and by a push" if result.setup == "rig" else
             f"the full exoskeleton, the scenario's walls variant with the wall's law replaced, "
             f"{fmt(result.duration_s)} s per cell, driven by the wearer" if result.drive == "wearer" else
             "the full exoskeleton alone under the walls variant with the wall's law replaced, driven by the "
             "fixture: its hand cuff moved along the wall normal at piecewise-constant velocity ("
             + ", ".join(f"{v:g}" for v in FIXTURE_SPEEDS_M_S) + f" m/s, the worst of them) from the start "
             f"posture to {1e3 * FIXTURE_DEPTH_M:g} mm past the plane and back, {FIXTURE_CYCLES} cycles, through a "
             f"coupling as stiff as the hand cuff ({fmt(FIXTURE_STIFFNESS_N_PER_M)} N/m); energy returned: "
             "minus the fixture's work on the robot per cycle")
    text = [f"# Wall stability map: {result.scenario_name}", "", CAUTION, "",
            f"Set-up: {setup}. Rig: mass {fmt(result.rig.mass_kg)} kg, physical damping "
            f"{fmt(b)} N s/m, sensor delay {result.rig.sensor_delay_ticks} tick(s). "
            f"{len(result.cells)} cells ({counts['passive']} passive, {counts['active']} active, "
            f"{counts['unstable']} unstable) in {result.elapsed_s:.1f} s ({result.executor}).", ""]
    if default:
        text += ["The scenario's own wall (" + f"{fmt(K0)} N/m, {fmt(B0)} N s/m): "
                 + ", ".join(f"{c.cls} (T = {1e3 * c.period_s:g} ms, d = {c.delay_ticks})" for c in default), ""]
    text += ["## Largest passive stiffness per damping", "",
             markdown_table(["period ms", "delay ticks", "damping N s/m", "largest passive K of the grid N/m",
                             "analytic bound N/m"], rows), "",
             "The analytic bound is the Colgate & Schenkel (1997) condition b > (T/2) Re{(1 - e^{-jwT}) H} / "
             "(1 - cos wT) over 0 <= w <= pi/T with H(z) = (K + B (1 - z^-1)/T) z^-d, evaluated numerically "
             "(b > KT/2 + |B| without delay; b > KT(2d+1)/2 for a delayed spring; with both, not their sum). "
             "It holds for the rig's b; the exoskeleton adds its drives, filters and the wearer, so on the "
             "exoskeleton it is a guide, not a bound.", "",
             f"![wall map]({png.name})", "",
             "Cells: wallmap.csv (energy_returned_J > 0: the wall gave back energy over a cycle, i.e. it was "
             "active; unstable: growing oscillation, repeated bounces or a non-finite state).", "",
             "References: Colgate J.E., Schenkel G.G. (1997), J. Robotic Systems 14(1):37-47; Colgate J.E., "
             "Brown J.M. (1994), Proc. IEEE ICRA (Z-width); Diolaiti N., Niemeyer G., Barbagli F., Salisbury "
             "J.K. (2006), IEEE T-RO 22(2):256-268."]
    report = out / "report.md"
    write_text(report, "\n".join(text) + "\n")
    return {"csv": csv_path, "png": png, "report": report}
