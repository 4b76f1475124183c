"""The figures of run and comparison reports: series computed from runs, drawn by :mod:`sim.output.plots`.

:func:`run_figures` and :func:`compare_figures` decide which figure applies
to which runs, compute its series from the log (and the run's own models)
and call the drawing function; a figure that does not apply is skipped
(:func:`run_figure_plan` says why).  The figures, in report order:

========================== ==================================================== =====================================
file                       what it shows                                        applies when
========================== ==================================================== =====================================
interaction_force.png      force magnitude over time per cuff and in total,     always (a coupled run); the shading
                           the periods of wall contact and of faults shaded     needs a plane wall or faults
joint_angles.png           each joint of the wearer over time: the intent, the  the log has ``q_human``; the alone
                           wearer with the robot, the wearer alone              line needs the ``human_alone`` folder
hand_path.png              the hand of the wearer and of the robot in the two   the log has both hand points
                           views where the movement shows, walls as lines
joint_torque.png           commanded (and applied) torque per joint against     the log has ``tau_cmd`` and the run
                           the model's effort limits                            folder its ``exo.urdf``
wall_force_penetration.png wall-normal force against penetration                the scenario has a plane wall
felt_mass_fit.png          force against acceleration along the movement and    the log has the hand force and point
                           the fitted line whose slope is the felt mass         (a rejected fit shows its reason)
limit_phase.png            velocity against angle of each joint near its stop,  a robot joint comes within
                           the stop and the limit task's braking curve          :data:`LIMIT_APPROACH_RAD` of a stop
========================== ==================================================== =====================================

A comparison draws the force over time of every run, the joint angles, hand
paths and limit phase plot of every run on one figure (when the runs share a
scenario), the wall's force against penetration, the felt mass (bars and the
fits side by side) and the QP solve times.  The torque figure stays in each
run's report: seven panels times several variants would hide the limits.
"""

from __future__ import annotations

import dataclasses
import inspect
import math
from collections.abc import Mapping, Sequence
from pathlib import Path
from types import MappingProxyType

import numpy as np

from controllers.tasks import JointPositionLimits
from models.arm import load_arm
from sim.analysis.derived import cuff_columns
from sim.analysis.metrics import (
    apparent_mass_fit,
    hand_cuff_index,
    interaction_force_norm_N,
    plane_penetration_m,
    wall_contacts,
    wall_normal_series,
)
from sim.loop.runlog import Run, RunLogError, load_run
from sim.output import plots

__all__ = ["LIMIT_APPROACH_RAD", "AXIS_NAMES", "run_figures", "compare_figures", "run_figure_plan", "plane_walls",
           "baseline_run", "intent_deg", "hand_views", "limit_approach", "position_limit_task", "braking_curve",
           "joint_label", "fault_spans"]

#: A robot joint whose angle comes this close to a stop [rad] (5 deg; common practice for "near the stop", our
#: choice) gets the phase plot of :func:`limit_approach`.
LIMIT_APPROACH_RAD = math.radians(5.0)
#: World axes of a run (base frame of the robot, :mod:`models.exo`).
AXIS_NAMES = ("x forward", "y left", "z up")
_VIEW_NAMES = MappingProxyType({(0, 1): "seen from above", (0, 2): "seen from the side", (1, 2): "seen from the front"})


def joint_label(name: str) -> str:
    """A joint's name for a panel title: ``human_gh_flexion`` -> ``gh flexion``, ``exo_elbow`` -> ``elbow``."""
    for prefix in ("human_", "exo_"):
        if name.startswith(prefix):
            name = name[len(prefix):]
    return name.replace("_", " ")


def _joint_names(names: Sequence[str] | None, n: int) -> list[str]:
    return [joint_label(x) for x in names] if names and len(names) == n else [f"joint {k}" for k in range(n)]


def plane_walls(meta: Mapping) -> list[dict]:
    """The plane walls of a run's ``meta.json`` (``"walls"``: ``["wall_plane", {point_m, normal, ...}]``)."""
    return [w[1] for w in meta.get("walls") or []
            if isinstance(w, (list, tuple)) and len(w) == 2 and w[0] == "wall_plane" and isinstance(w[1], Mapping)]


def baseline_run(run: Run) -> Run | None:
    """The human-alone baseline next to a coupled run (its folder's ``human_alone``), or None if absent or
    unreadable."""
    if run.folder is None or not (Path(run.folder) / "human_alone").is_dir():
        return None
    try:
        return load_run(Path(run.folder) / "human_alone")
    except RunLogError:
        return None


def intent_deg(run: Run) -> np.ndarray | None:
    """The wearer's scripted target [deg] per tick: the logged ``q_human_intent`` (the intent of
    :mod:`sim.physics.intent` as the wearer's motor used it), or None when the log has none."""
    if "q_human_intent" not in run.arrays:
        return None
    return np.degrees(np.asarray(run["q_human_intent"], float))


def hand_views(paths: Sequence[np.ndarray], walls: Sequence[Mapping] = ()) -> list[tuple[int, int]]:
    """Two orthogonal views (pairs of world axes, horizontal then vertical) in which the hand's movement shows.

    The first view holds the two axes along which the paths extend most (their
    range over all paths); the second the widest of them with the third axis,
    so that together they show all three.  With a plane wall whose normal
    lies along a world axis, that axis is in both views (the wall is then
    seen edge on, as a line, in both).  An axis ``z`` (up) is always the
    vertical one of its view.
    """
    ext = np.max([np.ptp(np.asarray(p, float), axis=0) for p in paths], axis=0) if len(paths) else np.ones(3)
    order = [int(i) for i in np.argsort(-ext, kind="stable")]
    for w in walls:
        n = np.abs(np.asarray(w["normal"], float))
        k = int(np.argmax(n))
        if n[k] > 0.99 * np.linalg.norm(n):
            order = [k] + [i for i in order if i != k]
            break
    return [tuple(sorted((order[0], order[1]))), tuple(sorted((order[0], order[2])))]


def limit_approach(q: np.ndarray, lower: np.ndarray, upper: np.ndarray) -> list[tuple[int, bool, float]]:
    """The joints that come within :data:`LIMIT_APPROACH_RAD` of a stop, closest first: (index, True for the
    upper stop, closest distance [rad]; negative past the stop)."""
    q = np.asarray(q, float)
    if not len(q):
        return []
    lo, hi = np.asarray(lower, float), np.asarray(upper, float)
    d_hi = np.where(np.isfinite(hi), np.min(hi - q, axis=0), np.inf)
    d_lo = np.where(np.isfinite(lo), np.min(q - lo, axis=0), np.inf)
    found = [(j, bool(d_hi[j] <= d_lo[j]), float(min(d_hi[j], d_lo[j]))) for j in range(q.shape[1])]
    return sorted((f for f in found if f[2] < LIMIT_APPROACH_RAD), key=lambda f: f[2])


def position_limit_task(meta: Mapping) -> tuple[float, float, str] | None:
    """Braking deceleration [rad/s²], margin [rad] and their source for the position-limit task of a run's
    controller (:class:`controllers.tasks.JointPositionLimits`), or None when the controller has none.

    Looked up in ``meta["controller_structure"]`` when the run recorded it,
    then in the scenario's variant of that name (``meta["parameters"]["variants"]``), then, for the shipped
    ``walls`` variant, the task's defaults.
    """
    sig = inspect.signature(JointPositionLimits).parameters
    a0, m0 = sig["braking_accel_rad_s2"].default, sig["margin_rad"].default

    def params(p: Mapping) -> tuple[float, float]:
        return (float(p.get("braking_accel_rad_s2", p.get("a", a0))), float(p.get("margin_rad", p.get("margin", m0))))

    for level in (meta.get("controller_structure") or {}).get("levels") or []:
        for task in level.get("tasks") or []:
            if task.get("type") == JointPositionLimits.__name__ or task.get("name") == JointPositionLimits.name:
                return (*params(task.get("params") or {}),
                        f"the recorded structure of the run's controller {meta.get('controller')!r}")
    name = meta.get("controller")
    variants = ((meta.get("parameters") or {}).get("variants") or {})
    if name in variants:
        for level in variants[name] if isinstance(variants[name], list) else []:
            for spec in _task_specs(level):
                if spec == JointPositionLimits.name:
                    return (a0, m0, f"variant {name!r}, the task's defaults")
                if isinstance(spec, list) and spec and spec[0] == JointPositionLimits.name:
                    return (*params(spec[1] if len(spec) > 1 and isinstance(spec[1], Mapping) else {}),
                            f"variant {name!r}")
                if isinstance(spec, Mapping) and spec.get("task") == JointPositionLimits.name:
                    return (*params(spec.get("attributes") or {}), f"variant {name!r}, its task object")
        return None
    if name == "walls":
        return (a0, m0, "the shipped 'walls' variant, the task's defaults")
    return None


def _task_specs(level) -> list:
    """The task specs of one level of a recorded variant: a name, ``[name, {params}]``, a task object's record
    (``{"task": name, "attributes": {...}}``), or a list of these."""
    if isinstance(level, (str, Mapping)):
        return [level]
    if isinstance(level, list) and len(level) == 2 and isinstance(level[0], str) and isinstance(level[1], Mapping):
        return [level]
    return list(level) if isinstance(level, list) else []


def braking_curve(stop_rad: float, margin_rad: float, braking_accel_rad_s2: float, q_from_rad: float, *,
                  upper: bool = True, n: int = 200) -> tuple[np.ndarray, np.ndarray]:
    """The largest velocity from which the position-limit task can still stop short of the stop, per angle.

    .. math:: \\dot q_{max}(q) = \\sqrt{2\\, a_{brk}\\, \\max(q_{stop} - m - q,\\ 0)}

    (upper stop; for the lower one the mirror image, negative), the braking
    distance of uniform deceleration :math:`v^2 = 2 a d` that
    :class:`controllers.tasks.JointPositionLimits` bounds the velocity with
    (textbook kinematics, e.g. Halliday, Resnick & Walker, *Fundamentals of
    Physics*, ch. 2, motion with constant acceleration).  Returns ``n``
    angles [rad] from ``q_from_rad`` to the stop less the margin and the
    velocities [rad/s].
    """
    edge = stop_rad - margin_rad if upper else stop_rad + margin_rad
    q = np.linspace(q_from_rad, edge, n)
    d = np.maximum(edge - q if upper else q - edge, 0.0)
    v = np.sqrt(2.0 * braking_accel_rad_s2 * d)
    return q, v if upper else -v


# ------------------------------------------------------------------------------------------------
# one run
# ------------------------------------------------------------------------------------------------


def _title(meta: Mapping, what: str) -> str:
    return f"{meta.get('scenario')} / {meta.get('controller')}: {what}"


def _arm(run: Run):
    """The run's robot model from its folder's URDF, or None."""
    models_meta = run.meta.get("models") or {}
    if run.folder is None or "exo_urdf" not in models_meta:
        return None
    path = Path(run.folder) / models_meta["exo_urdf"]
    if not path.is_file():
        return None
    return load_arm(path.read_text(encoding="utf-8"), hand_frame=models_meta.get("exo_hand_frame"),
                    armature_kg_m2=(run.meta.get("exo_params") or {}).get("armature_kg_m2"), source=str(path))


def _contact(run: Run, spec: Mapping) -> np.ndarray:
    """Per tick, the wearer's hand past the plane (the ticks every metric treats as wall contact)."""
    return plane_penetration_m(run["p_hand_human"], spec["point_m"], spec["normal"]) > 0.0


def _mass_fit(run: Run, metrics: Mapping | None):
    """The felt-mass fit of a run (:func:`sim.analysis.metrics.apparent_mass_fit`, with the metric's own
    exclusion of wall contact), rejected as the metric was when ``metrics`` reports no felt mass."""
    arrays = run.arrays | cuff_columns(run)
    walls = plane_walls(run.meta)
    hand = hand_cuff_index(run.meta["cuffs"], walls[0].get("sensor", "hand") if walls else "hand")
    exclude = _contact(run, walls[0]) if walls else None
    fit = apparent_mass_fit(arrays["cuff_force_human_world"][:, hand], run["p_hand_human"], float(run.meta["dt_s"]),
                            exclude=exclude)
    metrics = metrics or {}
    if fit.mass_kg is not None and "apparent_mass_hand_kg" in metrics and metrics["apparent_mass_hand_kg"] is None:
        fit = dataclasses.replace(fit, mass_kg=None, reason=metrics.get("apparent_mass_hand_note")
                                  or "the run's metrics report no felt mass")
    return fit


def run_figure_plan(run: Run) -> dict[str, str]:
    """Why each figure of :func:`run_figures` that does not apply to ``run`` is skipped: file stem -> reason."""
    skipped = {}
    cols = run.arrays
    if "cuff_wrench_human" not in cols:
        skipped["interaction_force"] = "no cuff wrenches in the log (not a coupled run)"
    if "q_human" not in cols:
        skipped["joint_angles"] = "no wearer joints in the log"
    if "p_hand_human" not in cols or "p_hand_exo" not in cols:
        skipped["hand_path"] = "the log lacks the wearer's or the robot's hand point"
    if "tau_cmd" not in cols:
        skipped["joint_torque"] = "no commanded torque in the log"
    if not plane_walls(run.meta):
        skipped["wall_force_penetration"] = "the scenario has no plane wall"
    if "cuff_wrench_human" not in cols or "p_hand_human" not in cols:
        skipped["felt_mass_fit"] = "no hand force or hand point in the log"
    if "q_exo" not in cols:
        skipped["limit_phase"] = "no robot joints in the log"
    if "joint_torque" not in skipped or "limit_phase" not in skipped:
        arm = _arm(run)
        if arm is None:
            for stem in ("joint_torque", "limit_phase"):
                skipped.setdefault(stem, "the run folder has no robot model (exo.urdf) to read the limits from")
        elif "limit_phase" not in skipped and not _near_stops([run], arm):
            skipped["limit_phase"] = (f"no robot joint comes within {math.degrees(LIMIT_APPROACH_RAD):g} deg of a "
                                      "stop")
    return skipped


def _near_stops(runs: Sequence[Run], arm) -> list[tuple[int, bool, float]]:
    """The robot joints that come near a stop in any of ``runs`` (:func:`limit_approach`), each once, closest
    first."""
    if arm is None:
        return []
    lo, hi = arm.position_limits()
    best: dict[int, tuple[int, bool, float]] = {}
    for r in runs:
        if "q_exo" in r.arrays:
            for j, up, d in limit_approach(r["q_exo"], lo, hi):
                if j not in best or d < best[j][2]:
                    best[j] = (j, up, d)
    return sorted(best.values(), key=lambda f: f[2])


def _draw_limit_phase(runs: Mapping[str, Run], arm, path: Path, *, title: str) -> Path | None:
    """The phase plot of every robot joint near a stop (one panel each, one line per run), or None if none is."""
    near = _near_stops(list(runs.values()), arm)
    if not near:
        return None
    lo, hi = arm.position_limits()
    meta = next(iter(runs.values())).meta
    tasks = {lab: position_limit_task(r.meta) for lab, r in runs.items()}
    task = next((tk for tk in tasks.values() if tk is not None), None)
    names = meta.get("exo_joints") or []
    panels = []
    for j, upper, _ in near:
        series = {lab: (r["q_exo"][:, j], r["dq_exo"][:, j]) for lab, r in runs.items()}
        stop = float(hi[j] if upper else lo[j])
        panel = {"joint": "robot " + (joint_label(names[j]) if j < len(names) else f"joint {j}"), "series": series,
                 "stop_rad": stop, "upper": upper, "velocity_limit_rad_s": float(arm.model.velocityLimit[j])}
        if task is not None:
            a, margin, _ = task
            q_from = min(float(np.min(q)) for q, _ in series.values()) if upper else max(
                float(np.max(q)) for q, _ in series.values())
            panel |= {"braking": braking_curve(stop, margin, a, q_from, upper=upper), "margin_rad": margin,
                      "braking_label": f"braking curve of the limit task, a = {a:g} rad/s²"}
        panels.append(panel)
    if task is not None:
        a, margin, source = task
        users = [lab for lab, tk in tasks.items() if tk is not None]
        note = (f"Braking curve: the largest velocity from which the position-limit task stops at the stop less its "
                f"margin of {math.degrees(margin):.2g} deg, v = √(2 a d), a = {a:g} rad/s² ({source})"
                + (f"; in {', '.join(users)} only." if len(users) < len(tasks) else "."))
    else:
        note = "No controller here has a position-limit task: no braking curve."
    return plots.limit_phase(panels, path, title=title, note=note)


def fault_spans(meta: Mapping, t_end_s: float) -> list[tuple[float, float]]:
    """The periods [s] with a fault active (``meta["faults"]``), overlapping ones merged, cut at ``t_end_s``."""
    spans = sorted((float(f["start_s"]), min(float(f["end_s"]), t_end_s)) for f in meta.get("faults") or []
                   if float(f["start_s"]) <= t_end_s)
    merged: list[tuple[float, float]] = []
    for a, b in spans:
        if merged and a <= merged[-1][1]:
            merged[-1] = (merged[-1][0], max(merged[-1][1], b))
        else:
            merged.append((a, b))
    return merged


def run_figures(run: Run, metrics: Mapping | None, folder: str | Path) -> list[Path]:
    """The figures of one coupled run in ``folder/plots`` (the table of the module docstring); their paths.

    ``metrics``: the run's ``metrics.json`` contents (the felt-mass fit is
    shown as rejected where they report no felt mass).
    """
    out = Path(folder) / "plots"
    meta = run.meta
    skipped = run_figure_plan(run)
    figs: list[Path] = []
    t = np.asarray(run["t"], float)
    walls = plane_walls(meta)
    contacts = []
    if walls and "p_hand_human" in run.arrays:
        contacts = [(t[a], t[b]) for a, b in wall_contacts(
            plane_penetration_m(run["p_hand_human"], walls[0]["point_m"], walls[0]["normal"]))]

    if "interaction_force" not in skipped:
        w = np.asarray(run["cuff_wrench_human"])
        series = {"all cuffs": (t, interaction_force_norm_N(w))}
        for i, name in enumerate(meta["cuffs"]):
            series[f"{joint_label(name)} cuff"] = (t, np.linalg.norm(w[:, i, :3], axis=-1))
        figs.append(plots.force_over_time(series, out / "interaction_force.png", shaded=contacts,
                                          faulted=fault_spans(meta, float(t[-1]) if len(t) else 0.0),
                                          title=_title(meta, "force between wearer and robot (magnitude)")))

    if "joint_angles" not in skipped:
        names = _joint_names(meta.get("human_joints"), run["q_human"].shape[1])
        series, note = {}, None
        qi = intent_deg(run)
        if qi is not None:
            series["intended (scripted target)"] = (t, qi)
        series["wearer with the robot"] = (t, np.degrees(run["q_human"]))
        base = baseline_run(run)
        if base is not None and "q_human" in base.arrays:
            series["wearer alone (baseline run)"] = (np.asarray(base["t"], float), np.degrees(base["q_human"]))
        else:
            note = "No human-alone baseline next to this run (human_alone/): the wearer-alone line is left out."
        colours = {"intended (scripted target)": plots.ROLE_COLOURS["intent"],
                   "wearer with the robot": plots.ROLE_COLOURS["with robot"],
                   "wearer alone (baseline run)": plots.ROLE_COLOURS["alone"]}
        figs.append(plots.joint_angles(series, names, out / "joint_angles.png", colours=colours,
                                       dashed=("intended (scripted target)",), note=note,
                                       underlay=("wearer alone (baseline run)",),
                                       title=_title(meta, "joint angles of the wearer")))

    if "hand_path" not in skipped:
        paths = {"wearer's hand": np.asarray(run["p_hand_human"], float),
                 "robot's hand point": np.asarray(run["p_hand_exo"], float)}
        views = hand_views(list(paths.values()), walls)
        figs.append(plots.hand_path(paths, views, out / "hand_path.png", axis_names=AXIS_NAMES,
                                    walls=[(w["point_m"], w["normal"]) for w in walls],
                                    colours={"wearer's hand": plots.ROLE_COLOURS["with robot"],
                                             "robot's hand point": plots.ROLE_COLOURS["robot"]},
                                    view_names=[_VIEW_NAMES[v] for v in views],
                                    title=_title(meta, "hand path")))

    arm = None
    if "joint_torque" not in skipped or "limit_phase" not in skipped:
        arm = _arm(run)
    if "joint_torque" not in skipped:
        torques = {"commanded": np.asarray(run["tau_cmd"], float)}
        if "tau_applied" in run.arrays:
            torques["applied by the drives"] = np.asarray(run["tau_applied"], float)
        names = _joint_names(meta.get("exo_joints"), run["tau_cmd"].shape[1])
        figs.append(plots.torque_against_limits(
            t, torques, np.asarray(arm.model.effortLimit, float), names, out / "joint_torque.png",
            saturated=np.asarray(run["saturated"], bool) if "saturated" in run.arrays else None,
            title=_title(meta, "robot joint torque against the drives' limits")))

    if "wall_force_penetration" not in skipped:
        spec = walls[0]
        hand = hand_cuff_index(meta["cuffs"], spec.get("sensor", "hand"))
        pen, felt = wall_normal_series(run.arrays | cuff_columns(run), spec["point_m"], spec["normal"], hand)
        figs.append(plots.force_against_penetration(
            {meta["controller"]: (pen, felt)}, out / "wall_force_penetration.png",
            commanded_N_per_m=(metrics or {}).get("wall_stiffness_commanded_N_per_m"),
            title=_title(meta, "wall-normal force against penetration")))

    if "felt_mass_fit" not in skipped:
        figs.append(plots.mass_scatter({meta["controller"]: _mass_fit(run, metrics)}, out / "felt_mass_fit.png",
                                       title=_title(meta, "felt mass at the hand: force against acceleration")))

    if "limit_phase" not in skipped:
        png = _draw_limit_phase({meta["controller"]: run}, arm, out / "limit_phase.png",
                                title=_title(meta, "robot joints near a stop, velocity against angle"))
        if png is not None:
            figs.append(png)
    return figs


# ------------------------------------------------------------------------------------------------
# several runs
# ------------------------------------------------------------------------------------------------


def _same_scenario(runs: Sequence[Run]) -> bool:
    keys = {(r.meta.get("scenario"), len(r["t"]), tuple(r.meta.get("human_joints") or ())) for r in runs}
    return len(keys) == 1


def compare_figures(runs: Sequence[Run], labels: Sequence[str], out_dir: str | Path) -> list[Path]:
    """The figures of a comparison in ``out_dir/plots`` (see the module docstring); their paths."""
    out = Path(out_dir) / "plots"
    figs = [plots.force_over_time(
        {lab: (np.asarray(r["t"]), interaction_force_norm_N(r["cuff_wrench_human"])) for lab, r in zip(labels, runs)},
        out / "interaction_force.png", title="force between wearer and robot, all cuffs (magnitude)")]
    same = _same_scenario(runs)
    scen = str(runs[0].meta.get("scenario")) if runs else ""

    if same and runs and all("q_human" in r.arrays for r in runs):
        t = np.asarray(runs[0]["t"], float)
        series, colours, note = {}, {}, None
        qi = intent_deg(runs[0])
        if qi is not None:
            series["intended (scripted target)"] = (t, qi)
            colours["intended (scripted target)"] = plots.ROLE_COLOURS["intent"]
        base = baseline_run(runs[0])
        if base is not None and "q_human" in base.arrays:
            series["wearer alone (baseline run)"] = (np.asarray(base["t"], float), np.degrees(base["q_human"]))
            colours["wearer alone (baseline run)"] = plots.ROLE_COLOURS["alone"]
        else:
            note = "No human-alone baseline next to the first run: the wearer-alone line is left out."
        others = [c for c in plots.PALETTE if c != plots.ROLE_COLOURS["alone"]]  # the alone line keeps its colour
        for i, (lab, r) in enumerate(zip(labels, runs)):
            series[lab] = (np.asarray(r["t"], float), np.degrees(r["q_human"]))
            colours[lab] = others[i % len(others)]
        names = _joint_names(runs[0].meta.get("human_joints"), runs[0]["q_human"].shape[1])
        figs.append(plots.joint_angles(series, names, out / "joint_angles.png", colours=colours, note=note,
                                       dashed=("intended (scripted target)",),
                                       underlay=("wearer alone (baseline run)",),
                                       title=f"{scen}: joint angles of the wearer with each controller"))

    if same and runs and all("p_hand_human" in r.arrays for r in runs):
        paths = {lab: np.asarray(r["p_hand_human"], float) for lab, r in zip(labels, runs)}
        walls = plane_walls(runs[0].meta)
        views = hand_views(list(paths.values()), walls)
        figs.append(plots.hand_path(paths, views, out / "hand_path.png", axis_names=AXIS_NAMES,
                                    walls=[(w["point_m"], w["normal"]) for w in walls],
                                    view_names=[_VIEW_NAMES[v] for v in views],
                                    title=f"{scen}: the wearer's hand with each controller"))

    walled = [(lab, r, plane_walls(r.meta)) for lab, r in zip(labels, runs)]
    if any(w for _, _, w in walled):
        commanded = max((r.metrics.get("wall_stiffness_commanded_N_per_m") or 0.0) for r in runs) or None
        series = {}
        for lab, r, w in walled:
            if w:
                hand = hand_cuff_index(r.meta["cuffs"], w[0].get("sensor", "hand"))
                series[lab] = wall_normal_series(r.arrays | cuff_columns(r), w[0]["point_m"], w[0]["normal"], hand)
        figs.append(plots.force_against_penetration(series, out / "wall_force_penetration.png",
                                                    commanded_N_per_m=commanded))

    figs.append(plots.bars({lab: r.metrics.get("apparent_mass_hand_kg") for lab, r in zip(labels, runs)},
                           out / "felt_mass.png", ylabel="felt mass at the hand [kg]",
                           title="apparent (felt) mass at the hand"))
    fits = {lab: _mass_fit(r, r.metrics) for lab, r in zip(labels, runs)
            if "cuff_wrench_human" in r.arrays and "p_hand_human" in r.arrays}
    if fits:
        figs.append(plots.mass_scatter(fits, out / "felt_mass_fit.png",
                                       title="felt mass at the hand: force against acceleration along the movement"))

    if same and runs:
        png = _draw_limit_phase(dict(zip(labels, runs)), _arm(runs[0]), out / "limit_phase.png",
                                title=f"{scen}: robot joints near a stop with each controller, velocity against angle")
        if png is not None:
            figs.append(png)

    solve = {}
    for lab, r in zip(labels, runs):
        p = Path(r.folder) / "timing.npz" if r.folder is not None else None
        if p is not None and p.is_file():
            with np.load(p, allow_pickle=False) as f:
                if "diag_solve_time_s" in f.files:
                    solve[lab] = f["diag_solve_time_s"]
    figs.append(plots.solve_time_histograms(solve, out / "solve_time.png"))
    return figs
