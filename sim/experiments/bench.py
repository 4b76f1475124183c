r"""Speed and memory benchmark of the sandbox (``exosandbox bench``).

The benchmark runs the same library code a user runs and reports figures; it
asserts no speed target (those are in the README and the issue tracker, and
machines differ).  Cases:

* **Reference case**: the 7-DOF exoskeleton on the ``m50`` wearer with the
  default three cuffs, 1 kHz control with 4 physics substeps, the ``walls``
  variant (dynamics and torque limits hard; joint limits; one virtual wall;
  transparency; damping; minimum-norm regularization) on the wall-push
  scenario.  Per control tick: median and 99th percentile of the wall time of
  the whole tick (plant substeps, sensors, controller, logging) and of the
  HQP solve alone (:func:`controllers.hqp.solve_hierarchy` on the tick's
  stacked levels: the ``solve_time_s`` diagnostic), the median time the
  controller's tasks take to give their rows and have them stacked
  (``rows_time_s``: ``task_rows_median_us``), and the realtime factor (simulated time over the summed tick
  wall time, as in ``metrics.json``).  A 0.05 s run before it loads (on a
  fresh install, compiles) the numba kernels once per process, so these are
  steady-state ticks; its wall time is ``warmup_s``.
* **Where the time goes**: a separate, instrumented run of the same case (at
  most 3 s) gives the mean own time per tick of each stage of the loop
  (plant, actuators, sensing, the controller's model terms, its task rows
  and solve, the wearer's motor, logging, the rest): ``tick_breakdown_us``
  (:func:`tick_breakdown`).
* **Against cvxpy**: the measurements of the reference run are replayed; on a
  sample of ticks the same stack is solved level by level with cvxpy
  (:func:`sim.experiments.lexicographic.controller_lexicographic`, the lexicographic
  formulation of Kanoun, Lamiraux & Wieber 2011 with an interior-point solver), in the same process;
  the torques must agree to ``agreement_tol_Nm``; the ratio of the median
  solve times is ``cvxpy_speedup``.
* **Against the QP backends**: each installed backend on the same ticks, its
  largest torque difference to the default backend and its solve times.
* **Growth**: tick time against the number of priority levels (1 to 6, the
  reference stack growing one level at a time) and against the number of
  joints (7, 14, 28: :func:`models.chain.build_chain` chains without a
  wearer, under the same kind of stack, each with the torque to hold its own
  weight: :func:`chain_tick_times`).
* **A user's task**: the reference stack with one more task written in
  plain Python, as a user writes one (:class:`PythonHandCeiling`, in the
  wall's level, a ceiling the hand never reaches, so both runs move alike),
  against the same run without it, the two alternating: ``user_task`` gives
  both stacks' tick, rows and solve medians (:func:`user_task_cost`). Every task, shipped or a
  user's, gives its rows through its own ``rows`` each tick, so such a task costs what a shipped
  one costs per row.
* **Sweep throughput**: the same small sweep (:func:`sim.experiments.sweep.run_sweep`)
  with one and with two worker processes, alternating, ``sweep_repeats``
  times each (``jobs2_speedup`` = median wall time with 1 / median wall time
  with 2), each in a fresh process whose start-up counts, as for a user's
  command.  Beside each pair, the machine's own two-process speedup on the
  same kind of run (:class:`TwoWarmProcesses`: one sweep case in one warm
  process, then in two at once): ``machine_jobs2_speedup``, the ceiling a
  perfectly parallel sweep would reach on this machine at that moment, and
  ``jobs2_efficiency``, ``jobs2_speedup`` over it.  On a shared machine the
  ceiling moves with the other load; the two are compared within one run.
* **Memory**: peak resident memory of a long run (coupled run, human-alone
  baseline and metrics) measured in a child process with
  :func:`resource.getrusage`, and the size of its log per simulated minute.

References
----------
.. [Kanoun2011] O. Kanoun, F. Lamiraux, P.-B. Wieber, "Kinematic control of
   redundant manipulators: generalizing the task-priority framework to
   inequality tasks", IEEE Trans. Robotics 27(4):785-792, 2011.
"""

from __future__ import annotations

import concurrent.futures
import contextlib
import cProfile
import dataclasses
import functools
import importlib
import io
import math
import multiprocessing
import os
import pstats
import resource
import tempfile
import time
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from types import MappingProxyType

import numpy as np
import pinocchio as pin

from controllers.base import ControllerContext
from controllers.hqp import HQPController
from controllers.qp_backends import available_backends
from controllers.registry import make_controller
from controllers.tasks import JointDamping, JointPositionLimits, JointVelocityLimits, Task, TickState, Transparency
from models.chain import ChainParams, build_chain
from models.checks import finite
from models.errors import ParameterError, SandboxError
from models.records import Measurement
from sim.experiments.lexicographic import ReferenceSolveError, controller_lexicographic, controller_rows
from sim.experiments.run import run_scenario
from sim.experiments.sweep import plan_sweep, run_case, run_sweep, serve
from sim.loop.runlog import RunLog, load_run
from sim.loop.scenario import Scenario, load_scenario
from sim.loop.simulate import simulate
from sim.loop.simulation import build_assembly, controller_context
from sim.physics.sensors import EncoderParams, JointSensing

__all__ = [
    "BenchParams",
    "BenchError",
    "reference_scenario",
    "tick_statistics",
    "measurements_from_run",
    "replay",
    "compare_cvxpy",
    "compare_backends",
    "level_stacks",
    "chain_tick_times",
    "PythonHandCeiling",
    "user_task_cost",
    "sweep_throughput",
    "TwoWarmProcesses",
    "memory_run",
    "profile_reference",
    "run_bench",
    "format_report",
]

#: Reference stack, growing one level at a time for the level series (names of controllers.tasks.TASKS).
_SERIES_LEVELS = ("joint_limits", "velocity_limits", "wall", "transparency", "damping", "posture")


class BenchError(SandboxError, RuntimeError):
    """A benchmark case could not run (a missing optional package, a disagreement between solvers)."""


@dataclass(frozen=True)
class BenchParams:
    """Sizes of the benchmark cases.

    Attributes
    ----------
    reference_duration_s : float [s]
        Simulated time of the reference case (10 s).
    compare_ticks : int
        Ticks of the reference run, evenly spaced, replayed through cvxpy and
        every backend.
    agreement_tol_Nm : float [N m]
        Largest torque difference accepted between our solver and cvxpy.
    series_duration_s : float [s]
        Simulated time of each point of the level series.
    chain_joints : tuple of int
        Joint counts of the joint series.
    chain_ticks : int
        Control ticks of each point of the joint series.
    sweep_subjects : tuple of str
        Wearers of the small sweep (with the ``walls`` and ``transparent``
        variants).
    sweep_seeds : int
        Seeds per (controller, subject) of the sweep. The default 4 gives 16
        runs, so that the start-up of each process (about 1 s: imports and
        loading the compiled kernels from their cache) does not dominate the
        throughput, as it does not in a real sweep of hundreds of runs.
    sweep_duration_s : float [s]
        Simulated time of each sweep run.
    sweep_repeats : int
        Times each sweep is timed, one job and two jobs alternating (2; 1
        for ``quick``); ``jobs2_speedup`` is the ratio of the median wall
        times, so that one sweep slowed by the machine's other load does
        not make the figure.
    memory_duration_s : float [s]
        Simulated time of the memory run (60 s).
    """

    reference_duration_s: float = 10.0
    compare_ticks: int = 200
    agreement_tol_Nm: float = 1e-5
    series_duration_s: float = 2.0
    chain_joints: tuple[int, ...] = (7, 14, 28)
    chain_ticks: int = 2000
    sweep_subjects: tuple[str, ...] = ("m50", "f50")
    sweep_seeds: int = 4
    sweep_duration_s: float = 2.0
    sweep_repeats: int = 2
    memory_duration_s: float = 60.0

    def __post_init__(self) -> None:
        o = "BenchParams"
        for name in ("reference_duration_s", "agreement_tol_Nm", "series_duration_s", "sweep_duration_s",
                     "memory_duration_s"):
            value = getattr(self, name)
            if not (isinstance(value, (int, float)) and np.isfinite(value) and value > 0):
                raise ParameterError(f"{o}.{name} must be a finite number > 0, got {value!r}")
        for name in ("compare_ticks", "chain_ticks", "sweep_seeds", "sweep_repeats"):
            value = getattr(self, name)
            if isinstance(value, bool) or not isinstance(value, int) or value < 1:
                raise ParameterError(f"{o}.{name} must be an int >= 1, got {value!r}")
        joints = tuple(self.chain_joints)
        if not joints or any(isinstance(j, bool) or not isinstance(j, int) or j < 1 for j in joints):
            raise ParameterError(f"{o}.chain_joints must be ints >= 1, got {self.chain_joints!r}")
        object.__setattr__(self, "chain_joints", joints)
        subjects = tuple(self.sweep_subjects)
        if not subjects or not all(isinstance(s, str) and s for s in subjects):
            raise ParameterError(f"{o}.sweep_subjects must name at least one subject, got {self.sweep_subjects!r}")
        object.__setattr__(self, "sweep_subjects", subjects)

    @classmethod
    def quick(cls) -> BenchParams:
        """The same cases, shorter (under a minute on a laptop core when a tick is about 1 ms)."""
        return cls(reference_duration_s=3.0, compare_ticks=30, series_duration_s=0.5, chain_ticks=300,
                   sweep_seeds=1, sweep_duration_s=0.5, sweep_repeats=1, memory_duration_s=6.0)


# --------------------------------------------------------------------------------------------
# reference case


def reference_scenario(scenario_path: str | Path, duration_s: float) -> Scenario:
    """The reference scenario file with its duration set to ``duration_s`` [s]."""
    return dataclasses.replace(load_scenario(scenario_path), duration_s=float(duration_s))


def tick_statistics(folder: str | Path, dt_s: float) -> dict:
    """Tick and HQP solve figures of a run folder's ``timing.npz``.

    Returns ``tick_time_median_us``, ``tick_time_p99_us``,
    ``hqp_solve_median_us``, ``hqp_solve_p99_us``, ``task_rows_median_us``
    (None without an HQP controller), ``controller_time_median_us`` and ``realtime_factor``
    :math:`= n\\,\\Delta t / \\sum_k t_k` (simulated over wall time).
    """
    with np.load(Path(folder) / "timing.npz", allow_pickle=False) as f:
        tick = f["tick_time_s"]
        ctrl = f["controller_time_s"]
        solve = f["diag_solve_time_s"] if "diag_solve_time_s" in f.files else None
        rows = f["diag_rows_time_s"] if "diag_rows_time_s" in f.files else None
    out = {
        "tick_time_median_us": float(np.median(tick) * 1e6),
        "tick_time_p99_us": float(np.percentile(tick, 99) * 1e6),
        "controller_time_median_us": float(np.median(ctrl) * 1e6),
        # a tick whose rows failed has no solve (NaN): left out
        "hqp_solve_median_us": None if solve is None else float(np.nanmedian(solve) * 1e6),
        "hqp_solve_p99_us": None if solve is None else float(np.nanpercentile(solve, 99) * 1e6),
        "task_rows_median_us": None if rows is None else float(np.median(rows) * 1e6),
        "realtime_factor": float(len(tick) * dt_s / np.sum(tick)),
    }
    return out


# --------------------------------------------------------------------------------------------
# where the time of a tick goes

#: Stages of the control tick and the methods whose own time (without the nested stages) each one counts.
TICK_STAGES: Mapping[str, tuple[tuple[str, str, str], ...]] = MappingProxyType({
    "plant": (("sim.physics.plant", "CoupledPlant", "advance"), ("sim.physics.plant", "CoupledPlant", "update_cuffs"),
              ("sim.physics.plant", "CoupledPlant", "hand_position"),
              ("sim.physics.plant", "CoupledPlant", "state_is_finite")),
    "actuators": (("sim.physics.actuators", "TorqueSourceActuators", "hold"),
                  ("sim.physics.actuators", "TorqueSourceActuators", "substep")),
    "sensing": (("sim.physics.sensors", "JointSensing", "measure"),
                ("sim.physics.sensors", "ForceSensorBank", "measure"),
                ("sim.physics.sensors", "ForceTorqueSensor", "measure")),
    "controller model terms": (("controllers.tasks.state", "TickState", "update"),),
    "controller rows and solve": (("controllers.hqp.controller", "HQPController", "step"),),
    "wearer's motor": (("sim.physics.wearer", "HumanMotor", "torque"),),
    "logging": (("sim.loop.runlog", "RunLog", "append_row"), ("sim.loop.runlog", "RunLog", "append")),
})


class _StageClock:
    """Own time per stage: a call's wall time less that of the stages it calls (as a profiler's own time)."""

    def __init__(self) -> None:
        self.totals = dict.fromkeys(TICK_STAGES, 0.0)
        self._stack: list[list] = []  # [stage, start, time of nested stages]

    def wrap(self, stage: str, fn):
        @functools.wraps(fn)
        def timed(*args, **kwargs):
            frame = [stage, time.perf_counter(), 0.0]
            self._stack.append(frame)
            try:
                return fn(*args, **kwargs)
            finally:
                elapsed = time.perf_counter() - frame[1]
                self._stack.pop()
                self.totals[stage] += elapsed - frame[2]
                if self._stack:
                    self._stack[-1][2] += elapsed

        return timed


def tick_breakdown(scenario: Scenario, folder: str | Path, controller: str = "walls") -> dict:
    """Mean wall time per control tick of each stage of the loop [µs], from one instrumented run.

    The methods of :data:`TICK_STAGES` are wrapped, for this run only, by a
    timer that keeps each stage's own time; ``"rest of the loop"`` is the
    mean tick less the stages (building the measurement and the log row,
    the loop itself, and the timers: about a microsecond per timed call).
    Means, so that the stages add up to the mean tick; the tick median of an
    instrumented run is not the bench's figure (that is the reference run).
    """
    clock = _StageClock()
    per_tick = {stage: [] for stage in TICK_STAGES}
    last = dict.fromkeys(TICK_STAGES, 0.0)

    def progress(_done: int, _total: int) -> None:
        for stage, total in clock.totals.items():
            per_tick[stage].append(total - last[stage])
            last[stage] = total

    originals = []
    try:
        for stage, methods in TICK_STAGES.items():
            for module, cls_name, attr in methods:
                cls = getattr(importlib.import_module(module), cls_name)
                fn = cls.__dict__[attr]
                originals.append((cls, attr, fn))
                setattr(cls, attr, clock.wrap(stage, fn))
        simulate(scenario, controller, folder, progress=progress)
    finally:
        for cls, attr, fn in reversed(originals):
            setattr(cls, attr, fn)
    with np.load(Path(folder) / "timing.npz", allow_pickle=False) as f:
        tick = f["tick_time_s"]
    out = {stage: float(np.mean(v) * 1e6) for stage, v in per_tick.items()}
    out["rest of the loop"] = float(np.mean(tick) * 1e6) - sum(out.values())
    out["tick (mean, instrumented)"] = float(np.mean(tick) * 1e6)
    return out


#: The pinocchio functions a tick of the loop calls (plant, controller, wearer), as (module, name).
PINOCCHIO_CALLS = tuple((pin, name) for name in (
    "forwardKinematics", "aba", "integrate", "rnea", "difference", "computeJointJacobians", "updateFramePlacements",
    "crba", "nonLinearEffects", "computeGeneralizedGravity", "getFrameJacobian", "getFrameClassicalAcceleration")
) + ((pin.cholesky, "decompose"), (pin.cholesky, "computeMinv"))


def pinocchio_time(scenario: Scenario, folder: str | Path, controller: str = "walls") -> dict:
    """Mean wall time per control tick spent inside pinocchio's algorithms [µs], from one instrumented run.

    Every function of :data:`PINOCCHIO_CALLS` is wrapped, for this run only, by
    a timer (about 0.1 µs of its own per call, counted in). The figure is what
    a loop that keeps pinocchio for its rigid-body algorithms cannot go below
    on this machine, whatever else is compiled. Returns
    ``pinocchio_us_per_tick`` and ``pinocchio_calls_per_tick`` (means).
    """
    clock = time.perf_counter
    spent = [0.0, 0]

    def timed(fn):
        @functools.wraps(fn)
        def wrapper(*args, **kwargs):
            t0 = clock()
            try:
                return fn(*args, **kwargs)
            finally:
                spent[0] += clock() - t0
                spent[1] += 1
        return wrapper

    originals = []
    try:
        for module, name in PINOCCHIO_CALLS:
            fn = getattr(module, name)
            originals.append((module, name, fn))
            setattr(module, name, timed(fn))
        simulate(scenario, controller, folder)
    finally:
        for module, name, fn in reversed(originals):
            setattr(module, name, fn)
    ticks = scenario.n_ticks
    return {"pinocchio_us_per_tick": spent[0] / ticks * 1e6, "pinocchio_calls_per_tick": spent[1] / ticks}


# --------------------------------------------------------------------------------------------
# replaying the measurements of a run


def measurements_from_run(folder: str | Path) -> list[Measurement]:
    """The controller's measurements of every tick of a coupled run, rebuilt from its log.

    Uses the logged encoder positions, velocity estimates, applied torques
    (the joint torque reading; the shipped sensors add no torque noise) and
    measured cuff wrenches.
    """
    run = load_run(folder)
    a, names = run.arrays, run.meta["cuffs"]
    return [Measurement(float(a["t"][k]), a["q_exo_meas"][k], a["dq_exo_meas"][k], a["tau_applied"][k],
                        {name: a["cuff_wrench_meas"][k, i] for i, name in enumerate(names)})
            for k in range(len(a["t"]))]


def replay(controller: HQPController, context: ControllerContext, measurements: Sequence[Measurement]):
    """Reset ``controller`` and feed it ``measurements`` in order.

    Returns
    -------
    tau : (n_ticks, nv) ndarray [N m]
    solve_time_s : (n_ticks,) ndarray [s]
        The controller's ``solve_time_s`` diagnostic per tick.
    """
    controller.reset(context)
    nv = context.arm.nv
    tau, times = np.zeros((len(measurements), nv)), np.zeros(len(measurements))
    for k, m in enumerate(measurements):
        tau[k] = controller.step(m)
        times[k] = controller.diagnostics()["solve_time_s"]
    if controller.fallback_count:
        raise BenchError(f"controller {controller.name!r} fell back {controller.fallback_count} times in the "
                         f"replay: {controller.last_fallback_reason}")
    return tau, times


def _context_and_measurements(scenario: Scenario, folder: Path):
    asm = build_assembly(scenario)
    return controller_context(asm, scenario.control_period_s), measurements_from_run(folder)


def _sample(n: int, k: int) -> np.ndarray:
    return np.unique(np.linspace(0, n - 1, min(k, n)).round().astype(int))


def compare_cvxpy(scenario: Scenario, folder: str | Path, ticks: int, agreement_tol_Nm: float = 1e-5) -> dict:
    """Our solver against :func:`sim.experiments.lexicographic.controller_lexicographic` on ``ticks`` evenly
    spaced ticks of a run.

    Both see the same measurements; ours is replayed in order over the
    sampled ticks (warm-starting from the previous sampled tick).  Our time is
    the ``solve_time_s`` diagnostic (the hierarchical solve of the stacked
    rows); cvxpy's is the level-by-level build and solve; neither includes the
    tasks' rows.

    Raises
    ------
    BenchError
        If the torques differ by more than ``agreement_tol_Nm`` on any tick.
    """
    context, meas = _context_and_measurements(scenario, Path(folder))
    idx = _sample(len(meas), ticks)
    sampled = [meas[k] for k in idx]
    ours = make_controller("walls", scenario.variants, scenario.walls)
    tau_ours, t_ours = replay(ours, context, sampled)
    ref = make_controller("walls", scenario.variants, scenario.walls)
    ref.reset(context)
    n, n_tasks = context.arm.nv, sum(len(tasks) for tasks in ref.levels)
    tau_cvx, t_cvx, wall_ticks = np.zeros_like(tau_ours), np.zeros(len(sampled)), 0
    for i, m in enumerate(sampled):
        rows = controller_rows(ref, m)
        wall_ticks += sum(len(eq) + len(ineq) for eq, ineq in rows.levels) == n_tasks  # the wall is touched
        t0 = time.perf_counter()
        try:
            tau_cvx[i] = controller_lexicographic(rows)[n:]
        except ReferenceSolveError as e:
            raise BenchError(str(e)) from e
        t_cvx[i] = time.perf_counter() - t0
    diff = float(np.abs(tau_cvx - tau_ours).max())
    if diff > agreement_tol_Nm:
        k = int(np.unravel_index(np.argmax(np.abs(tau_cvx - tau_ours)), tau_ours.shape)[0])
        raise BenchError(f"cvxpy and the HQP solver disagree by {diff:.3g} N m (tolerance {agreement_tol_Nm:g}) "
                         f"at t = {sampled[k].t_s:.3f} s")
    return {
        "cvxpy_ticks": len(sampled),
        "cvxpy_wall_contact_ticks": int(wall_ticks),
        "cvxpy_max_torque_diff_Nm": diff,
        "cvxpy_solve_median_us": float(np.median(t_cvx) * 1e6),
        "hqp_solve_median_same_ticks_us": float(np.median(t_ours) * 1e6),
        "cvxpy_speedup": float(np.median(t_cvx) / np.median(t_ours)),
    }


def compare_backends(scenario: Scenario, folder: str | Path, ticks: int) -> dict:
    """Every installed QP backend on the same sampled ticks: solve times and agreement with the default."""
    context, meas = _context_and_measurements(scenario, Path(folder))
    sampled = [meas[k] for k in _sample(len(meas), ticks)]
    out, ref = {}, None
    for name in available_backends():
        ctrl = make_controller("walls", scenario.variants, scenario.walls)
        ctrl.solver = name
        try:
            tau, t = replay(ctrl, context, sampled)
        except BenchError as e:
            out[name] = {"error": str(e)}
            continue
        if ref is None:
            ref = tau
        out[name] = {"solve_median_us": float(np.median(t) * 1e6), "solve_p99_us": float(np.percentile(t, 99) * 1e6),
                     "max_torque_diff_to_default_Nm": float(np.abs(tau - ref).max())}
    return out


#: simulated time of the warm-up run before the reference case [s]
WARMUP_S = 0.05
#: Longest instrumented run of the tick breakdown [s].
BREAKDOWN_MAX_S = 3.0
#: Measurements of the machine's own two-process speedup beside each pair of sweeps (each about 2 runs long).
CEILING_MEASURES = 3


# --------------------------------------------------------------------------------------------
# growth with levels and joints


def level_stacks(scenario: Scenario) -> dict[str, list]:
    """Variants ``levels1`` .. ``levels6``: the reference stack growing one level at a time.

    Level order: joint position limits, velocity limits, the scenario's
    first wall, transparency, damping, a posture task (towards the start
    posture).
    """
    wall = scenario.walls[0] if scenario.walls else None
    spec = {"joint_limits": ["joint_limits"], "velocity_limits": ["velocity_limits"],
            "wall": [wall] if wall is not None else ["damping"], "transparency": ["transparency"],
            "damping": ["damping"],
            "posture": [("posture", {"posture_rad": tuple(build_assembly(scenario).q_exo0)})]}
    return {f"levels{k}": [spec[name] for name in _SERIES_LEVELS[:k]] for k in range(1, 7)}


def _level_series(scenario: Scenario, work: Path, progress) -> list[dict]:
    stacks = level_stacks(scenario)
    sc = dataclasses.replace(scenario, variants=stacks, controllers=tuple(stacks))
    out = []
    for k, name in enumerate(stacks, start=1):
        folder = work / f"levels{k}"
        simulate(sc, name, folder)
        st = tick_statistics(folder, sc.control_period_s)
        out.append({"levels": k, "tick_time_median_us": st["tick_time_median_us"],
                    "hqp_solve_median_us": st["hqp_solve_median_us"]})
        progress(f"levels {k}: tick {st['tick_time_median_us']:.0f} us")
    return out


def chain_tick_times(n_joints: int, n_ticks: int, folder: str | Path, *, dt_s: float = 1e-3,
                     substeps: int = 4) -> dict:
    """Whole-tick wall times of an HQP controller on a serial chain without a wearer.

    Tick: encoder sensing (:class:`~sim.physics.sensors.JointSensing`), the controller
    (joint position and velocity limits > transparency > damping, the
    ``walls`` stack without a wall), ``substeps`` semi-implicit Euler steps of
    the articulated-body algorithm under gravity, and logging of ``t``, q,
    q̇ and τ (:class:`~sim.loop.runlog.RunLog`).  The chain starts at 0.3 rad on
    every joint, at rest.

    Every chain gets the torque to hold itself at its start pose: the torque
    limit is the default :class:`~models.chain.ChainParams` limit or twice the
    largest static gravity torque there, whichever is larger (rounded up to
    10 N m).  With a fixed limit a long chain could not hold its own weight,
    its torque-limit rows would be active on every tick and its levels would
    go to the QP backend: the series would compare a saturated chain with
    unsaturated ones instead of chains of different sizes.  The result gives
    the limit used (``torque_limit_Nm``) and the ticks on which a level needed
    the QP backend (``qp_backend_ticks``).
    """
    start = ChainParams(n_joints=n_joints)
    arm = build_chain(start)
    q0 = np.full(arm.nq, 0.3)
    gravity = pin.computeGeneralizedGravity(arm.model, arm.model.createData(), q0)
    limit = max(start.torque_limit_Nm, 10.0 * math.ceil(2.0 * float(np.abs(gravity).max()) / 10.0))
    if limit > start.torque_limit_Nm:
        arm = build_chain(dataclasses.replace(start, torque_limit_Nm=limit))
    model, data = arm.model, arm.model.createData()
    ctrl = HQPController([[JointPositionLimits(), JointVelocityLimits()], [Transparency()], [JointDamping()]],
                         name=f"chain{n_joints}")
    ctrl.reset(ControllerContext(arm=arm, cuff_frames={}, dt_s=dt_s))
    sensing = JointSensing(EncoderParams(), arm.nv, dt_s, np.random.default_rng(0))
    q, v = q0.copy(), np.zeros(arm.nv)
    sensing.reset(q)
    qp_ticks = 0
    h = dt_s / substeps
    times = np.zeros(n_ticks)
    cols = {"t": (), "q": (arm.nq,), "dq": (arm.nv,), "tau_cmd": (arm.nv,)}
    with RunLog(folder, cols) as log:
        for k in range(n_ticks):
            t0 = time.perf_counter()
            qm, dqm, taum = sensing.measure(q, np.zeros(arm.nv))
            tau = ctrl.step(Measurement(k * dt_s, qm, dqm, taum, {}))
            log.append(t=k * dt_s, q=q, dq=v, tau_cmd=tau)
            last = ctrl.last_result
            qp_ticks += last is not None and "qp" in last.level_methods
            for _ in range(substeps):
                a = pin.aba(model, data, q, v, tau)
                v = v + h * a
                q = pin.integrate(model, q, v * h)
            times[k] = time.perf_counter() - t0
    return {"joints": n_joints, "tick_time_median_us": float(np.median(times) * 1e6),
            "tick_time_p99_us": float(np.percentile(times, 99) * 1e6), "fallbacks": ctrl.fallback_count,
            "torque_limit_Nm": float(limit), "qp_backend_ticks": int(qp_ticks)}


# --------------------------------------------------------------------------------------------
# a user's task


class PythonHandCeiling(Task):
    r"""A task written in plain Python, as a user writes one (the README's example): the hand point below
    ``z_max_m`` [m] (world z).

    One inequality row on q̈, a one-step look-ahead of the point's height (common practice for a bound in
    discrete time): :math:`z + \dot z\,\Delta t + (J_z \ddot q + \dot J_z \dot q)\,\Delta t^2 \le z_{max}`,
    i.e. :math:`J_z \ddot q \le (z_{max} - z - \dot z \Delta t)/\Delta t^2 - \dot J_z \dot q`.
    """

    name, kind = "python_hand_ceiling", "ineq"

    def __init__(self, z_max_m: float, frame: str = "exo_hand_point") -> None:
        self.z_max = finite("PythonHandCeiling", "z_max_m", z_max_m)
        self.frame = frame

    def bind(self, state: TickState) -> None:
        self.fid = state.arm.frame_id(self.frame)

    def rows(self, state: TickState) -> tuple[np.ndarray, np.ndarray]:
        Jz = state.jacobian(self.fid)[2]
        z, zd, dt = state.position(self.fid)[2], Jz @ state.dq, state.dt_s
        C = np.zeros((1, 2 * state.nv))
        C[0, : state.nv] = Jz
        return C, np.array([(self.z_max - z - zd * dt) / dt**2 - state.drift(self.fid)[2]])


#: Height of :func:`user_task_cost`'s ceiling above the world origin [m]: out of any arm's reach.
USER_TASK_CEILING_M = 10.0
#: Runs of each stack in :func:`user_task_cost`, the two stacks alternating.
USER_TASK_REPEATS = 2
_USER_TASK_KEYS = ("tick_time_median_us", "task_rows_median_us", "hqp_solve_median_us", "controller_time_median_us")


def user_task_cost(scenario: Scenario, folder: str | Path, repeats: int = USER_TASK_REPEATS) -> list[dict]:
    """Tick figures (:func:`tick_statistics`) of the ``walls`` stack, and of the same stack with a
    :class:`PythonHandCeiling` (at :data:`USER_TASK_CEILING_M`, never reached) beside the scenario's walls.

    Each stack runs ``scenario`` ``repeats`` times, the two alternating (run folders ``stack{k}_run{r}``), so
    that a change in the machine's speed weighs on both alike; each figure is the mean of its runs' medians.
    Returns per stack a dict with ``stack``, ``runs`` and the figures ``tick_time_median_us``,
    ``task_rows_median_us``, ``hqp_solve_median_us`` and ``controller_time_median_us``.
    """
    base = [["joint_limits", "velocity_limits"], list(scenario.walls), ["transparency"], ["damping"]]
    if not scenario.walls:
        base.pop(1)
    with_task = [list(level) for level in base]
    with_task[1 if scenario.walls else 0].append(PythonHandCeiling(USER_TASK_CEILING_M))
    stacks = {"walls": base, "walls + a task in Python": with_task}
    sc = dataclasses.replace(scenario, variants=stacks, controllers=tuple(stacks))
    figures: dict[str, list[dict]] = {name: [] for name in stacks}
    for r in range(repeats):
        for k, name in enumerate(stacks):
            run = Path(folder) / f"stack{k}_run{r}"
            simulate(sc, name, run)
            figures[name].append(tick_statistics(run, sc.control_period_s))
    return [{"stack": name, "runs": len(runs)} | {k: float(np.mean([f[k] for f in runs])) for k in _USER_TASK_KEYS}
            for name, runs in figures.items()]


# --------------------------------------------------------------------------------------------
# sweep throughput and memory (child processes)


def sweep_throughput(scenario_path: str | Path, subjects: Sequence[str], controllers: Sequence[str], seeds: int,
                     duration_s: float, out_dir: str | Path, jobs: int) -> dict:
    """Wall time of a small sweep (controllers × subjects × seeds) with ``jobs`` worker processes.

    Runs :func:`sim.experiments.sweep.run_sweep` as ``exosandbox sweep --jobs`` does, in
    a freshly spawned process, so that every ``jobs`` pays the same start-up
    a user's command pays (imports, loading the compiled kernels): with
    ``jobs=1`` the sweep runs inside that process, otherwise it starts its
    own ``jobs`` workers.
    """
    ctx = multiprocessing.get_context("spawn")
    t0 = time.perf_counter()
    with concurrent.futures.ProcessPoolExecutor(max_workers=1, mp_context=ctx) as pool:
        errors = pool.submit(_sweep_child, str(scenario_path), list(controllers), list(subjects), seeds,
                             float(duration_s), str(out_dir), jobs).result()
    wall = time.perf_counter() - t0
    runs = len(controllers) * len(subjects) * seeds
    if errors:
        raise BenchError(f"sweep with {jobs} jobs: {len(errors)} runs failed, e.g. {errors[0]}")
    return {"jobs": jobs, "runs": runs, "wall_s": wall, "runs_per_min": 60.0 * runs / wall}


def _sweep_child(scenario_path: str, controllers: list, subjects: list, seeds: int, duration_s: float, out_dir: str,
                 jobs: int) -> list[str]:
    result = run_sweep(scenario_path, controllers, subjects, seeds, out_dir=Path(out_dir), jobs=jobs,
                       duration_s=duration_s)
    return [c.error for c in result.results if c.error]


class TwoWarmProcesses:
    """Two worker processes, started and warmed up once, that run sweep cases on demand: the machine's own
    two-process speedup, the ceiling of ``jobs2_speedup``.

    :meth:`measure` times one sweep case (:func:`sim.experiments.sweep.run_case`: coupled
    run, human-alone baseline, metrics and report, ``duration_s`` simulated)
    in one process alone, ``t1``, then the same case in both processes at
    once, ``t2``, each on a seed of its own so that no baseline is reused.
    ``2 t1 / t2`` is the throughput two processes give over one with no
    start-up, no serial part and no imbalance between them: what a perfectly
    parallel sweep of these runs would reach on this machine at that moment
    (2 on two idle cores; less where the two runs share a cache, memory
    bandwidth or a core with other load).  ``jobs2_speedup`` divided by it is
    the sweep's own parallel efficiency.

    The processes are spawned (no state shared with this one) and each runs a
    0.05 s case first, so imports and the compiled kernels' loading are not
    timed.  Use as a context manager; idle between measurements, they take no
    CPU time.
    """

    def __init__(self, scenario_path: str | Path, subject: str, controller: str, duration_s: float,
                 out_dir: str | Path) -> None:
        self._template = plan_sweep(scenario_path, [controller], [subject], 1, out_dir, duration_s=duration_s)[0]
        self._out = Path(out_dir).resolve()
        self._seed = 10_000  # seeds of their own, far from a scenario's, each used once
        self._workers: list = []

    def _case(self, duration_s: float | None = None):
        self._seed += 1
        return dataclasses.replace(self._template, seed=self._seed, folder=str(self._out / f"seed{self._seed}"),
                                   duration_s=self._template.duration_s if duration_s is None else duration_s)

    def _run(self, workers: Sequence) -> float:
        """Send each of ``workers`` a case of its own at once; the wall time until the last is back [s]."""
        t0 = time.perf_counter()
        errors = [r.error for r in self._exchange(workers, [self._case() for _ in workers]) if r.error]
        wall = time.perf_counter() - t0
        if errors:
            raise BenchError(f"parallel ceiling: a run failed: {errors[0]}")
        return wall

    @staticmethod
    def _exchange(workers: Sequence, cases: Sequence) -> list:
        """Send each worker its case, then collect the results; a worker that has gone is a BenchError."""
        try:
            for (_proc, conn), case in zip(workers, cases):
                conn.send((run_case, case))
            return [conn.recv() for _proc, conn in workers]
        except (EOFError, OSError) as e:
            codes = [proc.exitcode for proc, _conn in workers]
            raise BenchError(f"parallel ceiling: a worker process stopped (exit codes {codes}): "
                             f"{type(e).__name__}") from e

    def __enter__(self) -> TwoWarmProcesses:
        ctx = multiprocessing.get_context("spawn")
        try:
            for _ in range(2):
                ours, theirs = ctx.Pipe()
                proc = ctx.Process(target=serve, args=(theirs,), name="exosandbox-bench-ceiling", daemon=True)
                proc.start()
                theirs.close()
                self._workers.append((proc, ours))
            results = self._exchange(self._workers, [self._case(WARMUP_S) for _ in self._workers])
            errors = [r.error for r in results if r.error]
            if errors:
                raise BenchError(f"parallel ceiling: the warm-up run failed: {errors[0]}")
        except BaseException:
            self.__exit__(None, None, None)
            raise
        return self

    def measure(self) -> dict:
        """One measurement: ``{"one_s": t1, "two_s": t2, "speedup": 2 t1 / t2}``."""
        one = self._run(self._workers[:1])
        two = self._run(self._workers)
        return {"one_s": one, "two_s": two, "speedup": 2.0 * one / two}

    def __exit__(self, *exc) -> None:
        for proc, conn in self._workers:
            try:
                conn.send(None)
            except OSError:
                pass
            conn.close()
            proc.join(timeout=10.0)
            if proc.is_alive():
                proc.terminate()
                proc.join()
        self._workers.clear()


def _memory_child(scenario_path: str, duration_s: float, out: str) -> dict:
    scenario = reference_scenario(scenario_path, duration_s)
    run_scenario(scenario, "walls", out)
    peak_kib = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss  # Linux: KiB
    log = sum(p.stat().st_size for p in (Path(out) / "log").glob("chunk_*"))
    base = sum(p.stat().st_size for p in (Path(out) / "human_alone" / "log").glob("chunk_*"))
    return {"peak_kib": int(peak_kib), "log_bytes": int(log), "baseline_log_bytes": int(base)}


def memory_run(scenario_path: str | Path, duration_s: float, out: str | Path) -> dict:
    """Peak resident memory and log size of a reference run of ``duration_s``, in a fresh child process.

    The child runs :func:`sim.experiments.run.run_scenario` (coupled run, human-alone
    baseline, metrics) and reports ``resource.getrusage(RUSAGE_SELF).ru_maxrss``
    (KiB on Linux), so the benchmark process itself does not count.
    """
    ctx = multiprocessing.get_context("spawn")
    with concurrent.futures.ProcessPoolExecutor(max_workers=1, mp_context=ctx) as pool:
        r = pool.submit(_memory_child, str(scenario_path), float(duration_s), str(out)).result()
    per_min = 60.0 / duration_s
    return {"memory_duration_s": duration_s, "peak_rss_MB": r["peak_kib"] * 1024 / 1e6,
            "log_MB_per_min": r["log_bytes"] / 1e6 * per_min,
            "baseline_log_MB_per_min": r["baseline_log_bytes"] / 1e6 * per_min}


# --------------------------------------------------------------------------------------------
# profile and the whole benchmark


def profile_reference(scenario_path: str | Path, duration_s: float = 2.0, top: int = 25,
                      folder: str | Path | None = None) -> str:
    """cProfile of the reference case: the ``top`` entries by own time, as text.

    A 0.05 s run first loads the compiled kernels (as before the reference
    case), so the profile is of steady-state ticks, not of loading them.
    """
    scenario = reference_scenario(scenario_path, duration_s)
    with tempfile.TemporaryDirectory() as tmp:
        simulate(dataclasses.replace(scenario, duration_s=WARMUP_S), "walls", Path(tmp) / "warmup")
        prof = cProfile.Profile()
        prof.enable()
        simulate(scenario, "walls", Path(folder) if folder is not None else Path(tmp) / "profile")
        prof.disable()
    buf = io.StringIO()
    pstats.Stats(prof, stream=buf).sort_stats("tottime").print_stats(top)
    return buf.getvalue()


def run_bench(scenario_path: str | Path, params: BenchParams | None = None, *, work_dir: str | Path | None = None,
              progress: Callable[[str], None] | None = None) -> dict:
    """Run every case and return the figures (keys as documented in the module docstring).

    Parameters
    ----------
    scenario_path : path
        The wall-push scenario file (``scenarios/wall_push.py``).
    params : BenchParams, optional
        Case sizes; default :class:`BenchParams` (``BenchParams.quick()`` for
        a short run).
    work_dir : path, optional
        Where the run folders go; a temporary folder (removed) by default.
    progress : callable(str), optional
        Called with a short line after each case.
    """
    params = BenchParams() if params is None else params
    if not isinstance(params, BenchParams):
        raise ParameterError(f"run_bench: params must be a BenchParams, got {type(params).__name__}")
    say = progress or (lambda _msg: None)
    scenario_path = Path(scenario_path)
    with tempfile.TemporaryDirectory() as tmp:
        work = Path(work_dir) if work_dir is not None else Path(tmp)
        work.mkdir(parents=True, exist_ok=True)
        ref = reference_scenario(scenario_path, params.reference_duration_s)
        report: dict = {"params": dataclasses.asdict(params), "scenario": ref.name, "cpu_count": os.cpu_count(),
                        "substeps": ref.substeps, "control_period_s": ref.control_period_s}
        # a short run first loads (on a fresh install: compiles) the compiled kernels, once per process, so the
        # reference ticks below are steady-state ticks; its wall time is reported
        t0 = time.perf_counter()
        simulate(dataclasses.replace(ref, duration_s=WARMUP_S), "walls", work / "warmup")
        report["warmup_s"] = time.perf_counter() - t0
        say(f"warm-up: {report['warmup_s']:.1f} s (kernels loaded or compiled)")
        ref_dir = work / "reference"
        t0 = time.perf_counter()
        simulate(ref, "walls", ref_dir)
        report |= tick_statistics(ref_dir, ref.control_period_s)
        report["reference_wall_s"] = time.perf_counter() - t0
        say(f"reference: tick median {report['tick_time_median_us']:.0f} us, "
            f"HQP median {report['hqp_solve_median_us']:.0f} us")
        report["tick_breakdown_us"] = tick_breakdown(
            dataclasses.replace(ref, duration_s=min(params.reference_duration_s, BREAKDOWN_MAX_S)), work / "breakdown")
        say("breakdown: " + ", ".join(f"{k} {v:.0f} us" for k, v in report["tick_breakdown_us"].items()))
        report |= pinocchio_time(dataclasses.replace(ref, duration_s=min(params.reference_duration_s,
                                                                         BREAKDOWN_MAX_S)), work / "pinocchio")
        say(f"pinocchio: {report['pinocchio_us_per_tick']:.0f} us per tick in "
            f"{report['pinocchio_calls_per_tick']:.0f} calls")
        try:
            report |= compare_cvxpy(ref, ref_dir, params.compare_ticks, params.agreement_tol_Nm)
            say(f"cvxpy: speedup {report['cvxpy_speedup']:.0f}x")
        except BenchError as e:
            report |= {"cvxpy_speedup": None, "cvxpy_error": str(e)}
            say(f"cvxpy: {e}")
        report["backends"] = compare_backends(ref, ref_dir, params.compare_ticks)
        say("backends: " + ", ".join(report["backends"]))
        report["levels_series"] = _level_series(dataclasses.replace(ref, duration_s=params.series_duration_s),
                                                work / "levels", say)
        report["user_task"] = user_task_cost(dataclasses.replace(ref, duration_s=params.series_duration_s),
                                             work / "user_task")
        say("user's task: tick " + ", ".join(f"{u['tick_time_median_us']:.0f} us ({u['stack']})"
                                              for u in report["user_task"]))
        report["joints_series"] = []
        for nj in params.chain_joints:
            report["joints_series"].append(chain_tick_times(nj, params.chain_ticks, work / f"chain{nj}"))
            say(f"joints {nj}: tick {report['joints_series'][-1]['tick_time_median_us']:.0f} us")
        # each repeat: the sweep with one job, with two, then the machine's own two-process speedup on the same
        # kind of run, so that the ceiling is measured beside (not minutes away from) the figure it bounds
        # (a ceiling that cannot be measured is reported as such; the sweep figures stand without it)
        sweeps, ceiling, ceiling_error = [], [], None
        with contextlib.ExitStack() as stack:
            try:
                warm = stack.enter_context(TwoWarmProcesses(scenario_path, params.sweep_subjects[0], "walls",
                                                            params.sweep_duration_s, work / "ceiling"))
            except (BenchError, OSError) as e:
                warm, ceiling_error = None, str(e)
            for k in range(params.sweep_repeats):
                for j in (1, 2):
                    sweeps.append(sweep_throughput(scenario_path, params.sweep_subjects, ("walls", "transparent"),
                                                   params.sweep_seeds, params.sweep_duration_s,
                                                   work / f"sweep{k}_jobs{j}", j) | {"repeat": k})
                try:
                    ceiling += [warm.measure() | {"repeat": k} for _ in range(CEILING_MEASURES)] if warm else []
                except BenchError as e:
                    warm, ceiling_error = None, str(e)
        report["sweep"], report["parallel_ceiling"] = sweeps, ceiling
        walls = {j: float(np.median([s["wall_s"] for s in sweeps if s["jobs"] == j])) for j in (1, 2)}
        report["jobs2_speedup"] = walls[1] / walls[2]
        report["machine_jobs2_speedup"] = float(np.median([c["speedup"] for c in ceiling])) if ceiling else None
        report["jobs2_efficiency"] = (report["jobs2_speedup"] / report["machine_jobs2_speedup"]
                                      if ceiling else None)
        if ceiling_error:
            report["parallel_ceiling_error"] = ceiling_error
        say(f"sweep: jobs 2 speedup {report['jobs2_speedup']:.2f}, the machine's own "
            f"{_fmt(report['machine_jobs2_speedup'], '.2f')}")
        report |= memory_run(scenario_path, params.memory_duration_s, work / "memory")
        say(f"memory: peak {report['peak_rss_MB']:.0f} MB")
    return report


def _fmt(value, spec: str = ".1f") -> str:
    return "n/a" if value is None else format(value, spec)


def format_report(report: dict) -> str:
    """The figures of :func:`run_bench` as a text table."""
    r = report
    lines = [
        f"exosandbox bench: scenario {r['scenario']}, {r['params']['reference_duration_s']:g} s, "
        f"{1 / r['control_period_s']:.0f} Hz control, {r['substeps']} substeps, {r['cpu_count']} CPUs",
        "",
        f"{'figure':<34} {'value':>12}",
        f"{'tick_time_median_us':<34} {_fmt(r['tick_time_median_us']):>12}",
        f"{'tick_time_p99_us':<34} {_fmt(r['tick_time_p99_us']):>12}",
        f"{'hqp_solve_median_us':<34} {_fmt(r['hqp_solve_median_us']):>12}",
        f"{'hqp_solve_p99_us':<34} {_fmt(r['hqp_solve_p99_us']):>12}",
        f"{'task_rows_median_us':<34} {_fmt(r.get('task_rows_median_us')):>12}",
        f"{'realtime_factor':<34} {_fmt(r['realtime_factor'], '.2f'):>12}",
        f"{'cvxpy_speedup':<34} {_fmt(r['cvxpy_speedup'], '.0f'):>12}",
        f"{'jobs2_speedup':<34} {_fmt(r['jobs2_speedup'], '.2f'):>12}",
        f"{'machine_jobs2_speedup':<34} {_fmt(r.get('machine_jobs2_speedup'), '.2f'):>12}",
        f"{'jobs2_efficiency':<34} {_fmt(r.get('jobs2_efficiency'), '.2f'):>12}",
        f"{'peak_rss_MB':<34} {_fmt(r['peak_rss_MB']):>12}",
        f"{'log_MB_per_min':<34} {_fmt(r['log_MB_per_min']):>12}",
    ]
    if r.get("warmup_s") is not None:
        lines.append(f"  warm-up before the reference run (compiled kernels loaded or compiled): {r['warmup_s']:.1f} s")
    if r.get("cvxpy_error"):
        lines.append(f"  cvxpy: {r['cvxpy_error']}")
    else:
        lines.append(f"  cvxpy on {r['cvxpy_ticks']} ticks: median {r['cvxpy_solve_median_us']:.0f} us against "
                     f"{r['hqp_solve_median_same_ticks_us']:.0f} us, largest torque difference "
                     f"{r['cvxpy_max_torque_diff_Nm']:.2g} N m")
    if r.get("tick_breakdown_us"):
        lines += ["", f"{'stage of the tick':<30} {'mean us':>10}"]
        for stage, us in r["tick_breakdown_us"].items():
            lines.append(f"{stage:<30} {us:>10.1f}")
        lines.append("  (own time per stage in a separate instrumented run: sim.experiments.bench.tick_breakdown)")
    if r.get("pinocchio_us_per_tick") is not None:
        lines.append(f"  of which inside pinocchio's algorithms: {r['pinocchio_us_per_tick']:.0f} us in "
                     f"{r['pinocchio_calls_per_tick']:.0f} calls (sim.experiments.bench.pinocchio_time)")
    lines += ["", f"{'backend':<10} {'median us':>10} {'p99 us':>10} {'max |dtau| to default N m':>28}"]
    for name, b in r["backends"].items():
        if "error" in b:
            lines.append(f"{name:<10} {b['error']}")
        else:
            lines.append(f"{name:<10} {b['solve_median_us']:>10.1f} {b['solve_p99_us']:>10.1f} "
                         f"{_fmt(b['max_torque_diff_to_default_Nm'], '.2g'):>28}")
    lines += ["", f"{'levels':<10} {'tick median us':>15} {'HQP median us':>15}"]
    for p in r["levels_series"]:
        lines.append(f"{p['levels']:<10} {p['tick_time_median_us']:>15.1f} {_fmt(p['hqp_solve_median_us']):>15}")
    if r.get("user_task"):
        lines += ["", f"{'stack':<26} {'tick median us':>15} {'rows median us':>15} {'HQP median us':>14}"]
        for u in r["user_task"]:
            lines.append(f"{u['stack']:<26} {u['tick_time_median_us']:>15.1f} {_fmt(u['task_rows_median_us']):>15}"
                         f" {_fmt(u['hqp_solve_median_us']):>14}")
        lines.append("  (sim.experiments.bench.user_task_cost: the same run with "
                     "sim.experiments.bench.PythonHandCeiling, a task written in "
                     f"plain Python, beside the walls; mean of {r['user_task'][0]['runs']} runs each, alternating)")
    lines += ["", f"{'joints':<10} {'tick median us':>15} {'tick p99 us':>15} {'torque limit N m':>17} "
                  f"{'QP-backend ticks':>17}"]
    for p in r["joints_series"]:
        lines.append(f"{p['joints']:<10} {p['tick_time_median_us']:>15.1f} {p['tick_time_p99_us']:>15.1f} "
                     f"{_fmt(p.get('torque_limit_Nm'), '.0f'):>17} {_fmt(p.get('qp_backend_ticks'), 'd'):>17}")
    lines += ["", f"{'sweep jobs':<10} {'runs':>6} {'wall s':>10} {'runs/min':>10}"]
    for s in r["sweep"]:
        lines.append(f"{s['jobs']:<10} {s['runs']:>6} {s['wall_s']:>10.2f} {s['runs_per_min']:>10.1f}")
    lines.append("  (sim.experiments.sweep.run_sweep in a fresh process, one and two jobs alternating; "
                 "its start-up and the "
                 "workers' count; jobs2_speedup: the ratio of the median wall times)")
    if r.get("parallel_ceiling_error"):
        lines.append(f"  machine_jobs2_speedup: {r['parallel_ceiling_error']}")
    if r.get("parallel_ceiling"):
        lines += ["", f"{'ceiling':<10} {'1 run s':>10} {'2 runs s':>10} {'speedup':>10}"]
        for c in r["parallel_ceiling"]:
            lines.append(f"{c['repeat']:<10} {c['one_s']:>10.2f} {c['two_s']:>10.2f} {c['speedup']:>10.2f}")
        lines.append("  (one sweep case in one warm process, then in two at once: "
                     "sim.experiments.bench.TwoWarmProcesses; "
                     "machine_jobs2_speedup: their median, the ceiling of jobs2_speedup; jobs2_efficiency: "
                     "jobs2_speedup over it)")
    lines += ["", f"memory run of {r['memory_duration_s']:g} s: peak RSS {r['peak_rss_MB']:.0f} MB, log "
              f"{r['log_MB_per_min']:.1f} MB per simulated minute (human-alone baseline "
              f"{r['baseline_log_MB_per_min']:.1f} MB more)"]
    return "\n".join(lines)
