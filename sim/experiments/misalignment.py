"""Misalignment across the workspace: the steady cuff wrenches of a joint-centre offset over shoulder postures.

The robot is fitted to the wearer at a reference posture (the scenario's
intent start): the cuffs are closed there (:func:`models.coupling.strap_cuffs`),
so they carry no load at that posture whatever the offset between the
wearer's and the robot's joint centres (``Registration.misalignment_m``).
When the wearer's arm then moves to another posture, a segment that turns by
R about the wearer's centre, while the robot's segment turns about its own,
stretches each cuff by :math:`(I - R)\\,d` more than without the offset d
(the segment's rigid motion :math:`x \\mapsto R x + t` applied to points shifted
by d).  That stretch is the parasitic load: what the offset adds.

Each cell of the grid (the wearer's own gh flexion x gh abduction, the other
arm joints at the reference posture; the ISB plane of elevation x elevation is
not used here) is computed two ways:

* ``"transparent"`` (or another controller by name): a short coupled
  :class:`~sim.loop.simulation.Simulation` in which the wearer is relaxed and
  moved passively: their motor model is made a stiff holder without
  feed-forward (:data:`HOLDER`, an external fixture that takes the arm from
  the reference posture to the cell's posture and holds it), the robot
  running the controller.  The steady wrench of each cuff is the mean of
  ``cuff_wrench_human`` (the wrench on the wearer, in the cuff's human-side
  frame) over the last :data:`AVERAGE_S` of the run;
* ``"held"``: the robot held rigidly at the posture that lines its segments up
  with the wearer's (:func:`models.coupling.matching_exo_posture`, an ideal
  follower with locked joints), the wearer exactly at the cell's posture: the
  static cuff law (:func:`models.cuffs.cuff_wrench`), no simulation.  A
  posture the robot cannot line up with inside its joint limits gets NaN and
  is not steady.

Both are computed with the offset and with zero offset; the parasitic force
[N] and torque [N m] of a cuff are the norms of the difference of the two mean
wrench vectors (the same frame, the same posture).  A simulated cell whose
cuff forces still drift over the averaging window (:data:`STEADY_DRIFT_N`)
has no steady wrench: it is kept in the table, marked, and left out of the
worst cells.

The cells run in a pool of local processes, or on an existing Dask cluster
(:func:`sim.experiments.cluster.dask_client`), and come back in grid order.

References
----------
.. [Schiebl2025] J. Schiebl et al., *Sensors* 25(15):4605, 2025: cuff interface stiffness.
.. [Schiele2006] A. Schiele, F.C.T. van der Helm (2006), "Kinematic design to improve ergonomics in human
   machine interaction", IEEE Trans. Neural Systems and Rehabilitation Engineering 14(4):456-469
   (joint-axis misalignment and the interaction forces it causes).
"""

from __future__ import annotations

import csv
import dataclasses
import math
import time
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pinocchio as pin

from models.coupling import Registration, matching_exo_posture
from models.cuffs import cuff_wrench
from models.errors import ParameterError
from models.human import girdle_posture
from sim.experiments.cluster import map_in_order
from sim.loop.scenario import Scenario
from sim.loop.simulation import Simulation, build_assembly
from sim.physics.intent import JointIntent, Via
from sim.physics.wearer import HumanMotorParams

__all__ = ["MisalignmentError", "MisalignmentTask", "MisalignmentCell", "MisalignmentMap", "HOLDER",
           "MOVE_S", "SETTLE_S", "AVERAGE_S", "STEADY_DRIFT_N", "CSV_COLUMNS", "cell_scenario", "held_wrenches",
           "simulated_wrenches", "map_cell", "misalignment_map", "worst_cells", "write_misalignment"]

#: The stiff passive holder that moves the relaxed wearer's arm [N m/rad], [N m s/rad]: about 25 times the
#: wearer's own shoulder and elbow stiffness, so that gravity sags the arm by about 1 degree at 90 degrees of
#: flexion; damping near critical for the segments' inertia at 1 kHz x 4 substeps; no feed-forward (the
#: muscles are relaxed).  Our choice.
HOLDER = HumanMotorParams(stiffness_Nm_per_rad=(400.0, 400.0, 400.0, 300.0, 40.0, 40.0, 40.0),
                          damping_Nm_s_per_rad=(20.0, 20.0, 20.0, 10.0, 0.3, 0.3, 0.3),
                          girdle_stiffness_Nm_per_rad=400.0, girdle_damping_Nm_s_per_rad=20.0,
                          gravity_feedforward=False, inertial_feedforward=False)
#: The move from the reference posture to the cell's [s], the hold after it [s], the averaging window at its
#: end [s] (the holder's time constant D/K is 0.05 s: settled well before the window; our choice).
MOVE_S = 0.6
SETTLE_S = 0.8
AVERAGE_S = 0.2
START_HOLD_S = 0.1
#: A cell is steady when the mean force of every cuff over the first and the second half of the averaging window
#: differ by at most this [N] in both runs (0.2 mm of the cuff's 4.5 N/mm; our choice): above it the robot has
#: not come to rest (it wanders under the load), and the mean is no steady wrench.  A zero-mean chatter at the
#: sampling rate (the girdle's light links under the stiff holder) averages out and does not count.
STEADY_DRIFT_N = 1.0


class MisalignmentError(ParameterError):
    """A misalignment map that cannot be made as asked (a bad grid, offset or option)."""


@dataclass(frozen=True)
class MisalignmentTask:
    """One cell to compute: its index, the wearer's gh flexion and abduction [rad], the offset [m], how."""

    index: int
    scenario: Scenario
    flexion_rad: float
    abduction_rad: float
    offset_m: tuple[float, float, float]
    controller: str


@dataclass(frozen=True)
class MisalignmentCell:
    """The steady wrench of one cuff at one posture, with and without the offset.

    Attributes
    ----------
    flexion_rad, abduction_rad : float [rad]  the wearer's gh flexion and gh abduction.
    cuff : str
    force_N, torque_Nm : float  norms of the mean wrench on the wearer with the offset [N], [N m].
    force0_N, torque0_N : float  the same with zero offset.
    parasitic_force_N, parasitic_torque_Nm : float  norms of the difference of the two mean wrenches.
    drift_N : float [N]  the larger change of the cuff's mean force between the halves of the averaging window,
        of the two runs (0 when held).
    steady : bool  every cuff of the cell within :data:`STEADY_DRIFT_N` in both runs.
    """

    flexion_rad: float
    abduction_rad: float
    cuff: str
    force_N: float
    torque_Nm: float
    force0_N: float
    torque0_Nm: float
    parasitic_force_N: float
    parasitic_torque_Nm: float
    drift_N: float = 0.0
    steady: bool = True


CSV_COLUMNS = ("flexion_deg", "abduction_deg", "cuff", "force_N", "torque_Nm", "force0_N", "torque0_Nm",
               "parasitic_force_N", "parasitic_torque_Nm", "drift_N", "steady")


@dataclass(frozen=True)
class MisalignmentMap:
    """The cells in grid order (flexion fastest, then abduction; cuffs in the scenario's order) and settings."""

    cells: tuple[MisalignmentCell, ...]
    scenario_name: str
    offset_m: tuple[float, float, float]
    girdle: bool
    controller: str
    flexion_rad: tuple[float, ...]
    abduction_rad: tuple[float, ...]
    elapsed_s: float
    executor: str


def _posture(scenario: Scenario, flexion_rad: float, abduction_rad: float) -> tuple[float, ...]:
    q = list(scenario.intent.start_rad)
    q[0], q[1] = float(flexion_rad), float(abduction_rad)
    return tuple(q)


def cell_scenario(scenario: Scenario, flexion_rad: float, abduction_rad: float,
                  offset_m: Sequence[float]) -> Scenario:
    """The scenario of one simulated cell: the offset registered, the holder as the wearer's motor, an intent
    from the reference posture (the scenario's start) to the cell's, held; no impairment, no faults."""
    intent = JointIntent(start_rad=tuple(scenario.intent.start_rad), start_hold_s=START_HOLD_S,
                         vias=(Via(_posture(scenario, flexion_rad, abduction_rad), move_s=MOVE_S,
                                   hold_s=SETTLE_S),))
    return dataclasses.replace(scenario, intent=intent, duration_s=START_HOLD_S + MOVE_S + SETTLE_S,
                               registration=Registration(tuple(offset_m)), motor=HOLDER, impairment=None,
                               faults=())


def held_wrenches(scenario: Scenario, flexion_rad: float, abduction_rad: float,
                  offset_m: Sequence[float]) -> np.ndarray:
    """(n_cuffs, 6) the static wrench on the wearer [N, N m] (cuff's human-side frame) with the robot held at the
    posture matching the wearer's segments and the wearer exactly at the cell's posture.

    .. math:: w_B = -J_{\\log}^T K \\log_6({}^A M_B)

    (:func:`models.cuffs.cuff_wrench` at rest)."""
    sc = dataclasses.replace(scenario, registration=Registration(tuple(offset_m)))
    asm = build_assembly(sc)
    hp = sc.human
    qh = np.asarray(_posture(sc, flexion_rad, abduction_rad), dtype=float)
    if hp.girdle:
        qh = girdle_posture(hp, qh)
    qe = matching_exo_posture(asm.exo, asm.human, qh)
    de, dh = asm.exo.model.createData(), asm.human.model.createData()
    pin.framesForwardKinematics(asm.exo.model, de, qe)
    pin.framesForwardKinematics(asm.human.model, dh, qh)
    zero = np.zeros(6)
    return np.array([cuff_wrench(de.oMf[c.exo_frame_id], dh.oMf[c.human_frame_id] * c.human_offset, zero, zero,
                                 c.spec.params).on_b for c in asm.cuffs])


def simulated_wrenches(scenario: Scenario, flexion_rad: float, abduction_rad: float, offset_m: Sequence[float],
                       controller: str) -> tuple[np.ndarray, np.ndarray]:
    """(n_cuffs, 6) the mean of ``cuff_wrench_human`` [N, N m] over the last :data:`AVERAGE_S` of the cell's run
    (:func:`cell_scenario`) under ``controller``, and (n_cuffs,) the drift of each cuff's force [N]: the norm of the
    difference of its means over the second and the first half of that window."""
    sc = cell_scenario(scenario, flexion_rad, abduction_rad, offset_m)
    traj = Simulation(sc, controller).run()
    w = traj.arrays["cuff_wrench_human"]
    n = max(1, int(round(AVERAGE_S / sc.control_period_s)))
    mean = w[-n:].mean(axis=0)
    h = n // 2
    drift = np.linalg.norm(w[-h:, :, :3].mean(axis=0) - w[-n:-h, :, :3].mean(axis=0), axis=1) if h else \
        np.zeros(w.shape[1])
    return mean, drift


def map_cell(task: MisalignmentTask) -> list[MisalignmentCell]:
    """The cells of one posture (one per cuff): with the offset and with zero offset."""
    args = (task.scenario, task.flexion_rad, task.abduction_rad)
    n = len(task.scenario.cuffs)
    if task.controller == "held":
        try:
            (w, s), (w0, s0) = ((held_wrenches(*args, d), np.zeros(n)) for d in (task.offset_m, (0.0, 0.0, 0.0)))
        except ParameterError:  # no robot posture within its limits lines up with the wearer's: not reachable
            w = w0 = np.full((n, 6), np.nan)
            s = s0 = np.full(n, np.nan)
    else:
        (w, s), (w0, s0) = (simulated_wrenches(*args, d, task.controller) for d in (task.offset_m, (0.0, 0.0, 0.0)))
    drift = np.maximum(s, s0)
    steady = bool(np.all(drift <= STEADY_DRIFT_N))  # False for an unreachable held cell (NaN)
    names = [c.name for c in task.scenario.cuffs]
    return [MisalignmentCell(task.flexion_rad, task.abduction_rad, name,
                             float(np.linalg.norm(w[i, :3])), float(np.linalg.norm(w[i, 3:])),
                             float(np.linalg.norm(w0[i, :3])), float(np.linalg.norm(w0[i, 3:])),
                             float(np.linalg.norm(w[i, :3] - w0[i, :3])),
                             float(np.linalg.norm(w[i, 3:] - w0[i, 3:])), float(drift[i]), steady)
            for i, name in enumerate(names)]


def _axis(name: str, values: Sequence[float]) -> tuple[float, ...]:
    try:
        v = tuple(float(x) for x in values)
    except (TypeError, ValueError) as e:
        raise MisalignmentError(f"{name} must be a sequence of angles [rad], got {values!r}") from e
    if not v or not all(math.isfinite(x) and abs(x) <= math.pi for x in v):
        raise MisalignmentError(f"{name} must be finite angles within [-pi, pi] rad, got {values!r}")
    return v


def misalignment_map(scenario: Scenario, offset_m: Sequence[float], flexion_rad: Sequence[float],
                     abduction_rad: Sequence[float], *, girdle: bool | None = None,
                     controller: str = "transparent", jobs: int = 1,
                     dask_address: str | None = None) -> MisalignmentMap:
    """The steady cuff wrenches with and without the offset over gh flexion x gh abduction.

    Parameters
    ----------
    scenario : Scenario  its subject, cuffs, robot and the reference posture (its intent's start).
    offset_m : (3,) [m]  the wearer's joint centres relative to the robot's, in the robot's base frame.
    flexion_rad, abduction_rad : sequences [rad]  the grid of the wearer's gh flexion and gh abduction.
    girdle : bool, optional  switch the wearer's shoulder girdle on or off (default: the scenario's).
    controller : str  a controller name for the simulated cells, or ``"held"`` (the robot held, static).
    jobs : int  local processes (1: this one); ignored with ``dask_address``.
    dask_address : str, optional  an existing Dask scheduler.
    """
    if isinstance(jobs, bool) or not isinstance(jobs, int) or jobs < 1:
        raise MisalignmentError(f"jobs must be an integer >= 1, got {jobs!r}")
    if not isinstance(controller, str) or not controller:
        raise MisalignmentError(f"controller must be a controller name or 'held', got {controller!r}")
    try:
        reg = Registration(tuple(offset_m))
    except (TypeError, ValueError) as e:
        raise MisalignmentError(f"offset_m: {e}") from e
    if girdle is not None:
        scenario = dataclasses.replace(scenario, subject=dataclasses.replace(scenario.human, girdle=bool(girdle)))
    fl, ab = _axis("flexion_rad", flexion_rad), _axis("abduction_rad", abduction_rad)
    tasks = [MisalignmentTask(i * len(fl) + j, scenario, f, a, reg.misalignment_m, controller)
             for i, a in enumerate(ab) for j, f in enumerate(fl)]
    t0 = time.perf_counter()
    per, executor = map_in_order(map_cell, tasks, jobs=jobs, dask_address=dask_address, error=MisalignmentError)
    return MisalignmentMap(cells=tuple(c for cells in per for c in cells), scenario_name=scenario.name,
                           offset_m=reg.misalignment_m, girdle=scenario.human.girdle, controller=controller,
                           flexion_rad=fl, abduction_rad=ab, elapsed_s=time.perf_counter() - t0,
                           executor=executor)


def worst_cells(result: MisalignmentMap, *, steady_only: bool = True) -> dict[str, MisalignmentCell]:
    """Per cuff, the cell of the largest parasitic force (the first in grid order on a tie), among the steady
    cells (all of them with ``steady_only=False``); a cuff without a steady cell is left out."""
    out: dict[str, MisalignmentCell] = {}
    for c in result.cells:
        if steady_only and not c.steady:
            continue
        if c.cuff not in out or c.parasitic_force_N > out[c.cuff].parasitic_force_N:
            out[c.cuff] = c
    return out


def write_misalignment(result: MisalignmentMap, out_dir: str | Path) -> dict[str, Path]:
    """Write ``misalignment.csv`` (every cell and cuff), ``misalignment.png`` and ``report.md``."""
    from sim.analysis.tables import write_text
    from sim.output.misalignment_plot import plot_misalignment
    from sim.output.report import CAUTION, fmt, markdown_table

    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    csv_path = out / "misalignment.csv"
    with csv_path.open("w", newline="", encoding="utf-8") as f:
        w = csv.writer(f)
        w.writerow(CSV_COLUMNS)
        for c in result.cells:
            w.writerow([repr(round(math.degrees(c.flexion_rad), 9)), repr(round(math.degrees(c.abduction_rad), 9)),
                        c.cuff] + [repr(getattr(c, k)) for k in CSV_COLUMNS[3:-1]] + [str(c.steady).lower()])
    d_mm = ", ".join(f"{1e3 * x:g}" for x in result.offset_m)
    how = ("the robot held at the posture matching the wearer's segments (static cuff law)"
           if result.controller == "held" else f"the robot under {result.controller!r}")
    png = plot_misalignment(result.cells, out / "misalignment.png",
                            title=f"{result.scenario_name}: parasitic cuff force of a ({d_mm}) mm offset, {how}, "
                                  f"girdle {'on' if result.girdle else 'off'}")
    worst = worst_cells(result)
    rows = [[name, f"{math.degrees(c.flexion_rad):g}", f"{math.degrees(c.abduction_rad):g}",
             fmt(c.parasitic_force_N), fmt(c.parasitic_torque_Nm), fmt(c.force_N), fmt(c.force0_N),
             fmt(c.torque_Nm), fmt(c.torque0_Nm)] for name, c in worst.items()]
    unsteady = sorted({(c.flexion_rad, c.abduction_rad) for c in result.cells if not c.steady})
    n_post = len(result.flexion_rad) * len(result.abduction_rad)
    if unsteady:
        listed = ", ".join(f"({math.degrees(f):g}, {math.degrees(a):g})" for f, a in unsteady)
        steadiness = (f"{len(unsteady)} of {n_post} postures did not settle (held: no robot posture lines up "
                      f"within its joint limits; simulated: a cuff's mean force changed by more "
                      f"than {STEADY_DRIFT_N:g} N between the halves of the window: the robot wanders under the "
                      f"load); they are left out of the worst cells, hatched on the map and marked steady = false "
                      f"in the CSV: (flexion, abduction) deg = {listed}.")
    else:
        steadiness = (f"Every posture settled (each cuff's mean force changed by at most {STEADY_DRIFT_N:g} N "
                      "between the halves of the window).")
    method = ("the robot held rigidly at the posture that lines its segments up with the wearer's, the wearer "
              "exactly at the cell's posture: the static cuff law" if result.controller == "held" else
              f"per cell a coupled run of {START_HOLD_S + MOVE_S + SETTLE_S:g} s: the wearer relaxed and moved "
              f"passively by a stiff holder (no feed-forward) from the reference posture to the cell's in "
              f"{MOVE_S:g} s and held, the robot under {result.controller!r}; the steady wrench is the mean of "
              f"the wrench on the wearer over the last {AVERAGE_S:g} s")
    text = [f"# Misalignment map: {result.scenario_name}", "", CAUTION, "",
            f"Offset of the wearer's joint centres from the robot's: ({d_mm}) mm in the robot's base frame; "
            f"shoulder girdle {'on' if result.girdle else 'off'}. The cuffs are closed at the reference posture "
            f"(the scenario's start), where they carry no load whatever the offset. Method: {method}. Grid: the "
            f"wearer's own gh flexion x gh abduction (not the ISB plane of elevation x elevation), the other "
            f"joints at the reference posture. {len(result.cells)} cells in {result.elapsed_s:.1f} s "
            f"({result.executor}).", "",
            "Parasitic force and torque: the norms of the difference between the mean wrench with the offset "
            "and with zero offset (same cuff, same posture, same frame).", "",
            steadiness, "",
            "## Worst steady cell per cuff", "",
            markdown_table(["cuff", "flexion deg", "abduction deg", "parasitic force N", "parasitic torque N m",
                            "force N (offset)", "force N (no offset)", "torque N m (offset)",
                            "torque N m (no offset)"], rows), "",
            f"![misalignment map]({png.name})", "",
            "Cautions: the holder stands for a relaxed arm moved by someone else, not for muscles; the cuff "
            "stiffness is one published median (Schiebl et al. 2025, Sensors 25(15):4605), real soft tissue is "
            "nonlinear and varies between wearers; the zero-offset force is what the robot's controller and "
            "gravity compensation leave (with the girdle on, also the girdle's own motion of the shoulder centre, "
            "which the robot's fixed shoulder cannot follow), the parasitic part is the offset's own. With the "
            "girdle on, the coupled run under the stiff holder also chatters at the sampling rate (zero-mean, "
            "averaged out) and, at larger abduction, the robot keeps wandering: those cells are not steady.", "",
            "Cells: misalignment.csv. Reference: Schiele A., van der Helm F.C.T. (2006), IEEE TNSRE 14(4):456-469."]
    report = out / "report.md"
    write_text(report, "\n".join(text) + "\n")
    return {"csv": csv_path, "png": png, "report": report}
