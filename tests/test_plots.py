"""The figures of run and comparison reports (sim/output/figures.py, sim/output/plots.py).

Short cuts of the shipped scenarios (reach, wall_push, limit_approach: each
cut just after its first movement meets what the figure is about) run once per
module under the ``walls`` variant; each figure is checked to be written and
not blank where it applies, and to be left out where it does not.  The
braking curve is checked against constant-deceleration kinematics (textbook
closed form :math:`v^2 = 2 a d`, e.g. Halliday, Resnick & Walker,
*Fundamentals of Physics*, ch. 2) and against a numerical integration of the
same motion with ``scipy.integrate.solve_ivp``.
"""

from __future__ import annotations

import dataclasses
import math
import shutil
from pathlib import Path
from types import SimpleNamespace

import numpy as np
import pytest

from sim.analysis.metrics import MassFit
from sim.experiments.run import run_scenario
from sim.loop.runlog import load_run
from sim.loop.scenario import load_scenario
from sim.output import figures, plots
from sim.output.report import compare_runs

REPO = Path(__file__).resolve().parents[1]
#: Cut durations [s]: reach moves from 0.3 s, wall_push enters the wall at about 1.0 s, limit_approach meets
#: its elbow stop at about 0.8 s (the scenarios' own intents).
CUTS = {"reach": 0.9, "wall_push": 1.6, "limit_approach": 1.0}


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    """Folder of each cut scenario run under ``walls`` (coupled run, baseline, metrics, report)."""
    root = tmp_path_factory.mktemp("plots")
    out = {}
    for name, cut in CUTS.items():
        scenario = dataclasses.replace(load_scenario(REPO / "scenarios" / f"{name}.py"), duration_s=cut)
        run_scenario(scenario, "walls", root / name)
        out[name] = root / name
    return out


def _not_blank(png: Path) -> None:
    import matplotlib.image as mpimg

    img = mpimg.imread(png)
    assert img.ndim == 3 and img.shape[0] > 200 and img.shape[1] > 300, png
    assert float(np.var(img[..., :3])) > 1e-3, f"{png.name} looks blank"


ALWAYS = ("interaction_force", "joint_angles", "hand_path", "joint_torque", "felt_mass_fit")


@pytest.mark.parametrize("name,extra", [("reach", ()), ("wall_push", ("wall_force_penetration",)),
                                        ("limit_approach", ("limit_phase",))])
def test_each_run_report_draws_its_figures_and_links_them(runs, name, extra):
    folder = runs[name]
    report = (folder / "report.md").read_text(encoding="utf-8")
    for stem in ALWAYS + extra:
        png = folder / "plots" / f"{stem}.png"
        assert png.is_file(), f"{name}: no {png.name}"
        _not_blank(png)
        assert f"(plots/{stem}.png)" in report


def test_figures_that_do_not_apply_are_skipped_with_a_reason(runs):
    reach = load_run(runs["reach"])
    plan = figures.run_figure_plan(reach)
    assert plan["wall_force_penetration"] == "the scenario has no plane wall"
    assert not (runs["reach"] / "plots" / "wall_force_penetration.png").exists()
    # no robot joint of the reach comes within 5 deg of a stop: no phase plot
    arm_lo, arm_hi = _limits(runs["reach"])
    assert figures.limit_approach(reach["q_exo"], arm_lo, arm_hi) == []
    assert plan["limit_phase"] == "no robot joint comes within 5 deg of a stop"
    assert not (runs["reach"] / "plots" / "limit_phase.png").exists()
    # a log without the robot's joints (a human-alone run) has no torque or phase plot to draw
    alone = load_run(runs["reach"] / "human_alone")
    plan = figures.run_figure_plan(alone)
    assert {"joint_torque", "limit_phase", "interaction_force", "hand_path"} <= set(plan)


def _limits(folder: Path):
    """The robot's position limits [rad] from the run folder's own model."""
    from models.arm import load_arm

    return load_arm((folder / "exo.urdf").read_text(encoding="utf-8")).position_limits()


def test_the_wall_push_force_plot_shades_the_contact_and_the_hand_path_draws_the_wall(runs, monkeypatch, tmp_path):
    calls = {}
    for fn in ("force_over_time", "hand_path", "joint_angles"):
        real = getattr(plots, fn)

        def spy(*a, _real=real, _fn=fn, **k):
            calls[_fn] = (a, k)
            return _real(*a, **k)

        monkeypatch.setattr(plots, fn, spy)
    run = load_run(runs["wall_push"])
    figures.run_figures(run, run.metrics, tmp_path)
    spans = calls["force_over_time"][1]["shaded"]
    assert spans, "the hand enters the wall in the cut wall_push, so a contact period is shaded"
    pen = run["p_hand_human"][:, 0] - 0.52  # scenarios/wall_push.py: plane x = 0.52 m for m50, normal +x
    t = run["t"]
    assert spans[0][0] == pytest.approx(t[np.argmax(pen > 0)])
    assert calls["hand_path"][1]["walls"] == [([0.52, 0.0, 0.0], [1.0, 0.0, 0.0])]
    # the wall's normal axis (x) is in both views, so the plane shows as a line in each
    views = calls["hand_path"][0][1]
    assert all(0 in v for v in views) and len({tuple(v) for v in views}) == 2
    labels = list(calls["joint_angles"][0][0])
    assert labels == ["intended (scripted target)", "wearer with the robot", "wearer alone (baseline run)"]
    # the intent is the scripted one: at t = 0 the wall_push start posture READY = (60, 0, 0, 80, 0, 0, 0) deg
    np.testing.assert_allclose(calls["joint_angles"][0][0]["intended (scripted target)"][1][0],
                               [60, 0, 0, 80, 0, 0, 0], atol=1e-9)


def test_without_a_baseline_folder_the_wearer_alone_line_is_left_out_with_a_note(runs, tmp_path, monkeypatch):
    folder = tmp_path / "no_baseline"
    shutil.copytree(runs["reach"], folder, ignore=shutil.ignore_patterns("human_alone", "plots"))
    seen = {}
    real = plots.joint_angles

    def spy(series, *a, **k):
        seen["labels"], seen["note"] = list(series), k.get("note")
        return real(series, *a, **k)

    monkeypatch.setattr(plots, "joint_angles", spy)
    run = load_run(folder)
    paths = figures.run_figures(run, run.metrics, folder)
    assert "wearer alone (baseline run)" not in seen["labels"] and "human_alone" in seen["note"]
    assert folder / "plots" / "joint_angles.png" in paths
    _not_blank(folder / "plots" / "joint_angles.png")


def test_braking_curve_is_the_constant_deceleration_stop_and_bounds_the_limit_approach(runs):
    from scipy.integrate import solve_ivp

    a, margin, stop = 20.0, 0.02, 2.53
    q, v = figures.braking_curve(stop, margin, a, 1.0, n=50)
    edge = stop - margin
    np.testing.assert_allclose(v, np.sqrt(2 * a * (edge - q)), rtol=1e-12)  # v^2 = 2 a d
    for qk, vk in zip(q[::10], v[::10]):  # decelerate at a from (q, v): it comes to rest at the edge
        if vk <= 0:
            continue
        sol = solve_ivp(lambda _t, y: [y[1], -a], (0.0, vk / a), [qk, vk], rtol=1e-10, atol=1e-12)
        assert sol.y[0, -1] == pytest.approx(edge, abs=1e-9) and sol.y[1, -1] == pytest.approx(0.0, abs=1e-9)
    ql, vl = figures.braking_curve(-1.0, margin, a, 0.5, upper=False, n=50)  # the lower stop: the mirror image
    np.testing.assert_allclose(vl, -np.sqrt(2 * a * (ql - (-1.0 + margin))), rtol=1e-12)
    # the task's parameters of the shipped walls variant are its defaults (controllers/tasks/joints.py)
    run = load_run(runs["limit_approach"])
    a_task, m_task, source = figures.position_limit_task(run.meta)
    assert (a_task, m_task) == (20.0, 0.02) and "walls" in source
    # the elbow of the limit approach under walls keeps (nearly) inside the curve as it closes on its stop
    lo, hi = _limits(runs["limit_approach"])
    near = {j: (upper, dist) for j, upper, dist in figures.limit_approach(run["q_exo"], lo, hi)}
    j = 3  # the elbow (models/exo.py EXO_JOINTS), the joint scenarios/limit_approach.py drives to its stop
    assert j in near and near[j][0] and near[j][1] < math.radians(5.0)
    qj, vj = run["q_exo"][:, j], run["dq_exo"][:, j]
    near = (qj > hi[j] - math.radians(20.0)) & (qj < hi[j] - m_task)
    bound = np.sqrt(2 * a_task * (hi[j] - m_task - qj[near]))
    assert np.all(vj[near] <= bound + 0.1)  # 0.1 rad/s: one tick of the position bound's discretisation, our choice


def test_a_long_title_is_wrapped_inside_the_figure(tmp_path, monkeypatch):
    import matplotlib.figure
    from matplotlib.text import Text

    outside = []
    real = matplotlib.figure.Figure.savefig

    def check(fig, *a, **k):
        fig.canvas.draw()
        r = fig.canvas.get_renderer()
        box = fig.bbox
        ticks = {id(t) for ax in fig.axes for t in ax.get_xticklabels() + ax.get_yticklabels()}
        texts = [t for t in fig.findobj(Text) if id(t) not in ticks and (t.axes is None or t.axes.get_visible())]
        assert any(t.get_text() == fig.get_suptitle() for t in texts), "the figure has a title"
        for txt in texts:
            if not txt.get_visible() or not txt.get_text():
                continue
            e = txt.get_window_extent(r)
            if e.x0 < box.x0 - 1 or e.x1 > box.x1 + 1 or e.y0 < box.y0 - 1 or e.y1 > box.y1 + 1:
                outside.append(txt.get_text())
        return real(fig, *a, **k)

    monkeypatch.setattr(matplotlib.figure.Figure, "savefig", check)
    long = ("a_very_long_scenario_name_for_the_upper_limb_clinic_protocol_number_seven / "
            "my_prioritised_controller_with_walls_and_limits_v2: joint angles of the wearer")
    t = np.linspace(0.0, 1.0, 50)
    q = np.degrees(np.column_stack([np.sin(t + k) for k in range(7)]))
    png = plots.joint_angles({"intended": (t, q), "with robot": (t, q + 1)}, [f"joint {k}" for k in range(7)],
                             tmp_path / "long.png", title=long, note="a note under the panels")
    plots.force_over_time({"all cuffs": (t, np.abs(q[:, 0]))}, tmp_path / "force.png", title=long * 2,
                          shaded=[(0.2, 0.4)])
    assert not outside, f"text outside the figure: {outside}"
    _not_blank(png)
    assert "\n" in plots.wrap_title(long, 8.0)


def test_mass_scatter_draws_an_accepted_a_rejected_and_an_empty_fit(tmp_path):
    rng = np.random.default_rng(3)
    acc = rng.uniform(-3.0, 3.0, 500)
    accepted = MassFit(mass_kg=1.5, fitted_kg=1.5, r2=0.98, ci95_kg=0.02, n_samples=500, reason=None, acc_m_s2=acc,
                       force_N=1.5 * acc + 0.2 + rng.normal(0, 0.1, 500), intercept_N=0.2)
    rejected = MassFit(mass_kg=None, fitted_kg=0.01, r2=0.001, ci95_kg=0.1, n_samples=500, reason="R² below 0.5",
                       acc_m_s2=acc, force_N=rng.normal(0, 1.0, 500), intercept_N=0.0)
    # any object with the fields will do (the drawing reads them by name)
    empty = SimpleNamespace(acc_m_s2=np.zeros(0), force_N=np.zeros(0), fitted_kg=None, intercept_N=None, r2=None,
                            ci95_kg=None, mass_kg=None, n_samples=0, reason="fewer than 50 moving ticks")
    png = plots.mass_scatter({"walls": accepted, "zero": rejected, "still": empty}, tmp_path / "fit.png",
                             title="felt mass at the hand")
    _not_blank(png)


def test_the_run_reports_felt_mass_fit_is_the_metric_s_fit(runs, monkeypatch, tmp_path):
    seen = {}
    real = plots.mass_scatter

    def spy(fits, *a, **k):
        seen.update(fits)
        return real(fits, *a, **k)

    monkeypatch.setattr(plots, "mass_scatter", spy)
    run = load_run(runs["reach"])
    figures.run_figures(run, run.metrics, tmp_path)
    fit = seen["walls"]
    assert fit.mass_kg == run.metrics["apparent_mass_hand_kg"]
    assert fit.r2 == run.metrics["apparent_mass_hand_r2"] and fit.reason == run.metrics["apparent_mass_hand_note"]
    if fit.fitted_kg is not None:  # the line drawn is the least-squares line of the points drawn
        slope, icpt = np.polyfit(fit.acc_m_s2, fit.force_N, 1)
        assert slope == pytest.approx(fit.fitted_kg, rel=1e-6) and icpt == pytest.approx(fit.intercept_N, abs=1e-6)


def test_compare_draws_the_joint_angles_hand_paths_and_limit_phase_of_every_run(runs, tmp_path):
    scenario = dataclasses.replace(load_scenario(REPO / "scenarios" / "limit_approach.py"),
                                   duration_s=CUTS["limit_approach"])
    run_scenario(scenario, "zero", tmp_path / "zero", report=False)
    _, labels, md = compare_runs([runs["limit_approach"], tmp_path / "zero"], tmp_path / "cmp")
    text = md.read_text(encoding="utf-8")
    for stem in ("interaction_force", "joint_angles", "hand_path", "limit_phase", "felt_mass", "felt_mass_fit",
                 "solve_time"):
        png = tmp_path / "cmp" / "plots" / f"{stem}.png"
        assert png.is_file(), stem
        _not_blank(png)
        assert f"(plots/{stem}.png)" in text
    assert labels == ["walls", "zero"]


def test_the_envelope_thins_a_long_series_and_keeps_every_bucket_extreme():
    # min-max decimation (common practice): each bucket of consecutive ticks keeps its smallest and largest sample;
    # checked against the buckets computed one by one, and a one-tick spike survives
    from sim.output.plots import envelope

    rng = np.random.default_rng(3)
    t = np.arange(60_001) * 1e-3
    y = np.cumsum(rng.normal(size=t.size))
    y[12_345] += 500.0
    tt, yy = envelope(t, y, max_points=4000)
    assert len(yy) <= 4000 and np.all(np.diff(tt) > 0)
    assert yy.max() == y.max() == y[12_345] and yy.min() == y.min()
    size = -(-len(y) // 2000)
    for b in range(0, len(y) // size, 97):  # whole buckets of samples (the last ones are padding)
        chunk = slice(b * size, min((b + 1) * size, len(y)))
        kept = yy[(tt >= t[chunk][0]) & (tt <= t[chunk][-1])]
        assert kept.max() == y[chunk].max() and kept.min() == y[chunk].min()
    short_t, short_y = envelope(t[:100], y[:100])
    assert short_y is not None and np.array_equal(short_y, y[:100]) and np.array_equal(short_t, t[:100])
