"""The simulation API: one scenario under one controller, tick by tick, its trajectory in memory.

One control tick of period T (default 1 ms):

1. the sensors read the plant (encoders, joint torque, cuff force/torque);
2. the controller maps that :class:`~models.records.Measurement` to a
   torque command; it reaches the drives ``Scenario.control_delay_ticks``
   ticks later (:class:`~sim.physics.actuators.CommandDelay`; 0 by default),
   where it is held for the period (zero-order hold);
3. the human's torque is computed from their intent and own state;
4. the plant advances by ``substeps`` semi-implicit Euler steps of T/substeps
   (:class:`~sim.physics.plant.CoupledPlant`), the drives (a lag, or series-elastic motors with their
   torque loop, :func:`~sim.physics.actuators.make_actuators`) stepped alongside;
5. the tick's row is kept: in memory (a :class:`Trajectory`), or streamed to a
   :class:`~sim.loop.runlog.RunLog` as the run goes.

A scenario's timed faults (:mod:`sim.physics.faults`) act at hooks of this
tick through a :class:`~sim.physics.faults.FaultSchedule`: the cuffs' stiffness
before the cuff update, what the encoders read and what the controller gets in
1, what the drives take and deliver in 2 and 4, the wearer's torque in 3.  A
run without faults skips every hook.  The drives take the command in this
order: the controller's, delayed by the run's control delay, then changed by
the active faults (a :class:`~sim.physics.faults.ControlDelay` fault delays the
already delayed command further).

Runs are deterministic: all randomness comes from one seed through
``numpy.random.SeedSequence``; the same seed gives bit-identical rows, whether
the run is stepped, run in memory or streamed to a log.  Wall-clock timings are
kept out of the rows (in :attr:`Trajectory.timing`, a run folder's
``timing.npz``) for that reason.

In a notebook::

    from controllers.registry import make_controller
    from sim import Simulation, load_scenario

    scenario = load_scenario("scenarios/reach.py")
    sim = Simulation(scenario, make_controller("transparent"), seed=1)
    row = sim.step()                    # one tick: row["q_exo"], row["tau_cmd"], ...
    trajectory = sim.run()              # the rest of the run, in memory
    trajectory.arrays["tau_cmd"]        # (ticks, joints) [N m]
    trajectory.save("runs/my-run")      # a run folder, as sim.loop.simulate writes it
"""

from __future__ import annotations

import dataclasses
import math
import time
from collections.abc import Callable, Mapping
from pathlib import Path
from types import MappingProxyType

import numpy as np

from controllers.base import Controller, ControllerContext
from controllers.basic import ZeroTorque
from controllers.registry import make_controller
from controllers.safety import SafetyParams, Supervised
from controllers.tasks import Task
from models.coupling import Assembly, assemble, fit_exo
from models.errors import ParameterError, SandboxError
from models.exo import ExoParams
from models.human import girdle_posture
from models.records import Measurement
from sim.loop.runlog import RunLog, environment_metadata, load_run
from sim.loop.scenario import Scenario
from sim.physics.actuators import CommandDelay, drive_model, make_actuators
from sim.physics.faults import FaultSchedule, FaultTargets, fault_rng
from sim.physics.fixture import FixtureDrive, HandFixture
from sim.physics.plant import CoupledPlant, PlantMode
from sim.physics.sea import SeriesElasticParams
from sim.physics.sensors import ForceSensorBank, ForceTorqueSensor, JointSensing, first_nonfinite
from sim.physics.wearer import HumanMotor

__all__ = ["SimulationError", "Simulation", "Trajectory", "Progress", "Observer", "PLANT_MODES", "build_assembly",
           "drive_params", "drives_metadata", "without_drive_inertia",
           "controller_context", "supervised", "log_columns", "jsonable", "start_run_folder", "finish_run_folder"]

#: Called after every tick with (ticks done, ticks of the run).
Progress = Callable[[int, int], None]
#: Called after every tick with (t_s, q_exo, q_human, cuff forces on the human in world axes (n_cuffs, 3)).
Observer = Callable[[float, np.ndarray, np.ndarray, np.ndarray], None]

#: What a run couples: the exoskeleton and its wearer, the wearer alone (the baseline), the exoskeleton alone.
PLANT_MODES: tuple[str, ...] = ("coupled", "human_alone", "exo_alone")


class SimulationError(SandboxError, RuntimeError):
    """The simulation cannot go on (a non-finite state or command)."""


def without_drive_inertia(exo: ExoParams) -> ExoParams:
    """``exo`` with zero armature and zero joint friction: with series-elastic drives the rotor inertia and the gear
    friction sit on the motor side of the spring (:mod:`sim.physics.sea`), not on the joint."""
    zeros = (0.0,) * len(exo.armature_kg_m2)
    return dataclasses.replace(exo, armature_kg_m2=zeros, viscous_friction_Nm_s_per_rad=zeros,
                               coulomb_friction_Nm=zeros)


def build_assembly(scenario: Scenario) -> Assembly:
    """Models, registration and cuffs of a scenario, strapped at the intent's start posture.

    With series-elastic drives (``Scenario.actuators`` a :class:`~sim.physics.sea.SeriesElasticParams`) the
    exoskeleton is built :func:`without_drive_inertia` (plant and controller model alike).
    """
    hp = scenario.human
    q0 = np.asarray(scenario.intent.start_rad, dtype=float)
    if hp.girdle:
        q0 = girdle_posture(hp, q0)
    exo = scenario.exo
    if isinstance(scenario.actuators, SeriesElasticParams):
        exo = without_drive_inertia(fit_exo(hp) if exo is None else exo)
    return assemble(hp, exo=exo, registration=scenario.registration, cuffs=scenario.cuffs, q_human0=q0)


def drive_params(scenario: Scenario):
    """The drives' parameters of a run: ``scenario.actuators``, a series-elastic one resolved against the
    scenario's exoskeleton as it is before :func:`without_drive_inertia` (its motor inertia and friction
    default to the exoskeleton's armature and joint friction)."""
    p = scenario.actuators
    if isinstance(p, SeriesElasticParams):
        return p.resolved(fit_exo(scenario.human) if scenario.exo is None else scenario.exo)
    return p


def drives_metadata(scenario: Scenario) -> dict:
    """``meta.json``'s ``drives``: the model's name, its (resolved) parameters and the control delay [ticks]."""
    p = drive_params(scenario)
    return {"model": drive_model(p), "parameters": jsonable(p), "control_delay_ticks": scenario.control_delay_ticks}


def controller_context(asm: Assembly, dt_s: float) -> ControllerContext:
    """What the controller of a run knows: its model of the robot, its cuff sensor frames, the period [s]."""
    return ControllerContext(
        arm=asm.exo, cuff_frames={c.name: asm.exo.model.frames[c.exo_frame_id].name for c in asm.cuffs}, dt_s=dt_s)


def jsonable(obj):
    """``obj`` as plain JSON values (dataclasses by field, arrays as lists, a task object by class and public
    attributes, anything else by its ``repr``): what a run records of its scenario in ``meta.json``."""
    if isinstance(obj, Task):  # a task object in a scenario's variants (a user's): its class and public attributes
        cls = type(obj)
        return {"task": obj.name, "class": f"{cls.__module__}.{cls.__qualname__}", "kind": obj.kind,
                "weight": jsonable(obj.weight),
                "attributes": {k: jsonable(v) for k, v in sorted(getattr(obj, "__dict__", {}).items())
                               if not k.startswith("_")}}
    if dataclasses.is_dataclass(obj) and not isinstance(obj, type):
        return {f.name: jsonable(getattr(obj, f.name)) for f in dataclasses.fields(obj)}
    if isinstance(obj, dict):
        return {str(k): jsonable(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [jsonable(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return obj.tolist()
    if isinstance(obj, (np.floating, np.integer)):
        return obj.item()
    if isinstance(obj, (str, int, float, bool)) or obj is None:
        return obj
    return repr(obj)


def log_columns(mode: PlantMode, nq_e: int, nq_h: int, n_cuffs: int, diag: tuple[str, ...], *,
                n_faults: int = 0, motor: bool = False, impairment: bool = False, fixture: bool = False) -> dict:
    """The logged columns of a run (name -> per-tick shape, or (shape, dtype)), in the order of a row.

    With an impaired wearer (``impairment``), ``tau_human_impairment`` (nq_h,) [N m] follows ``p_hand_human``:
    the involuntary part of ``tau_human`` (spasticity + contracture + tremor, :mod:`sim.physics.impairment`);
    a run without an impairment has no such column.
    With ``motor`` (series-elastic drives) and a robot, ``tau_motor`` (nq_e,) [N m, reflected to the joint] and
    ``motor_saturated`` (nq_e,) bool follow the controller's diagnostics.

    With a hand fixture (``fixture``, :class:`~sim.physics.fixture.HandFixture`), ``fixture_force_N`` (3,) [N,
    world frame] the fixture's force on the robot, ``fixture_position_m`` (3,) [m] the imposed point and
    ``fixture_cuff_velocity_m_s`` (3,) [m/s, world frame] the velocity of the held cuff point follow (in a
    coupled run the fixture holds the wearer's hand point: the force on the wearer, that point's velocity).

    With faults, the last column ``fault_active`` (n_faults,) bool says which are active at each tick (in
    the order of ``scenario.faults``); a run without faults has no such column.
    """
    cols: dict = {"t": ()}
    if mode != "exo_alone":
        cols |= {"q_human": (nq_h,), "dq_human": (nq_h,), "tau_human": (nq_h,), "q_human_intent": (nq_h,),
                 "p_hand_human": (3,)}
        if impairment:
            cols["tau_human_impairment"] = (nq_h,)
    if mode != "human_alone":
        cols |= {
            "q_exo": (nq_e,), "dq_exo": (nq_e,), "q_exo_meas": (nq_e,), "dq_exo_meas": (nq_e,),
            "tau_cmd": (nq_e,), "tau_applied": (nq_e,), "saturated": ((nq_e,), "bool"), "p_hand_exo": (3,),
        }
        cols |= {f"diag_{d}": () for d in diag}
        if motor:
            cols |= {"tau_motor": (nq_e,), "motor_saturated": ((nq_e,), "bool")}
    if mode == "coupled":  # the cuff wrenches on the robot and the world forces follow from these: sim.analysis.derived
        cols |= {"cuff_wrench_human": (n_cuffs, 6), "cuff_wrench_meas": (n_cuffs, 6)}
    if fixture:
        cols |= {"fixture_force_N": (3,), "fixture_position_m": (3,), "fixture_cuff_velocity_m_s": (3,)}
    if n_faults:
        cols["fault_active"] = ((n_faults,), "bool")
    return cols


def _column_shape_dtype(spec) -> tuple[tuple[int, ...], np.dtype]:
    """A :func:`log_columns` spec as (shape, dtype): a bare shape is float64."""
    if len(spec) == 2 and isinstance(spec[0], tuple):
        return tuple(spec[0]), np.dtype(spec[1])
    return tuple(spec), np.dtype(np.float64)


class Trajectory:
    """The rows of a run (from its reset), as named arrays, and what a run folder records beside them.

    Attributes
    ----------
    arrays : mapping str -> ndarray
        One read-only array per logged column, first axis the ticks
        (:func:`log_columns`; SI units, named in the column: ``q_*`` [rad],
        ``dq_*`` [rad/s], ``tau_*`` [N m], ``p_*`` [m], wrenches [N, N m]).
        A run streamed to a log reads them back from its folder when first
        asked (once the log is closed).
    meta : dict
        The run's record (scenario, controller, seed, models, parameters,
        software), as its ``meta.json`` holds it.
    columns : mapping
        The column specs (name -> shape or (shape, dtype)).
    urdfs : mapping str -> str
        File name (``exo.urdf``, ``human.urdf``) -> the very model of the run.
    timing : mapping str -> ndarray
        Wall-clock figures per tick [s] (``tick_time_s``, ``controller_time_s``,
        and the controller's ``*_time_s`` diagnostics as ``diag_*``): never in
        the rows, so that those stay bit-identical per seed.
    folder : Path or None
        The run folder the rows were streamed to, if any.
    """

    def __init__(self, *, meta: Mapping, columns: Mapping, urdfs: Mapping[str, str], timing: Mapping[str, np.ndarray],
                 arrays: Mapping[str, np.ndarray] | None = None, folder: Path | None = None) -> None:
        if (arrays is None) == (folder is None):
            raise ValueError("a Trajectory holds its arrays or the folder of its log, one of the two")
        self.meta = dict(meta)
        self.columns = MappingProxyType(dict(columns))
        self.urdfs = MappingProxyType(dict(urdfs))
        self.timing = MappingProxyType(dict(timing))
        self.folder = folder
        self._arrays = None if arrays is None else MappingProxyType(dict(arrays))

    @property
    def arrays(self) -> Mapping[str, np.ndarray]:
        if self._arrays is None:
            self._arrays = MappingProxyType(dict(load_run(self.folder).arrays))
        return self._arrays

    @property
    def t_s(self) -> np.ndarray:
        """ndarray : the time of each tick [s]."""
        return self.arrays["t"]

    @property
    def ticks(self) -> int:
        """int : the number of ticks (rows)."""
        return len(self.timing["tick_time_s"])

    def __len__(self) -> int:
        return self.ticks

    def save(self, folder: str | Path) -> Path:
        """Write the run folder of these rows, as :func:`sim.loop.simulate` writes it, and return its path.

        ``meta.json``, ``exo.urdf`` and ``human.urdf``, the log (through
        :class:`~sim.loop.runlog.RunLog`), ``timing.npz``, and for a run
        without the wearer-robot coupling the ``metrics.json`` that
        :func:`sim.loop.simulate` writes; :func:`sim.load_run` reads it back with the
        same arrays.  ``folder`` must not hold a run already.
        """
        folder = Path(folder)
        arrays = self.arrays
        with start_run_folder(folder, self.columns, self.meta, self.urdfs) as log:
            columns = [arrays[name] for name in log.column_names]
            for k in range(self.ticks):
                log.append_row([c[k] for c in columns])
            finish_run_folder(log, self)
        return folder

    def __repr__(self) -> str:
        return (f"Trajectory({self.meta.get('scenario')!r}, controller={self.meta.get('controller')!r}, "
                f"mode={self.meta.get('mode')!r}, seed={self.meta.get('seed')!r}, ticks={self.ticks})")


def start_run_folder(folder: str | Path, columns: Mapping, meta: Mapping, urdfs: Mapping[str, str]) -> RunLog:
    """Open the :class:`~sim.loop.runlog.RunLog` of a run folder and write the run's models beside it.

    ``folder`` must not hold a run already.  The log is open (status
    "running"); use it as a context manager, so that an error closes it as
    failed, and end with :func:`finish_run_folder`.
    """
    folder = Path(folder)
    log = RunLog(folder, dict(columns), metadata=dict(meta))
    try:
        for name, text in urdfs.items():  # the very models of the run, for viewers and any URDF tool
            (folder / name).write_text(text, encoding="utf-8")
    except BaseException as e:
        log.__exit__(type(e), e, e.__traceback__)
        raise
    return log


def finish_run_folder(log: RunLog, trajectory: Trajectory) -> dict:
    """Write ``timing.npz`` and close ``log`` as complete; return the run's timing summary.

    The summary (``sim_duration_s``, ``tick_time_median_us``) is stored as
    ``metrics.json`` for a run without the coupling; a coupled run's metrics
    are those of :func:`sim.experiments.run.evaluate_run`.
    """
    folder = log.folder
    timing = trajectory.timing
    np.savez(folder / "timing.npz", **timing)
    n, dt = trajectory.ticks, trajectory.meta["dt_s"]
    metrics = {"sim_duration_s": n * dt, "tick_time_median_us": float(np.median(timing["tick_time_s"]) * 1e6)}
    log.close("complete", metrics=None if trajectory.meta["mode"] == "coupled" else metrics)
    return metrics


class Simulation:
    """One scenario under one controller, advanced tick by tick.

    Parameters
    ----------
    scenario : Scenario
    controller : Controller or str
        A controller object (e.g. an :class:`~controllers.hqp.HQPController`
        built in a notebook), reset with the run's context at every
        :meth:`reset`; or a variant name known to
        :func:`controllers.registry.make_controller` (the scenario's own
        variants first), built anew at every :meth:`reset`.  Ignored (may be
        None) for ``mode="human_alone"``.  Either runs under the scenario's
        safety monitor (``Scenario.safety``; :func:`supervised`), so
        :attr:`controller` is then the :class:`controllers.safety.Supervised`
        wrapping it.
    seed : int, optional
        Overrides ``scenario.seed``.
    mode : {"coupled", "human_alone", "exo_alone"}
    fixture : HandFixture, optional
        A test fixture (:mod:`sim.physics.fixture`).  With ``mode="exo_alone"`` it takes the wearer's place at
        the robot's hand cuff: its force acts on the robot per substep and the hand cuff's sensor measures it,
        as it would the wearer's.  With ``mode="coupled"`` it holds the wearer's hand point (the human model's
        hand frame) and moves the robot through the wearer strapped in as usual: its force acts on the wearer
        per substep, and the cuff sensors measure the cuffs as always.

    Notes
    -----
    :meth:`step` and :meth:`run` keep the rows in memory, from the last
    :meth:`reset` (:attr:`trajectory`); ``run(log=...)`` streams a whole run
    to a :class:`~sim.loop.runlog.RunLog` instead, chunk by chunk, so that a
    crash keeps every finished chunk (what :func:`sim.loop.simulate` does).
    """

    def __init__(self, scenario: Scenario, controller: Controller | str | None, *, seed: int | None = None,
                 mode: PlantMode = "coupled", fixture: HandFixture | None = None) -> None:
        if not isinstance(scenario, Scenario):
            raise ParameterError(f"Simulation needs a Scenario (sim.load_scenario), got {type(scenario).__name__}")
        if mode not in PLANT_MODES:
            raise ParameterError(f"mode must be one of {', '.join(PLANT_MODES)}, got {mode!r}")
        if mode != "human_alone" and not (isinstance(controller, (str, Controller))):
            raise ParameterError(f"controller must be a Controller object or a variant name (str), got "
                                 f"{type(controller).__name__}")
        if fixture is not None:
            if not isinstance(fixture, HandFixture):
                raise ParameterError(f"fixture must be a HandFixture, got {type(fixture).__name__}")
            if mode == "human_alone":
                raise ParameterError("fixture needs mode='exo_alone' (the fixture takes the wearer's place) or "
                                     "'coupled' (it moves the wearer's hand), got mode='human_alone'")
        self.fixture = fixture
        self.scenario, self.mode = scenario, mode
        self._controller_spec = controller
        self.seed = scenario.seed if seed is None else _seed(seed)
        self.reset()

    # -- state ------------------------------------------------------------------------------------
    def reset(self, seed: int | None = None) -> None:
        """Start the run again from the scenario's start: a new plant, new generators from ``seed`` (default:
        the last one), the controller reset (built anew if given by name).  The same seed gives the same run."""
        if seed is not None:
            self.seed = _seed(seed)
        scenario, mode, spec = self.scenario, self.mode, self._controller_spec
        if mode == "human_alone":
            controller, name = None, None
        elif isinstance(spec, str):
            controller, name = make_controller(spec, scenario.variants, scenario.walls, scenario.safety,
                                               path=scenario.reference_path), spec
        else:  # an object built in code runs under the scenario's safety monitor as a variant by name does
            controller, name = supervised(spec, scenario.safety), spec.name
        asm = build_assembly(scenario)
        plant = CoupledPlant(asm, scenario.plant, mode)
        self._fixture = self._fixture_drive(asm, plant) if self.fixture is not None else None
        T = scenario.control_period_s
        rng_joint, *rng_cuffs = (np.random.default_rng(s) for s in
                                 np.random.SeedSequence(self.seed).spawn(1 + len(asm.cuffs)))
        # the faults' names are checked against the run's cuffs and joints here, before anything is written
        self._faults = (FaultSchedule(scenario.faults, FaultTargets(tuple(c.name for c in asm.cuffs),
                                                                    tuple(asm.exo.joint_names),
                                                                    tuple(asm.human.joint_names)),
                                      T, [fault_rng(self.seed, f.name) for f in scenario.faults])
                        if scenario.faults else None)
        self._joints = self._cuff_sensors = self._actuators = self._delay = None
        drives = drive_params(scenario)
        motor = isinstance(drives, SeriesElasticParams) and controller is not None
        if controller is not None:
            controller.reset(controller_context(asm, T))
            all_diag = tuple(controller.diagnostic_names())
            # wall-clock diagnostics would break bit-identical rows: they go to the timing
            diag_names = tuple(d for d in all_diag if not d.endswith("_time_s"))
            timing_diag = tuple(d for d in all_diag if d.endswith("_time_s"))
            self._joints = JointSensing(scenario.encoder, asm.exo.nv, T, rng_joint)
            self._joints.reset(plant.q_exo)
            # one sensor per cuff, each with its own stream, measured together
            self._cuff_sensors = ForceSensorBank([ForceTorqueSensor(scenario.force_sensor, T, r) for r in rng_cuffs])
            self._cuff_sensors.reset()
            self._actuators = make_actuators(drives, asm.exo.model.effortLimit)
            self._actuators.reset(np.zeros(asm.exo.nv))
            # the run's permanent control delay, ahead of the timed faults (a ControlDelay fault adds to it)
            self._delay = CommandDelay(scenario.control_delay_ticks) if scenario.control_delay_ticks else None
        else:
            diag_names = timing_diag = ()
        self._human = (HumanMotor(plant.human, scenario.human, scenario.intent, scenario.motor,
                                  impairment=scenario.impairment, period_s=T, seed=self.seed)
                       if plant.has_human else None)
        self._controller, self._controller_name, self._asm, self._plant = controller, name, asm, plant
        self._diag_names, self._motor = diag_names, motor
        n = scenario.n_ticks
        self._meta = jsonable({  # plain JSON values, as meta.json holds them
            "scenario": scenario.name, "controller": name, "mode": mode,
            "seed": self.seed, "dt_s": T, "substeps": scenario.substeps, "n_ticks_planned": n,
            "cuffs": [c.name for c in asm.cuffs],
            "exo_joints": list(asm.exo.joint_names), "human_joints": list(asm.human.joint_names),
            "models": {"exo_urdf": "exo.urdf", "human_urdf": "human.urdf", "exo_hand_frame": asm.exo.hand_frame,
                       "human_hand_frame": asm.human.hand_frame,
                       "cuff_frames": {c.name: [asm.exo.model.frames[c.exo_frame_id].name,
                                                asm.human.model.frames[c.human_frame_id].name] for c in asm.cuffs},
                       "cuff_human_offsets": {c.name: c.human_offset.homogeneous for c in asm.cuffs}},
            "walls": jsonable(scenario.walls),
            # the exercise's reference hand path (controllers.tasks.HandPath.describe), None without one
            "reference_path": scenario.reference_path.describe() if scenario.reference_path is not None else None,
            # the controller's levels and tasks with their parameters (Controller.structure), for the reports;
            # the safety monitor's settings apart (None: no monitor), so that the structure is the variant's own
            "controller_structure": _unsupervised(controller).structure() if controller is not None else None,
            "safety": controller.params.settings() if isinstance(controller, Supervised) else None,
            "parameters": jsonable(scenario), "exo_params": jsonable(asm.exo_params),
            # the faults (name, kind, start_s, end_s, parameters), in the order of the fault_active column
            "faults": [f.describe() for f in scenario.faults],
            "drives": drives_metadata(scenario),
            **({"fixture": self.fixture} if self.fixture is not None else {}),
            "environment": environment_metadata(),
        })
        self._columns = log_columns(mode, asm.exo.nq, asm.human.nq, len(asm.cuffs), diag_names,
                                    n_faults=len(scenario.faults), motor=motor,
                                    impairment=scenario.impairment is not None,
                                    fixture=self.fixture is not None)
        self._urdfs = {"exo.urdf": plant.exo.urdf, "human.urdf": plant.human.urdf}
        self._tick_times, self._controller_times = np.zeros(n), np.zeros(n)
        self._timing = {d: np.zeros(n) for d in timing_diag}
        self._k = 0
        self._rows: dict[str, np.ndarray] | None = None  # the rows kept in memory, allocated at the first tick
        self._log: RunLog | None = None  # the log a run was streamed to
        self._stopped: str | None = None  # why the run cannot go on (a SimulationError)

    def _fixture_drive(self, asm: Assembly, plant: CoupledPlant) -> FixtureDrive:
        """The fixture on the robot's hand cuff (on the wearer's hand point in a coupled run); its start
        posture, when it gives one, set on the plant."""
        fx = self.fixture
        if self.mode == "coupled":
            if fx.start_rad is not None:
                raise ParameterError("HandFixture.start_rad applies to the robot alone; in a coupled run the "
                                     "scenario's intent gives the start posture")
            human = plant.human
            return FixtureDrive(fx, human.model, human.frame_id(human.hand_frame), plant.q_human)
        cuffs = {c.name: c for c in asm.cuffs}
        if fx.cuff not in cuffs:
            raise ParameterError(f"HandFixture.cuff {fx.cuff!r} is not a cuff of scenario {self.scenario.name!r} "
                                 f"(cuffs: {', '.join(cuffs)})")
        if fx.start_rad is not None:
            if len(fx.start_rad) != asm.exo.nq:
                raise ParameterError(f"HandFixture.start_rad must hold {asm.exo.nq} joint angles [rad] "
                                     f"({', '.join(asm.exo.joint_names)}), got {len(fx.start_rad)}")
            plant.q_exo = np.array(fx.start_rad)
            plant.v_exo = np.zeros(asm.exo.nv)
            plant.invalidate()
        return FixtureDrive(fx, plant.exo.model, cuffs[fx.cuff].exo_frame_id, plant.q_exo)

    @property
    def ticks(self) -> int:
        """int : ticks run since the last reset."""
        return self._k

    @property
    def n_ticks(self) -> int:
        """int : ticks of the whole run (the scenario's duration over its control period)."""
        return self.scenario.n_ticks

    @property
    def t_s(self) -> float:
        """float : the time of the next tick [s]."""
        return self._k * self.scenario.control_period_s

    @property
    def fixture_drive(self) -> FixtureDrive | None:
        """The hand fixture acting on the robot (its state at the start of the last tick), None without one."""
        return self._fixture

    @property
    def controller(self) -> Controller | None:
        """The controller of the run (None for ``mode="human_alone"``)."""
        return self._controller

    @property
    def plant(self) -> CoupledPlant:
        """The plant of the run (its state is that before the next tick)."""
        return self._plant

    @property
    def meta(self) -> dict:
        """dict : the run's record, as its ``meta.json`` holds it."""
        return dict(self._meta)

    @property
    def columns(self) -> dict:
        """dict : the logged columns (:func:`log_columns`), in the order of a row."""
        return dict(self._columns)

    @property
    def urdfs(self) -> dict[str, str]:
        """dict : file name -> the very model of the run (``exo.urdf``, ``human.urdf``)."""
        return dict(self._urdfs)

    @property
    def trajectory(self) -> Trajectory:
        """The rows since the last reset (those run so far, also after a :class:`SimulationError`)."""
        k = self._k
        timing = {"tick_time_s": self._tick_times[:k].copy(), "controller_time_s": self._controller_times[:k].copy(),
                  **{f"diag_{d}": v[:k].copy() for d, v in self._timing.items()}}
        if self._log is not None:
            return Trajectory(meta=self._meta, columns=self._columns, urdfs=self._urdfs, timing=timing,
                              folder=self._log.folder)
        rows = self._rows if self._rows is not None else self._allocate(0)
        arrays = {}
        for name, a in rows.items():
            view = a[:k]
            view.flags.writeable = False
            arrays[name] = view
        return Trajectory(meta=self._meta, columns=self._columns, urdfs=self._urdfs, timing=timing, arrays=arrays)

    # -- running ----------------------------------------------------------------------------------
    def step(self) -> dict[str, np.ndarray]:
        """Run one control tick; return its row (column name -> a new array, :func:`log_columns`)."""
        self._check_can_go_on(log=None)
        if self._k >= self.scenario.n_ticks:
            raise SimulationError(f"the run of scenario {self.scenario.name!r} is over ({self._k} ticks, "
                                  f"{self.scenario.duration_s} s); reset() to run it again")
        k = self._k
        self._run_ticks(k + 1, None, None, None)
        return {name: a[k].copy() for name, a in self._rows.items()}

    def run(self, duration_s: float | None = None, *, log: RunLog | None = None, progress: Progress | None = None,
            observer: Observer | None = None) -> Trajectory:
        """Run to the end of the scenario, or for ``duration_s`` [s] more; return the rows since the last reset.

        Parameters
        ----------
        duration_s : float, optional
            Simulated time to run [s] (rounded to whole ticks, up to the
            scenario's end); default: to the end.
        log : RunLog, optional
            Stream the rows to this log as the run goes (chunk by chunk,
            nothing kept in memory) instead of keeping them; a whole run from
            its reset only.  Its columns must be :attr:`columns`.
        progress : callable(done_ticks, total_ticks), optional
        observer : callable(t_s, q_exo, q_human, forces_world), optional
            Called after every tick (a live viewer; it must throttle itself).

        Raises
        ------
        SimulationError
            On a non-finite state or command, naming the tick; the rows up to
            the last finished tick stay in :attr:`trajectory` (or in the log).
        """
        self._check_can_go_on(log)
        n = self.scenario.n_ticks
        if duration_s is None:
            stop = n
        else:
            if not (isinstance(duration_s, (int, float)) and not isinstance(duration_s, bool)
                    and math.isfinite(duration_s) and duration_s > 0):
                raise ParameterError(f"duration_s must be a finite number of seconds > 0, got {duration_s!r}")
            stop = min(n, self._k + int(round(duration_s / self.scenario.control_period_s)))
        if log is not None:
            if self._k != 0 or stop != n:
                raise SimulationError("run(log=...) streams a whole run: call it right after reset(), with no "
                                      "duration_s")
            if tuple(log.column_names) != tuple(self._columns):
                raise SimulationError(f"the log's columns {list(log.column_names)} are not this run's "
                                      f"{list(self._columns)}")
            self._log = log
        self._run_ticks(stop, log, progress, observer)
        return self.trajectory

    def _check_can_go_on(self, log: RunLog | None) -> None:
        if self._stopped is not None:
            raise SimulationError(f"the run stopped ({self._stopped}); reset() to run it again")
        if self._log is not None:
            raise SimulationError("this run was streamed to a log; reset() to run it again")

    def _allocate(self, n: int) -> dict[str, np.ndarray]:
        rows = {}
        for name, spec in self._columns.items():
            shape, dtype = _column_shape_dtype(spec)
            rows[name] = np.zeros((n, *shape), dtype=dtype)
        return rows

    def _run_ticks(self, stop: int, log: RunLog | None, progress: Progress | None,
                   observer: Observer | None) -> None:
        """Ticks ``self._k`` .. ``stop - 1``: each row to ``log``, or into the rows kept in memory."""
        scenario, asm, plant = self.scenario, self._asm, self._plant
        controller, human = self._controller, self._human
        joints, cuff_sensors, actuators = self._joints, self._cuff_sensors, self._actuators
        controller_name, mode = self._controller_name, self.mode
        T, n_sub = scenario.control_period_s, scenario.substeps
        h = T / n_sub
        cuff_names = [c.name for c in asm.cuffs]
        tick_times, controller_times = self._tick_times, self._controller_times
        diag_keys = [(d, f"diag_{d}") for d in self._diag_names]  # (diagnostic, its column)
        timing_series = list(self._timing.items())
        zero_e, zero_h = np.zeros(asm.exo.nv), np.zeros(asm.human.nv)
        meas_wrench = zero_w = np.zeros((len(asm.cuffs), 6))
        if log is not None:
            append = log.append_row
            stored = None
        else:
            if self._rows is None:
                self._rows = self._allocate(scenario.n_ticks)
            append = None
            stored = list(self._rows.values())  # in column order, as the row
        row = dict.fromkeys(self._columns)  # filled by name, kept by position (column order)
        tau_cmd = zero_e
        command_shape = (asm.exo.nv,)
        has_controller, has_human, coupled = controller is not None, human is not None, mode == "coupled"
        impaired = has_human and scenario.impairment is not None
        exo_torque = actuators if has_controller else zero_e  # the actuators' lag runs alongside the plant
        has_cuffs = bool(plant.cuffs)
        faults = self._faults  # None without faults: the ticks below then do exactly what they did before
        delay, motor = self._delay, self._motor  # None without a control delay; True with series-elastic drives
        fixture = self._fixture  # None without a hand fixture: the ticks below then do exactly what they did before
        through_wearer = fixture is not None and coupled  # the fixture moves the wearer's hand
        if fixture is not None and not through_wearer:
            fixture_wrench = np.zeros((len(asm.cuffs), 6))
            fixture_row = cuff_names.index(fixture.fixture.cuff)
        clock, nan = time.perf_counter, np.nan
        # a blow-up is detected below and reported as SimulationError, not as numpy warnings
        with np.errstate(over="ignore", invalid="ignore"):
            for k in range(self._k, stop):
                t = k * T
                t0 = clock()
                if faults is not None:
                    row["fault_active"] = faults.begin_tick(k, t)
                    faults.coupling(plant)  # a slipping cuff's stiffness and damping, before the cuff update
                plant.update_cuffs()
                if has_controller:
                    # views of this tick's state (the plant replaces it as it steps)
                    q_e, v_e = plant.q_exo, plant.v_exo
                    tau_applied = actuators.delivered_Nm(q_e, v_e)
                    if fixture is None or through_wearer:
                        # with no wearer the sensors read their noise and bias alone
                        on_cuffs = plant.wrench_on_exo if has_cuffs else zero_w
                    else:  # the fixture in the wearer's place: its hand cuff sensor measures the fixture's wrench
                        fixture.begin_tick(t, q_e, v_e)
                        fixture_wrench[fixture_row] = fixture.wrench_in_cuff_frame()
                        on_cuffs = fixture_wrench
                    if faults is None:
                        qm, dqm, taum = joints.measure(q_e, tau_applied)
                        meas_wrench = cuff_sensors.measure(on_cuffs)
                    else:  # the drives' faults, then what the encoders read, then the readings' faults
                        tau_applied = faults.applied(tau_applied)
                        qm, dqm, taum = joints.measure(*faults.encoder(q_e, tau_applied))
                        meas_wrench = cuff_sensors.measure(on_cuffs)
                        qm, dqm, taum, meas_wrench = faults.readings(qm, dqm, taum, meas_wrench)
                    # new read-only arrays and read-only rows of the bank's new reading: what the checked
                    # constructor would keep as they are, so the unchecked one (a float t as well)
                    m = Measurement._from_frozen(t, qm, dqm, taum, dict(zip(cuff_names, meas_wrench)))
                    tc = clock()
                    tau_cmd = np.asarray(controller.step(m), dtype=float)
                    controller_times[k] = clock() - tc
                    if tau_cmd.shape != command_shape or first_nonfinite(tau_cmd) >= 0:
                        self._stopped = f"non-finite command at t = {t:.4f} s"
                        raise SimulationError(
                            f"controller {controller_name!r} returned a non-finite or mis-shaped torque at "
                            f"t = {t:.4f} s: {tau_cmd!r}")
                    # what the drives take: the command delayed by the run's control delay, then the faults' (a
                    # ControlDelay fault delays the delayed command further)
                    held = tau_cmd if delay is None else delay.push(tau_cmd)
                    held = held if faults is None else faults.command(held)
                    saturated = actuators.hold(held)
                    if k == 0:  # the run starts in steady state: the drives already apply the first command
                        actuators.reset(np.clip(held, -asm.exo.model.effortLimit, asm.exo.model.effortLimit))
                        tau_applied = actuators.delivered_Nm(q_e, v_e)
                        if faults is not None:
                            tau_applied = faults.applied(tau_applied)
                row["t"] = t
                if has_human:
                    q_h, v_h = plant.q_human, plant.v_human
                    tau_h = human.torque(t, q_h, v_h)
                    if faults is not None:
                        tau_h = faults.wearer(tau_h)
                    row["q_human"], row["dq_human"] = q_h, v_h
                    row["tau_human"], row["q_human_intent"] = tau_h, human.last_desired_q
                else:
                    tau_h = zero_h
                if through_wearer:
                    fixture.begin_tick(t, plant.q_human, plant.v_human)
                if has_controller:
                    row["q_exo"], row["dq_exo"], row["q_exo_meas"], row["dq_exo_meas"] = q_e, v_e, qm, dqm
                    row["tau_cmd"], row["tau_applied"], row["saturated"] = tau_cmd, tau_applied, saturated
                    if motor:
                        row["tau_motor"], row["motor_saturated"] = actuators.motor_Nm, actuators.motor_saturated
                    diag = controller.diagnostics()
                    for d, key in diag_keys:
                        row[key] = float(diag.get(d, nan))
                    for d, series in timing_series:
                        series[k] = float(diag.get(d, nan))
                if has_human:
                    row["p_hand_human"] = plant.hand_position("human")
                    if impaired:
                        row["tau_human_impairment"] = human.last_impairment_torque
                if has_controller:
                    row["p_hand_exo"] = plant.hand_position("exo")
                if coupled:
                    row["cuff_wrench_human"] = plant.wrench_on_human
                    row["cuff_wrench_meas"] = meas_wrench
                if fixture is not None:
                    row["fixture_force_N"], row["fixture_position_m"] = fixture.force_N, fixture.position_m
                    row["fixture_cuff_velocity_m_s"] = fixture.cuff_velocity_m_s
                if append is not None:
                    append(row.values())
                else:
                    for a, value in zip(stored, row.values()):
                        a[k] = value
                self._k = k + 1
                drives = exo_torque if faults is None or not has_controller else faults.drives(exo_torque)
                if through_wearer:  # the fixture's J^T F added to the wearer's torque, substep by substep
                    fixture.inner = tau_h
                    tau_h = fixture
                elif fixture is not None:  # the fixture's J^T F added to the drives' torque, substep by substep
                    fixture.inner = drives
                    drives = fixture
                plant.advance(drives, tau_h, h, n_sub)
                bad = plant.state_is_finite()
                tick_times[k] = clock() - t0
                if bad is not None:
                    self._stopped = f"non-finite plant state at t = {t + T:.4f} s"
                    raise SimulationError(f"non-finite plant state {bad} at t = {t + T:.4f} s "
                                          f"(scenario {scenario.name!r}, controller {controller_name!r})")
                if progress is not None:
                    progress(k + 1, stop)
                if observer is not None:
                    observer(t + T, plant.q_exo, plant.q_human, plant.force_on_human_world)

    def __repr__(self) -> str:
        return (f"Simulation({self.scenario.name!r}, controller={self._controller_name!r}, mode={self.mode!r}, "
                f"seed={self.seed}, tick {self._k} of {self.scenario.n_ticks})")


def supervised(controller: Controller, safety: SafetyParams | None) -> Controller:
    """``controller`` under the safety monitor with ``safety`` (:class:`controllers.safety.Supervised`): as is when
    ``safety`` is None, when it is supervised already, or for a zero-torque controller (the unpowered reference)."""
    if safety is None or isinstance(controller, (Supervised, ZeroTorque)):
        return controller
    return Supervised(controller, safety)


def _unsupervised(controller: Controller) -> Controller:
    return controller.inner if isinstance(controller, Supervised) else controller


def _seed(seed) -> int:
    if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or seed < 0:
        raise ParameterError(f"seed must be an integer >= 0, got {seed!r}")
    return int(seed)
