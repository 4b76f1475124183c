"""What the reports say about a controller and the rules their comparisons follow.

* ``Controller.structure()`` on the shipped variants and on a user's task (against the variants' definitions
  in :mod:`controllers.registry` and the tasks' signatures, read with :mod:`inspect`);
* the HQP controller's per-level diagnostics (active, binding, solved by the QP backend) on a stack built to
  have a level that cannot be met below a higher one, its residual against the level-by-level cvxpy
  reference (:func:`sim.experiments.lexicographic.cvxpy_lexicographic`, Clarabel; Kanoun, Lamiraux & Wieber
  2011);
* the comparison rules of :mod:`sim.output.report` on small made-up tables: no timing row is marked better,
  rows that do not apply are n/a, tied variants are level, no "± 0", one rule of significant digits;
* the run report's Controller section and its level timeline, on a short run.
"""

from __future__ import annotations

import inspect
import json

import numpy as np
import pytest

import models
from controllers.base import ControllerContext
from controllers.hqp import HQPController, HQPParams
from controllers.registry import make_controller
from controllers.tasks import JointDamping, JointPositionLimits, JointVelocityLimits, PlaneWall, Task, Transparency
from controllers.tasks.base import constant_rows, q_rows
from models.records import Measurement
from sim.experiments.sweep import CaseResult, SweepCase, summarize
from sim.output.report import (
    comparison_rows,
    fmt_stat,
    headline,
    is_applicable,
    renders_wall,
    summary_cells,
    sweep_verdicts,
    variant_differences,
)

WALL = ("wall_plane", {"point_m": (0.40, 0.0, 0.0), "normal": (2.0, 0.0, 0.0), "law": (600.0, 5.0)})
CUFFS = {"upper_arm": "exo_cuff_upper_arm", "forearm": "exo_cuff_forearm", "hand": "exo_cuff_hand"}


# -- structure() -------------------------------------------------------------------------------------------
def _defaults(cls) -> dict:
    """The defaults of a task class's __init__ (inspect: independent of Task.params)."""
    return {p.name: p.default for p in list(inspect.signature(cls.__init__).parameters.values())[1:]
            if p.default is not inspect.Parameter.empty}


def test_structure_of_the_shipped_variants_lists_their_levels_tasks_and_parameters():
    zero, gravity = make_controller("zero").structure(), make_controller("gravity").structure()
    assert zero["type"] == "ZeroTorque" and zero["levels"] == [] and zero["description"]
    assert gravity["type"] == "GravityCompensation" and gravity["levels"] == []
    walls = make_controller("walls", walls=[WALL]).structure()
    json.dumps(walls, allow_nan=False)  # plain JSON, as meta.json holds it
    assert walls["type"] == "HQPController" and walls["name"] == "walls"
    # the levels of controllers.registry._walls, highest first
    assert [[t["type"] for t in level["tasks"]] for level in walls["levels"]] == [
        ["JointPositionLimits", "JointVelocityLimits"], ["PlaneWall"], ["Transparency"], ["JointDamping"]]
    assert [level["level"] for level in walls["levels"]] == [0, 1, 2, 3]
    by_type = {t["type"]: t for level in walls["levels"] for t in level["tasks"]}
    for cls in (JointPositionLimits, JointVelocityLimits, Transparency, JointDamping):
        t = by_type[cls.__name__]
        assert t["name"] == cls.name and t["kind"] == cls.kind
        expected = {k: v for k, v in _defaults(cls).items() if k != "weight"}
        assert t["params"] == expected and t["weight"] == _defaults(cls)["weight"]
    wall = by_type["PlaneWall"]
    assert wall["bases"] == ["WallTask", "HandPointTask"] and wall["kind"] == "eq"
    assert wall["params"]["point_m"] == [0.40, 0.0, 0.0] and wall["params"]["normal"] == [1.0, 0.0, 0.0]  # unit
    assert wall["params"]["law.stiffness_N_per_m"] == 600.0 and wall["params"]["law.damping_N_s_per_m"] == 5.0
    assert wall["params"]["frame"] == _defaults(PlaneWall)["frame"]
    transparent = make_controller("transparent").structure()
    assert [[t["name"] for t in level["tasks"]] for level in transparent["levels"]] == [["transparency"], ["damping"]]


class _Unkept(Task):
    """A user's task that keeps its arguments under other names, with a private and an odd attribute."""

    name, kind = "my_task", "eq"

    def __init__(self, gain, target):
        self.k = float(gain)
        self.target = np.array(target, dtype=float)
        self._secret = 1
        self.helper = object()

    def rows(self, state):
        return None


class _Bare(Task):
    """A user's task without an __init__ of its own; its attributes set from outside."""

    name, kind = "bare", "ineq"

    def rows(self, state):
        return None


def test_structure_of_a_users_task_shows_what_can_be_shown():
    bare = _Bare()
    bare.limit_rad = 0.3
    c = HQPController([[_Unkept(2.0, [1, 2, 3])], [bare, JointDamping(0.5, weight=0.01)]], name="mine")
    s = c.structure()
    json.dumps(s, allow_nan=False)
    mine, b, damping = s["levels"][0]["tasks"][0], *s["levels"][1]["tasks"]
    assert mine["name"] == "my_task" and mine["type"] == "_Unkept" and mine["bases"] == []
    # "gain" is not kept by name: the public attributes are shown instead, the private one is not
    assert mine["params"]["k"] == 2.0 and mine["params"]["target"] == [1.0, 2.0, 3.0]
    assert "_secret" not in mine["params"] and mine["params"]["helper"].startswith("<object object")
    assert b["params"] == {"limit_rad": 0.3} and b["kind"] == "ineq"
    assert damping["params"] == {"time_constant_s": 0.5} and damping["weight"] == 0.01


# -- per-level diagnostics ---------------------------------------------------------------------------------
class _FixedRows(Task):
    """Constant rows on q̈ (m, nv) with a constant right-hand side; ``None`` rows: the task is never active."""

    def __init__(self, name, kind, rows_q, rhs, weight=1.0):
        self.name, self.kind, self.weight = name, kind, weight
        self.rows_q = None if rows_q is None else np.atleast_2d(np.asarray(rows_q, dtype=float))
        self.rhs = np.atleast_1d(np.asarray(rhs, dtype=float))

    def bind(self, state):
        self._A = None if self.rows_q is None else constant_rows(q_rows(state.nv, self.rows_q))

    def rows(self, state):
        return None if self._A is None else (self._A, self.rhs.copy())


def _stack(nv=7):
    e = np.eye(nv)
    return [[_FixedRows("cap", "ineq", e[0], 0.5)],  # q̈0 <= 0.5
            [_FixedRows("want", "eq", e[0], 1.0, weight=2.0)],  # q̈0 = 1: impossible below the cap
            [_FixedRows("free", "eq", e[1], 2.0)],  # q̈1 = 2: met
            [_FixedRows("idle", "eq", None, 0.0)]]  # no rows


def _measurement(arm):
    lo, hi = arm.position_limits()
    return Measurement(0.0, (lo + hi) / 2, np.zeros(7), np.zeros(7), {c: np.zeros(6) for c in CUFFS})


@pytest.mark.parametrize("eliminate", [True, False])
def test_a_level_that_cannot_be_met_below_a_higher_one_is_binding_with_the_cvxpy_residual(eliminate):
    from sim.experiments.lexicographic import controller_rows, cvxpy_lexicographic

    arm = models.build_exo()
    ctx = ControllerContext(arm=arm, cuff_frames=CUFFS)
    c = HQPController(_stack(), eliminate_torque=eliminate)
    c.reset(ctx)
    m = _measurement(arm)
    c.step(m)
    d = c.diagnostics()
    assert [d[f"active_{i}"] for i in range(4)] == [1.0, 1.0, 1.0, 0.0]
    # the cap sits at its bound (it holds back the level below), "want" is not met, "free" is met
    assert [d[f"binding_{i}"] for i in range(4)] == [1.0, 1.0, 0.0, 0.0]
    # the independent reference: the same rows, level by level in cvxpy, below the dynamics and torque limits
    rows = controller_rows(c, m)
    n = arm.nv
    dyn = (np.hstack([rows.M, -np.eye(n)]), rows.cuff_force - rows.h)
    limits = (np.hstack([np.zeros((2 * n, n)), np.vstack([np.eye(n), -np.eye(n)])]), np.concatenate([rows.tau_max] * 2))
    _, costs = cvxpy_lexicographic(rows.levels, 2 * n, [limits], hard_eq=[dyn], objectives=True)
    # residual_i: the weighted squared error, 2 * (1 - 0.5)^2 = 0.5 for "want" (also by hand)
    assert d["residual_1"] == pytest.approx(costs[1], abs=1e-6) and costs[1] == pytest.approx(0.5, abs=1e-6)
    assert d["residual_0"] == pytest.approx(costs[0], abs=1e-6) and d["residual_2"] == pytest.approx(0, abs=1e-9)
    # the closed form and the active-set step finish every level: no level went to the QP backend
    assert [d[f"qp_{i}"] for i in range(4)] == [0.0] * 4


def test_levels_sent_to_the_qp_backend_are_flagged_and_a_fallback_tick_gives_nan():
    arm = models.build_exo()
    ctx = ControllerContext(arm=arm, cuff_frames=CUFFS)
    # without the closed form and the active-set step, every level with rows and freedom goes to the backend
    # (HQPParams' documented switches)
    c = HQPController(_stack(), params=HQPParams(closed_form=False, working_set_step=False))
    c.reset(ctx)
    c.step(_measurement(arm))
    d = c.diagnostics()
    assert [d[f"qp_{i}"] for i in range(4)] == [1.0, 1.0, 1.0, 0.0]
    assert d["qp_solves"] >= 3 and [d[f"binding_{i}"] for i in range(4)] == [1.0, 1.0, 0.0, 0.0]
    c.reset(ctx)
    bad = Measurement(0.0, np.full(7, np.nan), np.zeros(7), np.zeros(7), {k: np.zeros(6) for k in CUFFS})
    c.step(bad)  # the dynamics terms are not finite: the safe fallback
    d = c.diagnostics()
    assert d["fallback"] == 1.0 and all(np.isnan(d[f"{k}_{i}"]) for k in ("active", "binding", "qp")
                                        for i in range(4))
    assert set(c.diagnostic_names()) >= {f"{k}_{i}" for k in ("active", "binding", "qp") for i in range(4)}


# -- comparison rules on made-up tables --------------------------------------------------------------------
def _meta(*levels):
    return {"controller_structure": {"type": "HQPController", "levels": [
        {"level": i, "tasks": [{"name": n, "type": t, "kind": "eq", "weight": 1.0, "params": p, "bases": b}
                               for n, t, p, b in tasks]} for i, tasks in enumerate(levels)]}}


WALLS_META = _meta([("joint_limits", "JointPositionLimits", {}, [])],
                   [("wall_plane", "PlaneWall", {"law.stiffness_N_per_m": 600.0}, ["WallTask"])],
                   [("transparency", "Transparency", {"inertia_compensation": 0.5}, [])])
TRANSPARENT_META = _meta([("transparency", "Transparency", {"inertia_compensation": 0.3}, [])],
                         [("damping", "JointDamping", {}, [])])
GRAVITY_META = {"controller_structure": {"type": "GravityCompensation", "levels": [], "description": "g(q)"}}


def test_renders_wall_reads_the_controller_structure():
    assert renders_wall(WALLS_META) and not renders_wall(TRANSPARENT_META) and not renders_wall(GRAVITY_META)
    # a user's wall: its class derives from WallTask, or, classes unrecorded, its name says so
    assert renders_wall(_meta([("fence", "Fence", {}, ["PlaneWall", "WallTask"])]))
    assert renders_wall(_meta([("wall_mine", "Mine", {}, [])]))
    assert renders_wall({"scenario": "old run"})  # no structure recorded: shown as before


def test_rows_that_do_not_apply_are_na_and_timing_rows_are_never_marked():
    walls = {"interaction_force_rms_N": 5.0, "wall_penetration_max_m": 0.006, "wall_bounce_count": 0,
             "apparent_mass_hand_kg": None, "apparent_mass_hand_note": "too few samples",
             "hqp_solve_median_us": 30.0, "realtime_factor": 2.0,
             "hqp_levels": [{"level": 0, "solve_median_us": 2.0}, {"level": 2, "solve_median_us": 4.0}]}
    transparent = {"interaction_force_rms_N": 4.0, "wall_penetration_max_m": 0.05, "wall_bounce_count": 3,
                   "apparent_mass_hand_kg": 1.2, "hqp_solve_median_us": 10.0, "realtime_factor": 9.0,
                   "hqp_levels": [{"level": 0, "solve_median_us": 1.0}]}
    rows = {r["key"]: r for r in comparison_rows(["walls", "transparent"], [walls, transparent],
                                                 [WALLS_META, TRANSPARENT_META])}
    # the variant without a wall has no wall rows: nothing to mark (it would otherwise lose on penetration)
    assert rows["wall_penetration_max_m"]["transparent"] is None and rows["wall_penetration_max_m"]["best"] == ""
    assert rows["wall_bounce_count"]["transparent"] is None and rows["wall_bounce_count"]["walls"] == 0
    # a null felt mass marks nothing; its note is not a table row
    assert rows["apparent_mass_hand_kg"]["best"] == "" and "apparent_mass_hand_note" not in rows
    # level 0 holds different tasks: n/a for both; level 2 exists in one stack only
    assert rows["hqp_levels.0.solve_median_us"]["walls"] is None
    assert rows["hqp_levels.0.solve_median_us"]["transparent"] is None
    assert rows["hqp_levels.2.solve_median_us"]["walls"] == 4.0
    # timing rows: shown, never marked
    for k in ("hqp_solve_median_us", "realtime_factor", "hqp_levels.2.solve_median_us"):
        assert rows[k]["best"] == ""
    assert rows["hqp_solve_median_us"]["transparent"] == 10.0
    assert rows["interaction_force_rms_N"]["best"] == "transparent"  # a row that applies is still marked
    assert not is_applicable("hqp_levels.3.solve_median_us", {"hqp_levels.3.solve_median_us": 1.0}, WALLS_META)
    # the same stacks at level 0: comparable
    same = comparison_rows(["a", "b"], [{"hqp_levels": [{"level": 0, "solve_median_us": 1.0}]},
                                        {"hqp_levels": [{"level": 0, "solve_median_us": 2.0}]}],
                           [TRANSPARENT_META, TRANSPARENT_META])
    assert same[0]["a"] == 1.0 and same[0]["b"] == 2.0 and same[0]["best"] == ""


def test_what_differs_names_the_tasks_and_the_parameters_that_differ():
    text = "\n".join(variant_differences(["walls", "transparent", "gravity"],
                                         [WALLS_META, TRANSPARENT_META, GRAVITY_META]))
    assert "## What differs between the variants" in text
    assert "- `walls`: [joint_limits] > [wall_plane] > [transparency]" in text
    assert "- `gravity`: GravityCompensation: g(q)" in text
    assert "- wall_plane: only in `walls`" in text and "- damping: only in `transparent`" in text
    # transparency: level 2 against 0, inertia compensation 0.5 against 0.3
    assert "| transparency | inertia_compensation | 0.5 | 0.3 | — |" in text
    assert "| transparency | level | 2 | 0 | — |" in text


def _summary_row(controller, n_ok=3, **values):
    row = {"controller": controller, "subject": "all", "n_ok": n_ok, "n_failed": 0}
    for k, (mean, std) in values.items():
        row[f"{k}_mean"], row[f"{k}_std"] = mean, std
    return row


def test_sweep_tables_mark_no_timing_key_and_print_no_plus_minus_zero():
    summary = [_summary_row("a", 1, interaction_force_rms_N=(8.4337, 0.0), hqp_solve_median_us=(10.0, 0.0)),
               _summary_row("b", 1, interaction_force_rms_N=(9.1, None), hqp_solve_median_us=(30.0, None))]
    _, cells = summary_cells(summary, ["interaction_force_rms_N", "hqp_solve_median_us"])
    assert cells[0][4] == "**8.434**" and cells[1][4] == "9.1"  # one run: the value alone, 4 digits
    assert cells[0][5] == "10" and cells[1][5] == "30"  # timing: never bold
    assert not any("±" in c for row in cells for c in row)
    assert headline(summary, "hqp_solve_median_us") == []
    lines = headline(summary)
    assert lines == ["`a` is better than `b` on interaction force, RMS: 8.434 N against 9.1 N (-7 %), "
                     "over 1 and 1 runs."]


def test_fmt_stat_gives_the_spread_two_significant_digits_and_the_mean_its_last_digit():
    # the rule worked by hand (GUM, JCGM 100:2008, 7.2.6, from memory: at most two significant digits for the
    # uncertainty)
    assert fmt_stat(8.4337, 0.2634) == "8.43 ± 0.26"
    assert fmt_stat(590.2, 5.0, "N/m") == "590.2 ± 5.0 N/m"
    assert fmt_stat(12345.0, 250.0) == "12340 ± 250"
    assert fmt_stat(0.12345, 0.0996) == "0.12 ± 0.10"  # the spread rounds up to the next decade
    assert fmt_stat(7.827, 0.0) == "7.827" and fmt_stat(7.827, None, "N") == "7.827 N" and fmt_stat(None, 1) == "n/a"
    # against Python's own rounding of the spread to 2 significant digits, on many values
    rng = np.random.default_rng(0)
    for mean, std in zip(rng.normal(scale=100.0, size=200), 10.0 ** rng.uniform(-5, 3, size=200)):
        m_text, s_text = fmt_stat(float(mean), float(std)).split(" ± ")
        assert float(s_text) == pytest.approx(float(f"{std:.2g}"), rel=1e-12)
        decimals = len(s_text.split(".")[1]) if "." in s_text else 0
        assert (len(m_text.split(".")[1]) if "." in m_text else 0) == decimals
        assert abs(float(m_text) - mean) <= 0.5 * 10.0 ** -decimals * (1 + 1e-9) or decimals == 0


def test_the_sweep_summary_leaves_out_rows_that_do_not_apply_and_a_tie_outside_the_wall_is_level(tmp_path):
    def result(controller, seed, meta, **metrics):
        folder = tmp_path / controller / f"seed{seed}"
        folder.mkdir(parents=True)
        (folder / "meta.json").write_text(json.dumps(meta), encoding="utf-8")
        return CaseResult(SweepCase("s.py", controller, "m50", seed, str(folder), None), metrics, None, 1.0)

    common = {"interaction_force_free_rms_N": 2.6, "wall_penetration_max_m": 0.0066}
    results = [result("walls", s, WALLS_META, interaction_force_rms_N=2.70, wall_stiffness_rendered_N_per_m=590.0,
                      wall_stiffness_commanded_N_per_m=600.0, **common) for s in range(2)]
    results += [result("transparent", s, TRANSPARENT_META, interaction_force_rms_N=2.69,
                       **{**common, "wall_penetration_max_m": 0.02}) for s in range(2)]
    summary = summarize(results, keys=["interaction_force_rms_N", "interaction_force_free_rms_N",
                                       "wall_penetration_max_m", "wall_stiffness_rendered_N_per_m"])
    overall = {r["controller"]: r for r in summary if r["subject"] == "all"}
    assert overall["transparent"]["wall_penetration_max_m_mean"] is None
    assert overall["walls"]["wall_penetration_max_m_mean"] == 0.0066
    v = sweep_verdicts(summary)
    # both the same outside the wall: level on it, and no verdict on the whole-run force in its place
    assert v["Which is more transparent"] == [
        "`walls` and `transparent` are level on interaction force outside the wall, RMS: 2.6 N and 2.6 N, over "
        "2 and 2 runs."]
    assert "Which renders the wall closest to its commanded stiffness" not in v  # one variant renders it


# -- the run report ----------------------------------------------------------------------------------------
@pytest.fixture(scope="module")
def wall_run(tmp_path_factory):
    from sim.cli import main

    out = tmp_path_factory.mktemp("run") / "walls"
    assert main(["run", "scenarios/limit_approach.py", "--controller", "walls", "--duration", "0.8",
                 "--out", str(out)]) == 0
    return out


def test_the_run_report_has_the_controller_section_and_the_level_timeline(wall_run):
    from sim.loop.runlog import load_run
    from sim.output.report import write_run_report

    meta = json.loads((wall_run / "meta.json").read_text())
    structure = make_controller("walls").structure()
    assert meta["controller_structure"] == json.loads(json.dumps(structure))
    md = (wall_run / "report.md").read_text()
    assert "## Controller" in md and "![level_timeline](plots/level_timeline.png)" in md
    assert "| 0 | joint_limits | JointPositionLimits | ineq | 1 | braking_accel_rad_s2 = 20, margin_rad = 0.02 |" in md
    assert "| level | tasks | active [%] | binding [%] | QP backend [%]" in md and "99th-percentile" in md
    # transparency takes every joint: the damping below it is never met
    assert "- Level 2 (damping) is not met exactly on 100 % of the solved ticks: the levels above it decide" in md
    assert (wall_run / "plots" / "level_timeline.png").stat().st_size > 5000
    # the shares in the table are those of the logged columns
    run = load_run(wall_run)
    binding = np.asarray(run["diag_binding_0"])
    share = 100.0 * np.count_nonzero(binding > 0.5) / np.count_nonzero(np.isfinite(binding))
    line = next(s for s in md.splitlines() if s.startswith("| 0 | joint_limits, velocity_limits |"))
    assert float(line.split("|")[4]) == pytest.approx(share, rel=1e-3)
    # a felt mass the metrics reject: n/a, with the reason
    metrics = {**json.loads((wall_run / "metrics.json").read_text()), "apparent_mass_hand_kg": None,
               "apparent_mass_hand_note": "the hand moved too little for a fit"}
    md2 = write_run_report(wall_run, metrics, run=run).read_text()
    assert "- felt mass at the hand: n/a, the hand moved too little for a fit" in md2
    assert "| apparent_mass_hand_kg | kg | n/a |" in md2


def test_the_across_scenarios_table_of_a_one_seed_sweep_has_no_plus_minus_zero(tmp_path):
    from sim.experiments.sweep import SweepResult
    from sim.output.report import write_sweeps_report

    def part(name, a, b):
        rows = [{**_summary_row("walls", 1, interaction_force_rms_N=(a, 0.0)), "scenario": name},
                {**_summary_row("transparent", 1, interaction_force_rms_N=(b, 0.0)), "scenario": name}]
        return name, SweepResult(tmp_path / name, (), tuple(rows))

    parts = [part("reach", 3.14159, 2.71828), part("throw", 5.0, 5.0)]
    summary = tuple(r for _, p in parts for r in p.summary)
    settings = {"controllers": ["walls", "transparent"], "subjects": ["m50"], "seeds": [0], "executor": "local"}
    md = write_sweeps_report(SweepResult(tmp_path, (), summary), settings, parts).read_text()
    assert "| reach | whole run | 3.142 | **2.718** |" in md
    assert "| throw | whole run | 5 | 5 |" in md  # level: nothing marked
    assert "± 0" not in md and "are level on interaction force, RMS: 5 N and 5 N" in md


def test_compensation_shares_do_not_apply_to_a_variant_that_pushes_toward_a_path():
    # the fit of compensation_shares reads every robot torque as compensation of the robot's own gravity and
    # inertia (the law of the transparency task); a force toward the reference path is neither, so under
    # assist/tunnel the shares are n/a (the rule), while the other rows still apply
    from sim.output.report import follows_path

    tunnel = _meta([("joint_limits", "JointPositionLimits", {}, [])],
                   [("guidance_tunnel", "GuidanceTunnel", {"radius_m": 0.03}, ["_PathTask", "HandPointTask"])],
                   [("transparency", "Transparency", {"inertia_compensation": 0.5}, [])])
    mine = _meta([("my_assist", "MyAssist", {}, ["AssistAsNeeded", "_PathTask"])])
    assert follows_path(tunnel) and follows_path(mine)
    assert not follows_path(TRANSPARENT_META) and not follows_path(WALLS_META) and not follows_path(GRAVITY_META)
    metrics = {"gravity_share_left": -0.1, "inertia_share_left": 0.04, "interaction_force_rms_N": 18.0}
    assert not is_applicable("gravity_share_left", metrics, tunnel)
    assert not is_applicable("inertia_share_left", metrics, mine)
    assert is_applicable("interaction_force_rms_N", metrics, tunnel)
    assert is_applicable("inertia_share_left", metrics, TRANSPARENT_META)
    rows = {r["key"]: r for r in comparison_rows(["tunnel", "transparent"], [metrics, metrics],
                                                 [tunnel, TRANSPARENT_META])}
    assert rows["inertia_share_left"]["tunnel"] is None and rows["inertia_share_left"]["transparent"] == 0.04
