"""An experiment's run: a coupled run, its human-alone baseline, its metrics and its report.

:func:`run_scenario` is ``exosandbox run``; a comparison and a sweep call it
once per controller (and wearer, and seed).  The human-alone baseline does
not depend on the controller, so a batch of runs shares it: a
:class:`Batch`, made by whoever runs the batch (the command's comparison, a
sweep's process), remembers the baselines it simulated and copies one instead
of simulating it again.
"""

from __future__ import annotations

import dataclasses
import json
import logging
import shutil
import tempfile
import time
from collections.abc import Hashable
from pathlib import Path

import numpy as np
import pinocchio as pin

from controllers.registry import build_levels, make_controller
from controllers.tasks import HandPath, WallLaw, WallTask
from models.arm import load_arm
from sim.analysis.derived import cuff_columns, human_cuff_twists
from sim.analysis.drives import drive_metrics
from sim.analysis.metrics import (
    BODY_REGION_FORCE_LIMITS_N,
    assistance_metrics,
    completion_metrics,
    hand_cuff_index,
    plane_penetration_m,
    robot_interaction_terms,
    run_metrics,
    wall_metrics,
)
from sim.analysis.tables import write_json
from sim.loop.interrupt import stop_on_signals
from sim.loop.runlog import Run, RunLogError, environment_metadata, load_run, mark_run
from sim.loop.scenario import Scenario
from sim.loop.simulate import RunResult, simulate
from sim.loop.simulation import Observer, Progress, jsonable
from sim.output.report import write_run_report
from sim.physics.plant import PlantParams

__all__ = ["Batch", "WARM_UP_TICKS", "run_scenario", "warm_up", "reusable_baseline", "evaluate_run",
           "renders_walls", "run_warnings", "FALLBACK_WARN_FRACTION", "intended_hand_m"]

#: A run warns when more than this share of its ticks fell back (1 %, common practice: an occasional failed
#: solve is survivable, a controller that fails often is not the controller that was designed).
FALLBACK_WARN_FRACTION = 0.01

_log = logging.getLogger(__name__)

#: Control ticks of :func:`warm_up`'s throw-away run.
WARM_UP_TICKS = 20


class Batch:
    """What one process keeps between the runs of a batch (a comparison, its share of a sweep).

    * the human-alone baselines it simulated (resolved paths), which
      :func:`reusable_baseline` accepts, and under a key of the caller's
      choosing (a sweep's: scenario file, wearer, seed, duration) the
      baseline to copy for the next run of that key;
    * the (scenario name, controller name) pairs :func:`warm_up` has run:
      the compiled kernels load once per process.

    A batch belongs to one process: a worker process makes its own (a forked
    one never trusts its parent's baselines).
    """

    def __init__(self) -> None:
        self._made: set[Path] = set()
        self._by_key: dict[Hashable, Path] = {}
        self._warmed: set[tuple[str, str]] = set()

    def made(self, folder: str | Path) -> bool:
        """Whether this batch simulated the baseline in ``folder``."""
        try:
            return Path(folder).resolve() in self._made
        except OSError:
            return False

    def record(self, folder: str | Path, key: Hashable | None = None) -> None:
        """Note a baseline this batch simulated; under ``key`` too, if given (the first one of a key stays)."""
        self._made.add(Path(folder).resolve())
        if key is not None:
            self.share(key, folder)

    def share(self, key: Hashable, folder: str | Path) -> None:
        """Offer the baseline in ``folder`` to the next runs of ``key`` (if none is offered yet)."""
        self._by_key.setdefault(key, Path(folder))

    def baseline_for(self, key: Hashable) -> Path | None:
        """The baseline offered for ``key`` (:meth:`share`), or None."""
        return self._by_key.get(key)

    @property
    def keys(self) -> frozenset:
        """frozenset : the keys with a baseline offered."""
        return frozenset(self._by_key)

    def warmed(self, scenario_name: str, controller_name: str) -> bool:
        """Whether :func:`warm_up` has run this pair in this batch."""
        return (scenario_name, controller_name) in self._warmed

    def mark_warm(self, scenario_name: str, controller_name: str) -> None:
        self._warmed.add((scenario_name, controller_name))

    def __repr__(self) -> str:
        return f"Batch({len(self._made)} baselines made, {len(self._warmed)} pairs warmed up)"


def run_scenario(
    scenario: Scenario,
    controller_name: str,
    out_dir: str | Path,
    *,
    seed: int | None = None,
    progress: Progress | None = None,
    observer: Observer | None = None,
    report: bool = True,
    figures: bool = True,
    baseline_from: str | Path | None = None,
    batch: Batch | None = None,
) -> RunResult:
    """A coupled run plus its human-alone baseline (same scenario and seed), with metrics.

    Writes the coupled run to ``out_dir`` (log, ``meta.json``,
    ``metrics.json``, and with ``report`` a ``report.md`` with plots, see
    :func:`sim.output.report.write_run_report`) and the baseline to ``out_dir/human_alone``.

    ``baseline_from`` names the baseline of an earlier call of the same
    ``batch``, e.g. ``other_run/human_alone``. It is copied instead of
    simulated again when that batch made it and its record shows the run
    this call would make (:func:`reusable_baseline`). A human-alone run does
    not depend on the controller, and the same inputs give the same bytes, so
    the copy is the baseline this call would have simulated; only its
    wall-clock figures (``timing.npz``, the tick times in its
    ``metrics.json``) are those of the run that made it. Otherwise (or with
    no ``batch``) the baseline is simulated as usual, and noted in ``batch``.

    The first call of a batch for a scenario and controller first runs
    :func:`warm_up`, so that the run's timing keys time the loop, not the
    loading of the compiled kernels (with no ``batch``, every call does).

    A run that does not end well says so in ``out_dir/meta.json``:
    ``"interrupted"`` on SIGINT or SIGTERM (in the main thread,
    :func:`sim.loop.interrupt.stop_on_signals`), also during the baseline,
    with the metrics of the part done marked ``"partial"`` in
    ``metrics.json``; ``"failed"`` with a one-line ``reason`` when the
    baseline, the metrics or the report cannot be made (a full disk).  The
    exception is raised again (:class:`KeyboardInterrupt` for a signal).
    """
    batch = Batch() if batch is None else batch
    out = Path(out_dir)
    # fail on a bad name (or a path variant without a path) before writing
    make_controller(controller_name, scenario.variants, scenario.walls, path=scenario.reference_path)
    warm_up(scenario, controller_name, batch)  # the timed runs below then time the loop, not the kernels' loading
    n = scenario.n_ticks
    coupled_progress = (lambda k, _n: progress(k, 2 * n)) if progress else None
    base_progress = (lambda k, _n: progress(n + k, 2 * n)) if progress else None
    with stop_on_signals():
        try:
            simulate(scenario, controller_name, out, seed=seed, progress=coupled_progress, observer=observer)
        except KeyboardInterrupt as e:  # SIGINT or SIGTERM: the metrics of the part done, marked partial
            _partial_metrics(out, scenario, controller_name, f"the run was interrupted ({_one_line(e)})")
            raise
        base = out / "human_alone"
        try:
            if (baseline_from is not None and not base.exists()
                    and reusable_baseline(baseline_from, scenario, seed, batch)):
                shutil.copytree(baseline_from, base)
                if progress:
                    progress(2 * n, 2 * n)
            else:
                simulate(scenario, controller_name, base, seed=seed, mode="human_alone", progress=base_progress)
                batch.record(base)
        except BaseException as e:  # the run is complete, its baseline not: the run is not done
            interrupted = not isinstance(e, Exception)
            why = f"its human-alone baseline was {'interrupted' if interrupted else 'not made'} ({_one_line(e)})"
            _mark(out, "interrupted" if interrupted else "failed", why)
            if interrupted:
                _partial_metrics(out, scenario, controller_name, why)
            raise
        try:
            return _finish(out, scenario, controller_name, report, figures)
        except BaseException as e:  # e.g. a full disk: never "complete" without its metrics and report
            _mark(out, "failed" if isinstance(e, Exception) else "interrupted",
                  f"its metrics or report could not be written ({_one_line(e)})")
            raise


def _one_line(exc: BaseException) -> str:
    message = " ".join(str(exc).split())
    return f"{type(exc).__name__}: {message}" if message else type(exc).__name__


def _mark(out: Path, status: str, reason: str) -> None:
    """Record in the run's ``meta.json`` that it did not end well (best effort: the error at hand is raised)."""
    try:
        mark_run(out, status, reason)
    except RunLogError as e:
        _log.error("%s: %s; %s", out, reason, e)


def _partial_metrics(out: Path, scenario: Scenario, controller_name: str, why: str) -> None:
    """Write the metrics of the part of the run that was done, with ``"partial"`` saying why (best effort)."""
    note = {"reason": why}
    try:
        run = load_run(out)
        note |= {"ticks": run.ticks, "planned_ticks": scenario.n_ticks}
        metrics = evaluate_run(out, wall=_wall(scenario, controller_name), force_limits_N=scenario.force_limits_N,
                               run=run)
    except Exception as e:  # too little was done to measure (or the folder cannot be read)
        metrics = {}
        note["metrics"] = f"none: {_one_line(e)}"
    partial = metrics.get("partial", {})
    metrics["partial"] = note | {k: v for k, v in partial.items() if k == "baseline"}
    try:
        write_json(out / "metrics.json", metrics)
    except (OSError, ValueError) as e:
        _log.error("%s: the metrics of the part done could not be written: %s", out, e)


def _wall(scenario: Scenario, controller_name: str) -> dict | None:
    """The scenario's plane wall as :func:`evaluate_run` takes it, or None."""
    wall = None
    plane = next((w for w in scenario.walls if isinstance(w, tuple) and w and w[0] == "wall_plane"), None)
    if plane is not None:
        spec = dict(plane[1])
        law = spec.get("law", WallLaw())
        law = law if isinstance(law, WallLaw) else WallLaw(*law)
        wall = {"point_m": spec["point_m"], "normal": spec["normal"], "sensor": spec.get("sensor", "hand"),
                "stiffness_N_per_m": law.stiffness_N_per_m, "damping_N_s_per_m": law.damping_N_s_per_m,
                "rendered": renders_walls(scenario, controller_name)}
    return wall


def _finish(out: Path, scenario: Scenario, controller_name: str, report: bool, figures: bool) -> RunResult:
    """The metrics and the report of a run whose coupled run and baseline are done."""
    run = load_run(out)  # read once, for the metrics and the report
    metrics = evaluate_run(out, wall=_wall(scenario, controller_name), force_limits_N=scenario.force_limits_N,
                           run=run)
    write_json(out / "metrics.json", metrics)
    if report:
        write_run_report(out, metrics, run=run, figures=figures)
    return RunResult(out, metrics, True)


def warm_up(scenario: Scenario, controller_name: str, batch: Batch | None = None) -> float:
    """Load the compiled kernels a run of ``scenario`` under ``controller_name`` calls, once per batch.

    Numba loads a kernel from its cache (or, the first time after installing,
    compiles it: about a minute in all) at its first call in a process, which
    would otherwise fall inside the first ticks of the first run of each
    process and weigh on its ``realtime_factor`` (a sum over the ticks).
    This runs :data:`WARM_UP_TICKS` control ticks of the same scenario and
    controller into a temporary folder, removed at once, and returns its
    wall time [s] (0 if ``batch`` has warmed this pair already).  Best effort:
    a warm-up that fails is left unmarked and silent, so the real run meets
    (and reports) the error with its own folder's name.
    """
    if batch is not None and batch.warmed(scenario.name, controller_name):
        return 0.0
    t0 = time.perf_counter()
    quiet = logging.getLogger("controllers")  # the real run warns about its own fallbacks, once
    level = quiet.level
    quiet.setLevel(logging.ERROR)
    try:
        short = dataclasses.replace(scenario, duration_s=WARM_UP_TICKS * scenario.control_period_s)
        with tempfile.TemporaryDirectory(prefix="exosandbox-warm-up-") as tmp:
            simulate(short, controller_name, Path(tmp) / "run")
    except Exception:  # the real run reports it
        return time.perf_counter() - t0
    finally:
        quiet.setLevel(level)
    if batch is not None:
        batch.mark_warm(scenario.name, controller_name)
    return time.perf_counter() - t0


def reusable_baseline(folder: str | Path, scenario: Scenario, seed: int | None = None,
                      batch: Batch | None = None) -> bool:
    """Whether ``folder`` holds the human-alone baseline that :func:`run_scenario` would make for ``scenario``.

    True only if ``batch`` simulated it (the same code, in this process) and
    its ``meta.json`` records a complete human-alone run of the same scenario
    parameters (its controllers and variants aside), seed and software
    environment. Never raises: a missing or unreadable folder (or no batch)
    is simply not reusable.
    """
    folder = Path(folder)
    if batch is None or not batch.made(folder):
        return False
    try:
        meta = json.loads((folder / "meta.json").read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return False
    seed = scenario.seed if seed is None else int(seed)
    return (meta.get("status") == "complete" and meta.get("mode") == "human_alone" and meta.get("seed") == seed
            and _without_controllers(meta.get("parameters")) == _without_controllers(
                json.loads(json.dumps(jsonable(scenario))))
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
        ``damping_N_s_per_m`` (optional: without it the commanded damping is
        None), ``sensor`` (cuff name) and ``rendered`` (False: the variant
        commands no wall, so the rendered stiffness and damping keys are None
        and the commanded ones 0).
    force_limits_N : dict, optional
        Body-region force limit per cuff name, over
        :data:`sim.analysis.metrics.BODY_REGION_FORCE_LIMITS_N`.
    run : sim.loop.runlog.Run, optional
        The run already read from ``folder`` (:func:`sim.loop.runlog.load_run`),
        so that it is not read again; the columns derived from it are then
        kept for the next reader (the run's report).

    Notes
    -----
    A baseline that is not complete, or not as long as the run, is not used:
    the keys that compare with it are None and ``metrics["partial"]["baseline"]``
    says why.  :func:`run_scenario` adds ``metrics["partial"]["reason"]``
    (and ``ticks``, ``planned_ticks``) to the metrics of a run that was
    interrupted; a complete run's metrics have no ``"partial"`` key.
    """
    out = Path(folder)
    run = load_run(out) if run is None else run
    arrays = run.arrays | cuff_columns(run)
    base_dir = out / "human_alone"
    base = load_run(base_dir) if base_dir.is_dir() else None
    base_note = None
    if base is not None and (not base.complete or base.ticks != run.ticks):  # never compared with part of a run
        base_note = (f"the human-alone baseline is {base.meta.get('status')!s} with {base.ticks} of the run's "
                     f"{run.ticks} ticks: the keys that compare with it (human_effort_ratio, path_deviation_rms_rad) "
                     "are null")
        base = None
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
    # the plant's Coulomb smoothing, for the friction columns of the compensation shares (the default of PlantParams
    # for a run that does not record it)
    smoothing = float(((meta.get("parameters") or {}).get("plant") or {}).get(
        "coulomb_smoothing_rad_s", PlantParams().coulomb_smoothing_rad_s))
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
                          wall_contact=contact, coulomb_smoothing_rad_s=smoothing,
                          joint_names=meta.get("exo_joints"))
    if wall is not None:
        rendered = wall.get("rendered", True)
        damping = wall.get("damping_N_s_per_m")
        metrics |= wall_metrics(arrays, point_m=wall["point_m"], normal=wall["normal"],
                                stiffness_N_per_m=wall["stiffness_N_per_m"] if rendered else 0.0,
                                damping_N_s_per_m=(damping if rendered else 0.0) if damping is not None else None,
                                hand_cuff=hand, dt_s=dt)
        if not rendered:  # a slope of force on penetration (or its rate) means nothing without a wall
            metrics["wall_stiffness_rendered_N_per_m"] = metrics["wall_stiffness_rendered_robot_N_per_m"] = None
            metrics["wall_damping_rendered_N_s_per_m"] = None
    # the robot's work on the wearer, and the hand against the exercise's reference path (meta.json's, if any)
    path = meta.get("reference_path")
    # a folder written before meta.json recorded the strap offsets has no human cuff twists: no work figures
    twists = human_cuff_twists(run) if "cuff_human_offsets" in (meta.get("models") or {}) else None
    metrics |= assistance_metrics(arrays, twists, dt,
                                  HandPath.from_dict(path) if path is not None else None)
    # the drives: tracking, bandwidth (a dedicated frequency response of the run's drive model), motor saturation
    metrics |= drive_metrics(arrays, meta, arm.model.effortLimit, meta.get("exo_joints") or arm.joint_names)
    # the scenario's faults, as meta.json lists them (sim.physics.faults)
    faults = meta.get("faults") or []
    metrics["fault_count"] = len(faults)
    metrics["faults"] = [{k: f[k] for k in ("name", "kind", "start_s", "end_s")} for f in faults]
    # the intended movement's completion: the wearer's hand against the forward kinematics of the logged intent
    metrics |= completion_metrics(arrays["t"], arrays["p_hand_human"], intended_hand_m(out, meta, arrays))
    if base_note is not None:
        metrics["partial"] = {"baseline": base_note}
    return metrics


def intended_hand_m(folder: Path, meta: dict, arrays) -> np.ndarray:
    """The intended hand path (N, 3) [m] of a run: the forward kinematics of ``q_human_intent`` on the run's own
    human model (``human.urdf``), the same hand point as ``p_hand_human``."""
    models_meta = meta["models"]
    human = load_arm((folder / models_meta["human_urdf"]).read_text(encoding="utf-8"),
                     hand_frame=models_meta["human_hand_frame"], source=str(folder / "human.urdf"))
    model, data = human.model, human.model.createData()
    fid = human.frame_id(human.hand_frame)
    q = np.asarray(arrays["q_human_intent"], dtype=float)
    out = np.empty((len(q), 3))
    for k in range(len(q)):
        pin.framesForwardKinematics(model, data, q[k])
        out[k] = data.oMf[fid].translation
    return out


def run_warnings(metrics: dict) -> list[str]:
    """What a run's ``metrics.json`` holds that its user must not miss, one line each (empty: nothing).

    A line when the safety monitor tripped (``safety_trip_count`` > 0, with each trip's reason, time and value),
    when a cuff force exceeded its body-region limit (``force_limit_exceed_count`` > 0) and when the controller
    fell back on any tick (``hqp_fallback_count``; the line says when that is more than
    :data:`FALLBACK_WARN_FRACTION` of the ticks), and when a wall the controller renders
    (``wall_stiffness_commanded_N_per_m`` > 0) gave back more energy than it took in a push-release cycle
    (``wall_energy_returned_J`` > 0): a passive wall never does
    (:func:`sim.analysis.metrics.wall_cycle_energy_returned_J` gives the definition and its source), so that
    wall was active.
    """
    out = []
    trips = metrics.get("safety_trips") or []
    if metrics.get("safety_trip_count"):
        first = "; ".join(_trip_text(t) for t in trips[:3]) + ("; ..." if len(trips) > 3 else "")
        out.append(f"the safety monitor tripped {metrics['safety_trip_count']} time(s): {first}")
    n_force = metrics.get("force_limit_exceed_count")
    if n_force:
        out.append(f"a cuff force exceeded its body-region limit on {n_force} tick(s) (force_limit_exceed_count)")
    share, n_fb = metrics.get("hqp_fallback_fraction"), metrics.get("hqp_fallback_count")
    over = share is not None and share > FALLBACK_WARN_FRACTION
    if n_fb or over:  # every fallback is said (a user's task that raised, a singular stack); more than a few, loudly
        count = f" on {n_fb} tick(s)" if n_fb else ""
        part = f" ({100 * share:.1f} % of the run" if share is not None else ""
        part += (f", more than {100 * FALLBACK_WARN_FRACTION:g} %)" if over else ")") if part else ""
        out.append(f"the controller fell back to gravity + damping{count}{part}; hqp_fallback_count in "
                   "metrics.json, the first reason is logged above")
    returned = metrics.get("wall_energy_returned_J")
    if (metrics.get("wall_stiffness_commanded_N_per_m") or 0) > 0 and returned is not None and returned > 0:
        out.append(f"the wall gave back {returned:.3g} J more than it took in a push-release cycle: it was active, "
                   "not passive (wall_energy_returned_J, wall_cycles in metrics.json)")
    return out


def _trip_text(trip: dict) -> str:
    where = trip.get("cuff") or trip.get("joint")
    value, limit = trip.get("value"), trip.get("limit")
    vl = f" {value:.4g} > {limit:.4g}" if value is not None and limit is not None else ""
    return f"{trip.get('reason')}{f' ({where})' if where is not None else ''} at t = {trip.get('t_s', 0.0):.3f} s{vl}"


def renders_walls(scenario: Scenario, controller_name: str) -> bool:
    """Whether the variant holds a wall task (the shipped ``walls`` or a scenario variant)."""
    if controller_name in scenario.variants:
        return any(isinstance(t, WallTask) for level in build_levels(scenario.variants[controller_name]) for t in level)
    return controller_name == "walls"
