"""Metrics on synthetic signals with known answers, and on runs against physical laws.

Sources of the known answers are named beside each check, by a short key for these:

* Colgate & Schenkel 1997: Colgate J.E., Schenkel G.G. (1997), Passivity of a class of sampled-data systems:
  application to haptic interfaces, J. Robotic Systems 14(1):37-47 (the printed form of the condition from
  memory; the spring and delay terms re-derived for piecewise-constant velocity).
* Diolaiti et al. 2006: Diolaiti N., Niemeyer G., Barbagli F., Salisbury J.K. (2006), IEEE Trans. Robotics
  22(2):256-268 (delay and passivity; their exact form from memory).
* Flash & Hogan 1985: Flash T., Hogan N. (1985), The coordination of arm movements: an experimentally confirmed
  mathematical model, J. Neurosci. 5(7):1688-1703 (pages from memory).
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np
import pytest
from _scenario_files import write_scenario

from sim.analysis.metrics import (
    METRICS,
    apparent_mass_fit,
    apparent_mass_kg,
    compensation_shares,
    flat_metrics,
    force_limit_exceed_count,
    interaction_force_free_rms_N,
    interaction_force_rms_N,
    interaction_power_W,
    interaction_work_J,
    joint_limit_excursion_max_rad,
    rendered_wall_stiffness_N_per_m,
    rest_to_rest,
    solver_metrics,
    wall_bounce_count,
    wall_contacts,
    wall_cycle_energy_returned_J,
)
from sim.experiments.run import evaluate_run
from sim.loop.scenario import load_scenario
from sim.loop.simulate import simulate
from sim.output.report import best_index, best_indices, comparison_rows, headline, sweep_verdicts
from sim.physics.plant import PlantParams

DT = 1e-3


def _min_jerk(t, T, d):
    """Minimum-jerk position, velocity and acceleration from 0 to d in T (Flash & Hogan 1985, closed form)."""
    s = np.clip(t / T, 0.0, 1.0)
    x = d * (10 * s**3 - 15 * s**4 + 6 * s**5)
    v = d / T * (30 * s**2 - 60 * s**3 + 30 * s**4)
    a = d / T**2 * (60 * s - 180 * s**2 + 120 * s**3)
    return x, v, a


# -- walls ----------------------------------------------------------------------------------------
def test_pure_spring_yields_its_stiffness():
    # Hooke's law F = k p on a slow (quasi-static) push: the fitted slope is k
    t = np.arange(0, 4, DT)
    p = 0.03 * np.sin(np.pi * t / 4) - 0.005
    F = np.where(p > 0, 750.0 * p, 0.0)
    assert rendered_wall_stiffness_N_per_m(F, p, DT) == pytest.approx(750.0, rel=1e-9)


def _push_release(T_push=0.6, depth=0.02, hold=0.3, rest=0.2):
    """Hand at rest outside (-5 mm), minimum-jerk in to depth, hold, and back out to rest."""
    seg1 = np.arange(0, rest, DT)
    tm = np.linspace(0.0, T_push, int(round(T_push / DT)) + 1)  # ends exactly at the depth
    x_in, v_in, _ = _min_jerk(tm, T_push, depth + 0.005)
    p = np.concatenate([np.full(len(seg1), -0.005), -0.005 + x_in, np.full(int(hold / DT), depth),
                        depth - x_in, np.full(len(seg1), -0.005)])
    v = np.concatenate([np.zeros(len(seg1)), v_in, np.zeros(int(hold / DT)), -v_in, np.zeros(len(seg1))])
    return p, v


def test_passive_spring_damper_cycle_returns_no_net_energy():
    # F = K p + B dp/dt (p > 0), held over each tick: over a rest-to-rest cycle the spring's energy comes back and
    # the damper dissipates; sampling makes the held spring give back K T / 2 * int v^2 dt more (Colgate & Schenkel
    # 1997, the case d = 0 of b > K T (2d + 1) / 2), so E_returned = -(B - K T / 2) int v^2 dt <= 0 for B > K T/2
    K, B = 800.0, 6.0
    p, v = _push_release()
    F = np.where(p > 0, K * p + B * v, 0.0)
    (a, b), = wall_contacts(p)
    lo, hi = rest_to_rest(np.abs(v), a, b)
    int_v2 = np.sum(np.where(p > 0, v * v, 0.0)) * DT
    e = wall_cycle_energy_returned_J(F, p, lo, hi)
    assert e < 0.0
    assert e == pytest.approx(-(B - K * DT / 2) * int_v2, rel=0.01)
    # the held spring alone is (slightly) active, by K T / 2 * int v^2
    e_spring = wall_cycle_energy_returned_J(np.where(p > 0, K * p, 0.0), p, lo, hi)
    assert e_spring == pytest.approx(K * DT / 2 * int_v2, rel=0.05)


@pytest.mark.parametrize("delay", [0, 1, 2])
def test_delayed_spring_with_piecewise_constant_velocity_is_active_below_the_passivity_bound(delay):
    # Colgate & Schenkel (1997) with a d-sample delay: passive iff b > K T (2d + 1) / 2 (re-derived from their
    # condition; agrees with Diolaiti et al. 2006). Drive with piecewise-constant velocity (the worst case, not a
    # sinusoid), at low frequency.
    K, T = 2000.0, DT
    bound = K * T * (2 * delay + 1) / 2
    n = 4000
    v = 0.05 * np.cos(2 * np.pi * np.arange(n) / 400)  # held over each interval
    p = 0.01 + np.concatenate([[0.0], np.cumsum(v * T)])  # always inside the wall
    energies = {}
    for b in (0.8 * bound, 1.2 * bound):
        F = np.array([K * p[max(k - delay, 0)] + b * v[k] for k in range(n)] + [K * p[n - delay]])
        energies[b] = wall_cycle_energy_returned_J(F, p, 0, n)
    assert energies[0.8 * bound] > 0.0  # active: returns more than it absorbed
    assert energies[1.2 * bound] < 0.0  # passive


def test_bounces_count_makes_soon_after_a_break():
    p = -np.ones(3000)
    p[100:300] = 1.0  # first contact
    p[350:400] = 1.0  # back in after 50 ms: a bounce
    p[1500:1600] = 1.0  # a new push 1.1 s later: not a bounce
    assert wall_contacts(p) == [(100, 299), (350, 399), (1500, 1599)]
    assert wall_bounce_count(p, DT, window_s=0.1) == 1


# -- transparency -----------------------------------------------------------------------------------
@pytest.mark.parametrize("mass", [0.5, 2.0])
def test_known_mass_pushed_by_known_force_yields_that_mass(mass):
    # Newton's second law along a straight, horizontal minimum-jerk path: the force on the hand is -m a
    t = np.arange(0, 1.2, DT)
    x, _, a = _min_jerk(t, 1.0, 0.3)
    u = np.array([0.6, 0.8, 0.0])
    p_hand = x[:, None] * u
    force_on_human = -mass * a[:, None] * u + np.array([0.0, 0.0, 3.0])  # plus a steady offset
    assert apparent_mass_kg(force_on_human, p_hand, DT) == pytest.approx(mass, rel=0.02)


def test_felt_mass_is_not_confused_by_a_felt_weight():
    # a point mass m moved along u needs m (a + g z) . u; a separately felt weight m_g g z . u stays out of m
    t = np.arange(0, 1.2, DT)
    x, _, a = _min_jerk(t, 1.0, 0.3)
    u = np.array([0.6, 0.0, 0.8])
    m, m_g = 1.5, 4.0
    force_on_human = -(m * a[:, None] * u + m_g * 9.81 * np.array([0.0, 0.0, 1.0]))
    assert apparent_mass_kg(force_on_human, x[:, None] * u, DT) == pytest.approx(m, rel=0.02)


#: The push into a wall of the two tests below: mass [kg], wall stiffness [N/m], wall plane along the path [m].
PUSH_MASS_KG, PUSH_WALL_N_PER_M, PUSH_WALL_AT_M = 1.2, 600.0, 0.25


def _push_into_a_wall():
    """A mass pushed 0.3 m in 1 s along u (minimum jerk), into a spring wall 5 cm before the end of the path:
    (t, position along the path, force on the hand, ticks past the wall, u)."""
    t = np.arange(0, 1.2, DT)
    x, _, a = _min_jerk(t, 1.0, 0.3)
    u = np.array([0.6, 0.8, 0.0])
    pen = np.clip(x - PUSH_WALL_AT_M, 0.0, None)
    return t, x, -(PUSH_MASS_KG * a + PUSH_WALL_N_PER_M * pen)[:, None] * u, pen > 0.0, u


def test_felt_mass_leaves_out_the_ticks_inside_a_wall():
    # Newton's second law again, with a spring wall 5 cm before the end of the path: inside it the hand also feels
    # K p against the motion, which a fit over every tick takes for (negative) inertia. Leaving the contact ticks
    # out gives the mass back.
    t, x, force_on_human, inside, u = _push_into_a_wall()
    m = PUSH_MASS_KG
    assert 100 < np.count_nonzero(inside) < len(t) // 2
    fit = apparent_mass_fit(force_on_human, x[:, None] * u, DT)
    with_wall = fit.fitted_kg
    assert abs(with_wall - m) > 0.3  # the wall's spring is mistaken for inertia
    # ... and the fit says so: the slope is rejected with its reason (apparent_mass_fit's rules)
    assert fit.mass_kg is None and apparent_mass_kg(force_on_human, x[:, None] * u, DT) is None and fit.reason
    assert apparent_mass_kg(force_on_human, x[:, None] * u, DT, exclude=inside) == pytest.approx(m, rel=0.02)
    with pytest.raises(ValueError, match="one flag per tick"):
        apparent_mass_kg(force_on_human, x[:, None] * u, DT, exclude=inside[:-1])


def test_free_side_force_is_the_rms_of_the_inertial_force_before_the_wall():
    # the same push as above: outside the wall the hand feels only m a, so the RMS over the free ticks is
    # sqrt(1/t_w * integral_0^t_w (m a)^2 dt), t_w the time the hand reaches the wall. Reference: that integral of
    # the minimum-jerk acceleration (Flash & Hogan 1985) and t_w, both by sympy (exact integral, root by nsolve).
    import sympy as sp

    t, _, force_on_human, past, _ = _push_into_a_wall()
    m, x_wall = PUSH_MASS_KG, PUSH_WALL_AT_M
    wrench = np.zeros((len(t), 1, 6))
    wrench[:, 0, :3] = force_on_human
    s_, tau = sp.symbols("s tau", positive=True)
    xs = 0.3 * (10 * s_**3 - 15 * s_**4 + 6 * s_**5)
    t_w = float(sp.nsolve(xs - x_wall, s_, 0.8))  # T = 1 s, so s = t
    acc = sp.diff(xs, s_, 2)
    ref = math.sqrt(float(sp.integrate((m * acc) ** 2, (s_, 0, tau)).subs(tau, t_w)) / t_w)
    assert interaction_force_free_rms_N(wrench, past) == pytest.approx(ref, rel=5e-3)
    assert interaction_force_rms_N(wrench) > 2 * ref  # over every tick the wall's K p dominates
    assert interaction_force_free_rms_N(wrench) == interaction_force_rms_N(wrench)  # no wall: every tick
    assert interaction_force_free_rms_N(wrench, np.ones(len(t), bool)) is None  # never outside the wall
    with pytest.raises(ValueError, match="one flag per tick"):
        interaction_force_free_rms_N(wrench, past[:-1])


def test_compensation_shares_recover_known_mixture():
    rng = np.random.default_rng(3)
    g, mddq = rng.normal(size=(500, 7)), rng.normal(size=(500, 7))
    alpha, beta = compensation_shares(0.3 * g + 0.7 * mddq, g, mddq)
    assert (alpha, beta) == pytest.approx((0.3, 0.7), abs=1e-12)


def test_power_of_a_wrench_on_a_moving_body():
    # P = f . v + m . w (Featherstone 2008, section 2.7)
    w = np.array([[[1.0, 2.0, 3.0, 0.1, 0.2, 0.3]]])
    V = np.array([[[0.5, 0.0, -1.0, 2.0, 0.0, 1.0]]])
    assert interaction_power_W(w, V)[0] == pytest.approx(0.5 - 3.0 + 0.2 + 0.3)
    assert interaction_work_J(np.full(1000, 2.0), DT) == pytest.approx(2.0)


def test_work_of_the_cuffs_equals_the_robots_energy_change(tmp_path):
    # work-energy theorem: with no actuator torque and no friction, the work the cuffs do on the robot is the
    # change of its kinetic plus potential energy (kinetic and potential energy from pinocchio on the run's model)
    path = write_scenario(tmp_path / "s.py", duration_s="0.6", controllers='("zero",)')
    sc = dataclasses.replace(load_scenario(path), plant=PlantParams(exo_friction=False))
    simulate(sc, "zero", tmp_path / "run")
    from models.arm import load_arm
    from sim.analysis.metrics import robot_interaction_terms
    from sim.loop.runlog import load_run

    run = load_run(tmp_path / "run")
    meta = run.meta
    arm = load_arm((tmp_path / "run" / "exo.urdf").read_text(), armature_kg_m2=meta["exo_params"]["armature_kg_m2"])
    from sim.analysis.derived import cuff_columns

    arrays = run.arrays | cuff_columns(run)
    terms = robot_interaction_terms(arm, arrays, [meta["models"]["cuff_frames"][c][0] for c in meta["cuffs"]], DT)
    P = interaction_power_W(arrays["cuff_wrench_exo"], terms["cuff_twist"])
    E = terms["kinetic_J"] + terms["potential_J"]
    W = np.cumsum(P[:-1]) * DT
    dE = E[1:] - E[0]
    assert np.max(np.abs(dE)) > 0.2  # the human really moved the robot
    assert np.max(np.abs(W - dE)) < 0.02 * np.max(np.abs(dE))


# -- safety and solver ----------------------------------------------------------------------------
def test_force_limit_counts_ticks_over_the_region_limit():
    w = np.zeros((5, 2, 6))
    w[1, 0, 0] = 151.0  # upper arm over 150 N
    w[2, 1, 1] = 139.0  # hand under 140 N
    w[3, 1, 2] = 141.0  # hand over
    w[4, 0, 0], w[4, 1, 0] = 200.0, 200.0  # both: one tick
    assert force_limit_exceed_count(w, ["upper_arm", "hand"], {"upper_arm": 150.0, "hand": 140.0}) == 3
    assert force_limit_exceed_count(w, ["strap", "hand"], {"hand": 140.0}) == 2  # no limit for an unknown cuff


def test_joint_limit_excursion():
    q = np.array([[0.0, 0.0], [1.2, -0.1], [0.5, -0.35]])
    assert joint_limit_excursion_max_rad(q, np.array([-1.0, -0.3]), np.array([1.0, 0.3])) == pytest.approx(0.2)


def test_solver_metrics_median_p99_and_fallbacks():
    t = np.linspace(1e-5, 1e-4, 101)
    # per tick: backend calls 0, 2, none (a fallback tick), 1, 0
    m = solver_metrics({"diag_solve_time_s": t, "diag_level_0_time_s": t / 2}, np.array([0, 1, 0, 1.0]),
                       np.array([0.0, 2.0, np.nan, 1.0, 0.0]))
    assert m["hqp_solve_median_us"] == pytest.approx(55.0)
    assert m["hqp_solve_p99_us"] == pytest.approx(np.percentile(t, 99) * 1e6)
    assert m["hqp_fallback_count"] == 2
    assert m["hqp_backend_tick_count"] == 2  # the ticks with a backend call
    assert solver_metrics({"diag_solve_time_s": t}, None)["hqp_backend_tick_count"] is None  # logged without it
    assert m["hqp_levels"][0]["solve_median_us"] == pytest.approx(27.5)
    assert solver_metrics({}, None)["hqp_solve_median_us"] is None


# -- tables -----------------------------------------------------------------------------------------
def test_best_value_rules():
    assert best_index([3.0, 1.0, None], "lower") == 1
    assert best_index([3.0, 1.0], "higher") == 0
    assert best_index([-0.2, 0.5], "zero") == 0
    assert best_index([0.8, 1.1], "one") == 1
    assert best_index([590.0, 700.0], "commanded", [600.0, 600.0]) == 0
    assert best_index([2.0, 2.0], "lower") is None  # a tie has no winner
    assert best_index([2.0, None], "lower") is None


def test_a_shared_best_value_has_no_single_winner():
    # mechanism check: two variants that give the same number (a wall variant where nothing touches the wall)
    assert best_index([16.0, 8.4, 8.4], "lower") is None
    assert best_indices([16.0, 8.4, 8.4], "lower") == (1, 2)
    assert best_indices([16.0, 8.4, 8.5], "lower") == (1,)
    assert best_indices([8.4, 8.4], "lower") == ()  # every value equal: no winner at all
    assert best_indices([float("nan"), 1.0, 1.0, None], "zero") == ()


def test_the_sweep_verdict_calls_equal_means_level_and_compares_each_with_the_rest():
    def row(controller, mean, std):
        return {"controller": controller, "subject": "all", "n_ok": 4,
                "interaction_force_rms_N_mean": mean, "interaction_force_rms_N_std": std}

    lines = headline([row("gravity", 16.0, 0.45), row("transparent", 8.434, 0.26), row("walls", 8.434, 0.26)])
    assert lines[0].startswith("`transparent` and `walls` are level on")
    assert not any("better than `walls`" in s or "better than `transparent`" in s for s in lines)
    assert sum("better than `gravity`" in s and "(-47 %)" in s for s in lines) == 2
    # a difference under one per cent is printed with its digits, not as "+0 %"
    close = headline([row("a", 8.434, 0.26), row("b", 8.437, 0.26)])
    assert close == ["`a` is better than `b` on interaction force, RMS: 8.434 ± 0.26 N against 8.437 ± 0.26 N "
                     "(-0.036 %), over 4 and 4 runs."]


def test_with_a_wall_the_verdict_judges_transparency_outside_it_and_the_wall_by_its_stiffness():
    # mechanism check: inside the wall the wall variant's force is the wall it renders, so the overall RMS
    # would call the variant without a wall more transparent by the whole wall force
    def row(controller, rms, free, stiffness):
        return {"controller": controller, "subject": "all", "n_ok": 3,
                "interaction_force_rms_N_mean": rms, "interaction_force_rms_N_std": 0.1,
                "interaction_force_free_rms_N_mean": free, "interaction_force_free_rms_N_std": 0.1,
                "wall_penetration_max_m_mean": 0.01, "wall_penetration_max_m_std": 0.001,
                "wall_stiffness_rendered_N_per_m_mean": stiffness, "wall_stiffness_rendered_N_per_m_std": 5.0,
                "wall_stiffness_commanded_N_per_m_mean": 600.0 if stiffness is not None else 0.0}

    v = sweep_verdicts([row("walls", 24.0, 3.0, 590.0), row("transparent", 5.0, 3.6, None),
                        row("soft", 20.0, 3.2, 300.0)])
    assert list(v) == ["Which is more transparent", "Which renders the wall closest to its commanded stiffness"]
    assert v["Which is more transparent"][0].startswith("`walls` is better than `transparent` on interaction force "
                                                        "outside the wall")
    assert v["Which renders the wall closest to its commanded stiffness"] == [
        "`walls` is better than `soft` on wall stiffness at the hand: 590 ± 5 N/m against 300 ± 5 N/m (+97 %), "
        "over 3 and 3 runs."]
    free_rows = [{k: r for k, r in row(c, f, f, None).items() if not k.startswith("wall_")}
                 for c, f in (("a", 2.0), ("b", 3.0))]
    assert list(sweep_verdicts(free_rows)) == ["Which is more transparent"]  # no wall: one question
    assert "on interaction force, RMS" in sweep_verdicts(free_rows)["Which is more transparent"][0]


def test_comparison_rows_mark_the_better_value_and_keep_per_cuff_keys():
    a = {"interaction_force_rms_N": 8.0, "human_effort_ratio": 1.3, "cuffs": {"hand": {"force_rms_N": 2.0}}}
    b = {"interaction_force_rms_N": 12.0, "human_effort_ratio": 1.05, "cuffs": {"hand": {"force_rms_N": 1.0}}}
    rows = {r["key"]: r for r in comparison_rows(["A", "B"], [a, b])}
    assert rows["interaction_force_rms_N"]["best"] == "A"
    assert rows["human_effort_ratio"]["best"] == "B"
    assert rows["cuffs.hand.force_rms_N"]["best"] == "B"
    assert flat_metrics(a)["cuffs.hand.force_rms_N"] == 2.0


def test_every_metric_key_documented_in_the_readme():
    from pathlib import Path

    readme = (Path(__file__).parents[1] / "README.md").read_text()
    missing = [k for k in METRICS if f"`{k}`" not in readme]
    assert not missing, f"metric keys not in the README: {missing}"


def test_run_folder_metrics_hold_every_issue_key(tmp_path):
    from sim.experiments.run import run_scenario

    path = write_scenario(tmp_path / "s.py", duration_s="0.3", controllers='("transparent",)')
    r = run_scenario(load_scenario(path), "transparent", tmp_path / "run")
    for key in ("interaction_work_J", "apparent_mass_hand_kg", "force_limit_exceed_count", "hqp_solve_median_us",
                "hqp_solve_p99_us", "hqp_fallback_count", "interaction_force_rms_N", "human_effort_ratio"):
        assert key in r.metrics
    assert r.metrics["hqp_fallback_count"] == 0 and r.metrics["hqp_solve_median_us"] > 0
    assert (tmp_path / "run" / "report.md").is_file()
    assert "IEC 80601-2-78" in (tmp_path / "run" / "report.md").read_text()
    again = evaluate_run(tmp_path / "run")
    assert {k: v for k, v in again.items()} == {k: v for k, v in r.metrics.items()}
    assert not math.isnan(r.metrics["interaction_work_J"])


def test_robot_interaction_terms_match_pinocchios_separate_algorithms(monkeypatch):
    # reference: per tick, pinocchio's separate algorithms (computeJointJacobians, forwardKinematics,
    # getFrameVelocity/getFrameJacobian, computeGeneralizedGravity, nonLinearEffects, crba, computePotentialEnergy)
    # and numpy products
    import pinocchio as pin

    import models
    import sim.analysis.metrics
    from sim.analysis.metrics import robot_interaction_terms

    arm = models.build_exo()
    model, data = arm.model, arm.model.createData()
    frames = ["exo_cuff_upper_arm", "exo_cuff_forearm", "exo_cuff_hand"]
    rng = np.random.default_rng(12)
    lo, hi = arm.position_limits()
    n = 40
    arrays = {"q_exo": rng.uniform(lo, hi, size=(n, 7)), "dq_exo": rng.normal(size=(n, 7)),
              "cuff_wrench_exo": rng.normal(scale=10.0, size=(n, 3, 6))}
    monkeypatch.setattr(sim.analysis.metrics, "_TERMS_BLOCK", 16)  # three blocks, the last one partial
    terms = robot_interaction_terms(arm, arrays, frames, DT)
    ddq = np.gradient(arrays["dq_exo"], DT, axis=0)
    for k in range(n):
        q, dq = arrays["q_exo"][k], arrays["dq_exo"][k]
        pin.computeJointJacobians(model, data, q)
        pin.forwardKinematics(model, data, q, dq)
        pin.updateFramePlacements(model, data)
        tau = np.zeros(7)
        for c, f in enumerate(frames):
            fid = model.getFrameId(f)
            np.testing.assert_allclose(terms["cuff_twist"][k, c],
                                       pin.getFrameVelocity(model, data, fid, pin.LOCAL).vector, atol=1e-12)
            tau += pin.getFrameJacobian(model, data, fid, pin.LOCAL).T @ arrays["cuff_wrench_exo"][k, c]
        np.testing.assert_allclose(terms["tau_interaction"][k], tau, atol=1e-11)
        np.testing.assert_allclose(terms["tau_gravity"][k], pin.computeGeneralizedGravity(model, data, q), atol=1e-11)
        np.testing.assert_allclose(terms["tau_coriolis"][k], pin.nonLinearEffects(model, data, q, dq)
                                   - pin.computeGeneralizedGravity(model, data, q), atol=1e-10)
        M = pin.crba(model, data, q)
        M = np.triu(M) + np.triu(M, 1).T
        np.testing.assert_allclose(terms["tau_inertia"][k], M @ ddq[k], rtol=1e-12, atol=1e-9)
        assert terms["kinetic_J"][k] == pytest.approx(0.5 * dq @ M @ dq, rel=1e-12)
        U = pin.computePotentialEnergy(model, data, q)
        assert terms["potential_J"][k] == pytest.approx(U, rel=1e-12, abs=1e-12)
