"""The fixed-step loop: sensors, controller, actuators, human and plant, logged tick by tick.

One control tick of period T (default 1 ms):

1. the sensors read the plant (encoders, joint torque, cuff force/torque);
2. the controller maps that :class:`~models.records.Measurement` to a
   torque command, held for the period (zero-order hold);
3. the human's torque is computed from their intent and own state;
4. the plant advances by ``substeps`` semi-implicit Euler steps of T/substeps
   (:class:`~sim.physics.plant.CoupledPlant`), the actuators' lag integrated alongside;
5. the tick is logged (:class:`~sim.loop.runlog.RunLog`).

Runs are deterministic: all randomness comes from one seed through
``numpy.random.SeedSequence``; the same seed gives bit-identical logs.
Wall-clock timings are kept out of the log (in ``timing.npz``) for that reason.
"""

from __future__ import annotations

import dataclasses
import json
import shutil
import tempfile
import time
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from controllers.base import ControllerContext
from controllers.registry import make_controller
from controllers.tasks import Task
from models.coupling import Assembly, assemble
from models.errors import SandboxError
from models.human import girdle_posture
from models.records import Measurement
from sim.analysis.metrics import run_metrics, wall_metrics
from sim.loop.runlog import Run, RunLog, environment_metadata, load_run
from sim.loop.scenario import Scenario
from sim.physics.actuators import TorqueSourceActuators
from sim.physics.plant import CoupledPlant, PlantMode
from sim.physics.sensors import ForceSensorBank, ForceTorqueSensor, JointSensing, _first_nonfinite
from sim.physics.wearer import HumanMotor

__all__ = ["SimulationError", "RunResult", "build_assembly", "controller_context", "simulate", "run_scenario",
           "warm_up", "reusable_baseline", "evaluate_run"]

Progress = Callable[[int, int], None]
#: Called after every tick with (t_s, q_exo, q_human, cuff forces on the human in world axes (n_cuffs, 3)).
Observer = Callable[[float, np.ndarray, np.ndarray, np.ndarray], None]


class SimulationError(SandboxError, RuntimeError):
    """The simulation cannot go on (a non-finite state or command)."""


@dataclass(frozen=True)
class RunResult:
    """Where a run was written, its metrics, and whether it finished."""

    folder: Path
    metrics: dict
    complete: bool


def build_assembly(scenario: Scenario) -> Assembly:
    """Models, registration and cuffs of a scenario, strapped at the intent's start posture."""
    hp = scenario.human
    q0 = np.asarray(scenario.intent.start_rad, dtype=float)
    if hp.girdle:
        q0 = girdle_posture(hp, q0)
    return assemble(hp, exo=scenario.exo, registration=scenario.registration, cuffs=scenario.cuffs, q_human0=q0)


def controller_context(asm: Assembly, dt_s: float) -> ControllerContext:
    """What the controller of a run knows: its model of the robot, its cuff sensor frames, the period [s]."""
    return ControllerContext(
        arm=asm.exo, cuff_frames={c.name: asm.exo.model.frames[c.exo_frame_id].name for c in asm.cuffs}, dt_s=dt_s)


def _jsonable(obj):
    if isinstance(obj, Task):  # a task object in a scenario's variants (a user's): its class and public attributes
        cls = type(obj)
        return {"task": obj.name, "class": f"{cls.__module__}.{cls.__qualname__}", "kind": obj.kind,
                "weight": _jsonable(obj.weight),
                "attributes": {k: _jsonable(v) for k, v in sorted(getattr(obj, "__dict__", {}).items())
                               if not k.startswith("_")}}
    if dataclasses.is_dataclass(obj) and not isinstance(obj, type):
        return {f.name: _jsonable(getattr(obj, f.name)) for f in dataclasses.fields(obj)}
    if isinstance(obj, dict):
        return {str(k): _jsonable(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_jsonable(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return obj.tolist()
    if isinstance(obj, (np.floating, np.integer)):
        return obj.item()
    if isinstance(obj, (str, int, float, bool)) or obj is None:
        return obj
    return repr(obj)


def _columns(mode: PlantMode, nq_e: int, nq_h: int, n_cuffs: int, diag: tuple[str, ...]) -> dict:
    cols: dict = {"t": ()}
    if mode != "exo_alone":
        cols |= {"q_human": (nq_h,), "dq_human": (nq_h,), "tau_human": (nq_h,), "q_human_intent": (nq_h,),
                 "p_hand_human": (3,)}
    if mode != "human_alone":
        cols |= {
            "q_exo": (nq_e,), "dq_exo": (nq_e,), "q_exo_meas": (nq_e,), "dq_exo_meas": (nq_e,),
            "tau_cmd": (nq_e,), "tau_applied": (nq_e,), "saturated": ((nq_e,), "bool"), "p_hand_exo": (3,),
        }
        cols |= {f"diag_{d}": () for d in diag}
    if mode == "coupled":  # the cuff wrenches on the robot and the world forces follow from these: sim.analysis.derived
        cols |= {"cuff_wrench_human": (n_cuffs, 6), "cuff_wrench_meas": (n_cuffs, 6)}
    return cols


def simulate(
    scenario: Scenario,
    controller_name: str,
    folder: str | Path,
    *,
    seed: int | None = None,
    mode: PlantMode = "coupled",
    progress: Progress | None = None,
    observer: Observer | None = None,
) -> RunResult:
    """Run one scenario with one controller and write the run folder.

    Parameters
    ----------
    scenario : Scenario
    controller_name : str
        A name known to :func:`controllers.registry.make_controller` (ignored
        for ``mode="human_alone"``).
    folder : path
        Run folder to create (must not hold a run already).
    seed : int, optional
        Overrides ``scenario.seed``.
    mode : {"coupled", "human_alone", "exo_alone"}
    progress : callable(done_ticks, total_ticks), optional
    observer : callable(t_s, q_exo, q_human, forces_world), optional
        Called after every tick (a live viewer; it must throttle itself).

    Raises
    ------
    SimulationError
        On a non-finite state or command; the log up to the last finished
        tick stays loadable, and its ``meta.json`` says why it stopped.
    """
    seed = scenario.seed if seed is None else int(seed)
    controller = (make_controller(controller_name, scenario.variants, scenario.walls)
                  if mode != "human_alone" else None)
    asm = build_assembly(scenario)
    plant = CoupledPlant(asm, scenario.plant, mode)
    T, n_sub = scenario.control_period_s, scenario.substeps
    h = T / n_sub
    rng_joint, *rng_cuffs = (np.random.default_rng(s) for s in
                             np.random.SeedSequence(seed).spawn(1 + len(asm.cuffs)))
    cuff_names = [c.name for c in asm.cuffs]
    if controller is not None:
        controller.reset(controller_context(asm, T))
        all_diag = tuple(controller.diagnostic_names())
        # wall-clock diagnostics would break bit-identical logs: they go to timing.npz
        diag_names = tuple(d for d in all_diag if not d.endswith("_time_s"))
        timing_diag = tuple(d for d in all_diag if d.endswith("_time_s"))
        joints = JointSensing(scenario.encoder, asm.exo.nv, T, rng_joint)
        joints.reset(plant.q_exo)
        # one sensor per cuff, each with its own stream, measured together
        cuff_sensors = ForceSensorBank([ForceTorqueSensor(scenario.force_sensor, T, r) for r in rng_cuffs])
        cuff_sensors.reset()
        actuators = TorqueSourceActuators(asm.exo.model.effortLimit, scenario.actuators)
        actuators.reset(np.zeros(asm.exo.nv))
    else:
        diag_names = timing_diag = ()
    human = HumanMotor(plant.human, scenario.human, scenario.intent, scenario.motor) if plant.has_human else None
    n = scenario.n_ticks
    meta = {
        "scenario": scenario.name, "controller": controller_name if controller else None, "mode": mode,
        "seed": seed, "dt_s": T, "substeps": n_sub, "n_ticks_planned": n, "cuffs": cuff_names,
        "exo_joints": list(asm.exo.joint_names), "human_joints": list(asm.human.joint_names),
        "models": {"exo_urdf": "exo.urdf", "human_urdf": "human.urdf", "exo_hand_frame": asm.exo.hand_frame,
                   "human_hand_frame": asm.human.hand_frame,
                   "cuff_frames": {c.name: [asm.exo.model.frames[c.exo_frame_id].name,
                                            asm.human.model.frames[c.human_frame_id].name] for c in asm.cuffs},
                   "cuff_human_offsets": {c.name: c.human_offset.homogeneous for c in asm.cuffs}},
        "walls": _jsonable(scenario.walls),
        "parameters": _jsonable(scenario), "exo_params": _jsonable(asm.exo_params),
        "environment": environment_metadata(),
    }
    cols = _columns(mode, asm.exo.nq, asm.human.nq, len(asm.cuffs), diag_names)
    folder = Path(folder)
    tick_times, controller_times = np.zeros(n), np.zeros(n)
    timing = {d: np.zeros(n) for d in timing_diag}
    diag_keys = [(d, f"diag_{d}") for d in diag_names]  # (diagnostic, its column)
    timing_series = list(timing.items())
    zero_e, zero_h = np.zeros(asm.exo.nv), np.zeros(asm.human.nv)
    meas_wrench = zero_w = np.zeros((len(asm.cuffs), 6))
    # a blow-up is detected below and reported as SimulationError, not as numpy warnings
    with RunLog(folder, cols, metadata=meta) as log, np.errstate(over="ignore", invalid="ignore"):
        # the very models of the run, for viewers and for reproducing it with any URDF tool
        (folder / "exo.urdf").write_text(plant.exo.urdf, encoding="utf-8")
        (folder / "human.urdf").write_text(plant.human.urdf, encoding="utf-8")
        row = dict.fromkeys(log.column_names)  # filled by name, logged by position (append_row: column order)
        tau_cmd = zero_e
        command_shape = (asm.exo.nv,)
        has_controller, has_human, coupled = controller is not None, human is not None, mode == "coupled"
        exo_torque = actuators if has_controller else zero_e  # the actuators' lag runs alongside the plant
        has_cuffs = bool(plant.cuffs)
        clock, nan = time.perf_counter, np.nan
        for k in range(n):
            t = k * T
            t0 = clock()
            plant.update_cuffs()
            if has_controller:
                q_e, v_e = plant.q_exo, plant.v_exo  # views of this tick's state (the plant replaces it as it steps)
                tau_applied = actuators.applied_Nm
                qm, dqm, taum = joints.measure(q_e, tau_applied)
                # with no wearer the sensors read their noise and bias alone
                meas_wrench = cuff_sensors.measure(plant.wrench_on_exo if has_cuffs else zero_w)
                # new read-only arrays and read-only rows of the bank's new reading: what the checked constructor
                # would keep as they are, so the unchecked one (a float t as well)
                m = Measurement._from_frozen(t, qm, dqm, taum, dict(zip(cuff_names, meas_wrench)))
                tc = clock()
                tau_cmd = np.asarray(controller.step(m), dtype=float)
                controller_times[k] = clock() - tc
                if tau_cmd.shape != command_shape or _first_nonfinite(tau_cmd) >= 0:
                    raise SimulationError(
                        f"controller {controller_name!r} returned a non-finite or mis-shaped torque at t = {t:.4f} s: "
                        f"{tau_cmd!r}")
                saturated = actuators.hold(tau_cmd)
                if k == 0:  # the run starts in steady state: the drives already apply the first command
                    actuators.reset(np.clip(tau_cmd, -asm.exo.model.effortLimit, asm.exo.model.effortLimit))
                    tau_applied = actuators.applied_Nm
            row["t"] = t
            if has_human:
                q_h, v_h = plant.q_human, plant.v_human
                tau_h = human.torque(t, q_h, v_h)
                row["q_human"], row["dq_human"] = q_h, v_h
                row["tau_human"], row["q_human_intent"] = tau_h, human.last_desired_q
            else:
                tau_h = zero_h
            if has_controller:
                row["q_exo"], row["dq_exo"], row["q_exo_meas"], row["dq_exo_meas"] = q_e, v_e, qm, dqm
                row["tau_cmd"], row["tau_applied"], row["saturated"] = tau_cmd, tau_applied, saturated
                diag = controller.diagnostics()
                for d, key in diag_keys:
                    row[key] = float(diag.get(d, nan))
                for d, series in timing_series:
                    series[k] = float(diag.get(d, nan))
            if has_human:
                row["p_hand_human"] = plant.hand_position("human")
            if has_controller:
                row["p_hand_exo"] = plant.hand_position("exo")
            if coupled:
                row["cuff_wrench_human"] = plant.wrench_on_human
                row["cuff_wrench_meas"] = meas_wrench
            log.append_row(row.values())
            plant.advance(exo_torque, tau_h, h, n_sub)
            bad = plant.state_is_finite()
            tick_times[k] = clock() - t0
            if bad is not None:
                raise SimulationError(f"non-finite plant state {bad} at t = {t + T:.4f} s "
                                      f"(scenario {scenario.name!r}, controller {controller_name!r})")
            if progress is not None:
                progress(k + 1, n)
            if observer is not None:
                observer(t + T, plant.q_exo, plant.q_human, plant.force_on_human_world)
        np.savez(folder / "timing.npz", tick_time_s=tick_times, controller_time_s=controller_times,
                 **{f"diag_{d}": v for d, v in timing.items()})
        metrics = {"sim_duration_s": n * T, "tick_time_median_us": float(np.median(tick_times) * 1e6)}
        log.close("complete", metrics=None if mode == "coupled" else metrics)
    return RunResult(folder, metrics, True)


def run_scenario(
    scenario: Scenario,
    controller_name: str,
    out_dir: str | Path,
    *,
    seed: int | None = None,
    progress: Progress | None = None,
    observer: Observer | None = None,
    report: bool = True,
    baseline_from: str | Path | None = None,
) -> RunResult:
    """A coupled run plus its human-alone baseline (same scenario and seed), with metrics.

    Writes the coupled run to ``out_dir`` (log, ``meta.json``,
    ``metrics.json``, and with ``report`` a ``report.md`` with plots, see
    :func:`sim.output.report.write_run_report`) and the baseline to ``out_dir/human_alone``.

    ``baseline_from`` names the baseline of an earlier call, e.g.
    ``other_run/human_alone``. It is copied instead of simulated again when
    this process made it and its record shows the run this call would make
    (:func:`reusable_baseline`). A human-alone run does not depend on the
    controller, and the same inputs give the same bytes, so the copy is the
    baseline this call would have simulated; only its wall-clock figures
    (``timing.npz``, the tick times in its ``metrics.json``) are those of the
    run that made it. Otherwise the baseline is simulated as usual.

    The first call of a process for a scenario and controller first runs
    :func:`warm_up`, so that the run's timing keys time the loop, not the
    loading of the compiled kernels.
    """
    out = Path(out_dir)
    make_controller(controller_name, scenario.variants, scenario.walls)  # fail on a bad name before writing
    warm_up(scenario, controller_name)  # the timed runs below then time the loop, not the kernels' loading
    n = scenario.n_ticks
    coupled_progress = (lambda k, _n: progress(k, 2 * n)) if progress else None
    base_progress = (lambda k, _n: progress(n + k, 2 * n)) if progress else None
    simulate(scenario, controller_name, out, seed=seed, progress=coupled_progress, observer=observer)
    base = out / "human_alone"
    if baseline_from is not None and not base.exists() and reusable_baseline(baseline_from, scenario, seed):
        shutil.copytree(baseline_from, base)
        if progress:
            progress(2 * n, 2 * n)
    else:
        simulate(scenario, controller_name, base, seed=seed, mode="human_alone", progress=base_progress)
        _BASELINES_MADE.add(base.resolve())
    wall = None
    plane = next((w for w in scenario.walls if isinstance(w, tuple) and w and w[0] == "wall_plane"), None)
    if plane is not None:
        spec = dict(plane[1])
        law = spec.get("law", (1000.0, 10.0))
        stiffness = law.stiffness_N_per_m if hasattr(law, "stiffness_N_per_m") else float(law[0])
        wall = {"point_m": spec["point_m"], "normal": spec["normal"], "sensor": spec.get("sensor", "hand"),
                "stiffness_N_per_m": stiffness, "rendered": _renders_walls(scenario, controller_name)}
    run = load_run(out)  # read once, for the metrics and the report
    metrics = evaluate_run(out, wall=wall, force_limits_N=scenario.force_limits_N, run=run)
    write_json(out / "metrics.json", metrics)
    if report:
        from sim.output.report import write_run_report

        write_run_report(out, metrics, run=run)
    return RunResult(out, metrics, True)


#: The human-alone baselines this process simulated (resolved paths), which :func:`reusable_baseline` accepts.
_BASELINES_MADE: set[Path] = set()

#: Control ticks of :func:`warm_up`'s throw-away run.
WARM_UP_TICKS = 20

#: The (scenario name, controller name) pairs :func:`warm_up` has run in this process.
_WARMED: set[tuple[str, str]] = set()


def warm_up(scenario: Scenario, controller_name: str) -> float:
    """Load the compiled kernels a run of ``scenario`` under ``controller_name`` calls, once per process.

    Numba loads a kernel from its cache (or, the first time after installing,
    compiles it: about a minute in all) at its first call, which would
    otherwise fall inside the first ticks of the first run of each process
    and weigh on its ``realtime_factor`` (a sum over the ticks).  This runs
    :data:`WARM_UP_TICKS` control ticks of the same scenario and controller
    into a temporary folder, removed at once, and returns its wall time [s]
    (0 if this pair is already warm).  Best effort: a warm-up that fails is
    left unmarked and silent, so the real run meets (and reports) the error
    with its own folder's name.
    """
    key = (scenario.name, controller_name)
    if key in _WARMED:
        return 0.0
    t0 = time.perf_counter()
    try:
        short = dataclasses.replace(scenario, duration_s=WARM_UP_TICKS * scenario.control_period_s)
        with tempfile.TemporaryDirectory(prefix="exosandbox-warm-up-") as tmp:
            simulate(short, controller_name, Path(tmp) / "run")
    except Exception:  # the real run reports it
        return time.perf_counter() - t0
    _WARMED.add(key)
    return time.perf_counter() - t0


def reusable_baseline(folder: str | Path, scenario: Scenario, seed: int | None = None) -> bool:
    """Whether ``folder`` holds the human-alone baseline that :func:`run_scenario` would make for ``scenario``.

    True only if this process simulated it (the same code) and its
    ``meta.json`` records a complete human-alone run of the same scenario
    parameters (its controllers and variants aside), seed and software
    environment. Never raises: a missing or
    unreadable folder is simply not reusable.
    """
    folder = Path(folder)
    try:
        if folder.resolve() not in _BASELINES_MADE:
            return False
        meta = json.loads((folder / "meta.json").read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return False
    seed = scenario.seed if seed is None else int(seed)
    return (meta.get("status") == "complete" and meta.get("mode") == "human_alone" and meta.get("seed") == seed
            and _without_controllers(meta.get("parameters")) == _without_controllers(
                json.loads(json.dumps(_jsonable(scenario))))
            and meta.get("environment") == environment_metadata())


def _without_controllers(parameters) -> dict | None:
    """A scenario's recorded parameters less its controllers and variants, on which a human-alone run does not
    depend (so a change of variant, or a task object's record, never stops a baseline from being shared)."""
    if not isinstance(parameters, dict):
        return None
    return {k: v for k, v in parameters.items() if k not in ("controllers", "variants")}


def evaluate_run(folder: str | Path, *, wall: dict | None = None,
                 force_limits_N: dict[str, float] | None = None, run: Run | None = None) -> dict:
    """The metrics of a finished coupled run folder (and its ``human_alone`` baseline, if present).

    Reads the log, ``timing.npz`` and the run's own robot model (``exo.urdf``
    with the armature of ``meta.json``), so it works on any run folder; the
    cuff wrenches on the robot and the world forces come from
    :func:`sim.analysis.derived.cuff_columns`.

    Parameters
    ----------
    wall : dict, optional
        A plane wall: ``point_m``, ``normal``, ``stiffness_N_per_m``,
        ``sensor`` (cuff name) and ``rendered`` (False: the variant commands no
        wall, so the stiffness keys are None and the commanded one 0).
    force_limits_N : dict, optional
        Body-region force limit per cuff name, over
        :data:`sim.analysis.metrics.BODY_REGION_FORCE_LIMITS_N`.
    run : sim.loop.runlog.Run, optional
        The run already read from ``folder`` (:func:`sim.loop.runlog.load_run`),
        so that it is not read again; the columns derived from it are then
        kept for the next reader (the run's report).
    """
    from models.arm import load_arm
    from sim.analysis.derived import cuff_columns
    from sim.analysis.metrics import (
        BODY_REGION_FORCE_LIMITS_N,
        hand_cuff_index,
        plane_penetration_m,
        robot_interaction_terms,
    )

    out = Path(folder)
    run = load_run(out) if run is None else run
    arrays = run.arrays | cuff_columns(run)
    base_dir = out / "human_alone"
    base = load_run(base_dir) if base_dir.is_dir() else None
    meta = run.meta
    dt = float(meta["dt_s"])
    timing_path = out / "timing.npz"
    timing = {}
    if timing_path.is_file():
        with np.load(timing_path, allow_pickle=False) as f:
            timing = {k: f[k] for k in f.files}
    models_meta = meta["models"]
    arm = load_arm((out / models_meta["exo_urdf"]).read_text(encoding="utf-8"),
                   hand_frame=models_meta["exo_hand_frame"],
                   armature_kg_m2=meta.get("exo_params", {}).get("armature_kg_m2"), source=str(out / "exo.urdf"))
    cuff_names = list(meta["cuffs"])
    terms = robot_interaction_terms(arm, arrays, [models_meta["cuff_frames"][c][0] for c in cuff_names], dt)
    limits = dict(BODY_REGION_FORCE_LIMITS_N) | dict(force_limits_N or {})
    hand = hand_cuff_index(cuff_names, wall.get("sensor", "hand") if wall else "hand")
    # the hand past the wall's plane: the wall's spring is no inertia and its force is no lack of transparency;
    # the same ticks for every variant (rendered wall or not), so that all are measured over the same stretch
    contact = None
    if wall is not None:
        contact = plane_penetration_m(arrays["p_hand_human"], wall["point_m"], wall["normal"]) > 0.0
    metrics = run_metrics(arrays, cuff_names=cuff_names, baseline=base.arrays if base else None, dt_s=dt,
                          tick_times_s=timing.get("tick_time_s", np.zeros(0)), timing=timing, robot_terms=terms,
                          limits_rad=arm.position_limits(), force_limits_N=limits, hand_cuff=hand,
                          wall_contact=contact)
    if wall is not None:
        metrics |= wall_metrics(arrays, point_m=wall["point_m"], normal=wall["normal"],
                                stiffness_N_per_m=wall["stiffness_N_per_m"] if wall.get("rendered", True) else 0.0,
                                hand_cuff=hand, dt_s=dt)
        if not wall.get("rendered", True):  # a slope of force on penetration means nothing without a wall
            metrics["wall_stiffness_rendered_N_per_m"] = metrics["wall_stiffness_rendered_robot_N_per_m"] = None
    return metrics


def _renders_walls(scenario: Scenario, controller_name: str) -> bool:
    """Whether the variant holds a wall task (the shipped ``walls`` or a scenario variant)."""
    if controller_name in scenario.variants:
        from controllers.registry import build_levels
        from controllers.tasks import WallTask

        return any(isinstance(t, WallTask) for level in build_levels(scenario.variants[controller_name]) for t in level)
    return controller_name == "walls"


def write_json(path: Path, obj) -> None:
    """Write JSON atomically (temporary file, then rename)."""
    tmp = path.with_name(path.name + ".tmp")
    tmp.write_text(json.dumps(obj, indent=2, allow_nan=False) + "\n", encoding="utf-8")
    tmp.replace(path)
