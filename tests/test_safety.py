"""The safety monitor (controllers.safety): each watch on made-up measurements, the latch and its release, the
safe state's torque limits, the controlled stop's kinematics, the monitor in runs, metrics, report and CLI.

Outside references, named beside each check:

* ISO/TS 15066:2016, Annex A, Table A.2: maximum permissible quasi-static forces, hand and fingers 140 N
  (confirmed); upper arm and elbow 150 N, lower arm and wrist 160 N (from memory, unconfirmed).
* Constant-deceleration kinematics (any mechanics textbook, e.g. Halliday, Resnick & Walker, Fundamentals of
  Physics, ch. 2): from speed v at deceleration a a body stops after v / a over v² / (2 a).
* pinocchio's articulated-body algorithm (``pinocchio.aba``; Featherstone, Rigid Body Dynamics Algorithms,
  Springer 2008, ch. 7) as the reference forward dynamics for the braking.
"""

from __future__ import annotations

import dataclasses
import json
import math
from pathlib import Path

import numpy as np
import pinocchio as pin
import pytest

from controllers import Controller
from controllers.basic import ZeroTorque
from controllers.hqp import HQPController
from controllers.registry import make_controller
from controllers.safety import (
    BODY_REGION_FORCE_LIMITS_N,
    TRIP_CODES,
    TRIP_REASONS,
    SafetyMonitor,
    SafetyParams,
    Supervised,
)
from models.errors import ParameterError
from models.records import Measurement
from sim import Simulation, load_scenario
from sim.analysis.metrics import METRICS, safety_metrics
from sim.cli import main
from sim.experiments.run import FALLBACK_WARN_FRACTION, run_scenario, run_warnings
from sim.loop.simulation import build_assembly, controller_context

REPO = Path(__file__).resolve().parents[1]
DEMO = REPO / "scenarios" / "demos" / "safety_trip.py"
DT = 1e-3


class Fixed(Controller):
    """A made-up inner controller: returns ``tau`` and reports ``diag`` (both set by the test)."""

    name = "fixed"

    def __init__(self, names=("solve_time_s", "fallback")):
        super().__init__()
        self.names, self.tau, self.diag = tuple(names), None, {}

    def reset(self, context):
        super().reset(context)
        self.tau = np.zeros(context.arm.nv)
        self.diag = dict.fromkeys(self.names, 0.0)

    def step(self, measurement):
        return self.tau

    def diagnostic_names(self):
        return self.names

    def diagnostics(self):
        return self.diag


@pytest.fixture(scope="module")
def context():
    return controller_context(build_assembly(load_scenario(REPO / "scenarios" / "reach.py")), DT)


def meas(context, t=0.0, q=None, dq=None, forces=None):
    arm = context.arm
    q = pin.neutral(arm.model) if q is None else q
    dq = np.zeros(arm.nv) if dq is None else dq
    wrench = {c: np.zeros(6) for c in context.cuff_frames}
    for c, f in (forces or {}).items():
        wrench[c] = np.array([f, 0, 0, 0, 0, 0], dtype=float)
    return Measurement(t, q, dq, np.zeros(arm.nv), wrench)


def supervised(context, **params):
    ctrl = Supervised(Fixed(), SafetyParams(**params))
    ctrl.reset(context)
    return ctrl


# -- parameters ---------------------------------------------------------------------------------------------
def test_body_region_limits_are_those_of_iso_ts_15066_annex_a():
    # ISO/TS 15066:2016 Table A.2: hand 140 N (confirmed); upper arm 150 N, lower arm 160 N (from memory)
    assert BODY_REGION_FORCE_LIMITS_N["hand"] == 140.0
    assert BODY_REGION_FORCE_LIMITS_N["upper_arm"] == 150.0
    assert BODY_REGION_FORCE_LIMITS_N["forearm"] == 160.0


@pytest.mark.parametrize("field, value", [("speed_limit_factor", 0.0), ("torque_limit_factor", -1.0),
                                          ("solve_time_budget_s", math.nan), ("fallback_max_fraction", 1.5),
                                          ("safe_state", "float"), ("release", "sometimes"),
                                          ("release_fraction", 0.0), ("stop_deceleration_rad_s2", 0.0),
                                          ("force_limits_N", {"hand": -3.0}), ("solve_time_overrun_ticks", 0)])
def test_bad_parameters_are_refused_naming_the_field(field, value):
    with pytest.raises(ParameterError, match=field):
        SafetyParams(**{field: value})


def test_a_limit_for_a_cuff_the_robot_lacks_is_an_error_at_reset_naming_it_and_the_cuffs(context):
    ctrl = Supervised(Fixed(), SafetyParams(force_limits_N={"elbow": 100.0}))  # accepted until the robot is known
    with pytest.raises(ParameterError, match=r"'elbow'.*upper_arm, forearm, hand"):
        ctrl.reset(context)
    sc = dataclasses.replace(load_scenario(REPO / "scenarios" / "reach.py"),
                             safety=SafetyParams(force_limits_N={"elbow": 100.0}))
    with pytest.raises(ParameterError, match="'elbow'"):
        Simulation(sc, "transparent")


def test_scenario_safety_must_be_params_or_none():
    sc = load_scenario(REPO / "scenarios" / "reach.py")
    with pytest.raises(ParameterError, match="safety"):
        dataclasses.replace(sc, safety={"release": "never"})
    assert dataclasses.replace(sc, safety=None).safety is None


# -- each watch -------------------------------------------------------------------------------------------
def test_force_watch_trips_above_the_hand_limit_and_not_below(context):
    ctrl = supervised(context)
    ctrl.step(meas(context, forces={"hand": 139.0}))
    assert ctrl.diagnostics()["safety_tripped"] == 0.0
    ctrl.step(meas(context, t=DT, forces={"hand": 141.0}))
    d = ctrl.diagnostics()
    assert d["safety_tripped"] == 1.0 and TRIP_REASONS[int(d["safety_reason"])] == "cuff_force"
    assert d["safety_value"] == pytest.approx(141.0) and d["safety_limit"] == 140.0
    assert list(context.cuff_frames)[int(d["safety_where"])] == "hand"
    assert ctrl.trips[0].where == "hand" and ctrl.trips[0].t_s == DT


def test_force_limit_per_cuff_is_configurable(context):
    ctrl = supervised(context, force_limits_N={"forearm": 50.0})
    ctrl.step(meas(context, forces={"hand": 300.0}))  # the hand is not watched with a limit given for others only
    assert ctrl.diagnostics()["safety_tripped"] == 0.0
    ctrl.step(meas(context, t=DT, forces={"forearm": 50.5}))
    assert ctrl.trips[0].reason == "cuff_force" and ctrl.trips[0].where == "forearm"


def test_speed_watch_uses_the_model_limit_times_the_factor(context):
    arm = context.arm
    elbow = list(arm.joint_names).index("exo_elbow")
    lim = float(arm.model.velocityLimit[elbow])
    ctrl = supervised(context, speed_limit_factor=1.5)
    dq = np.zeros(arm.nv)
    dq[elbow] = 1.5 * lim * 0.999
    ctrl.step(meas(context, dq=dq))
    assert not ctrl.trips
    dq[elbow] = -1.5 * lim * 1.001
    ctrl.step(meas(context, t=DT, dq=dq))
    trip = ctrl.trips[0]
    assert (trip.reason, trip.where, trip.limit) == ("joint_speed", "exo_elbow", 1.5 * lim)
    assert trip.value == pytest.approx(1.5 * lim * 1.001)


def test_torque_watch_lets_a_command_at_the_limit_pass_and_trips_beyond(context):
    ctrl = supervised(context)
    tau_max = np.asarray(context.arm.model.effortLimit)
    ctrl.inner.tau = tau_max.copy()  # saturated: at the limit, not beyond
    ctrl.step(meas(context))
    assert not ctrl.trips
    ctrl.inner.tau = tau_max * 0.5
    ctrl.inner.tau[2] = -tau_max[2] * 1.01
    ctrl.step(meas(context, t=DT))
    assert ctrl.trips[0].reason == "joint_torque" and ctrl.trips[0].where == context.arm.joint_names[2]


def test_solve_time_watchdog_counts_over_budget_and_nan_but_not_a_fallback_tick(context):
    ctrl = supervised(context, solve_time_budget_s=0.01, solve_time_overrun_ticks=1, fallback_max_fraction=0.5)
    ctrl.inner.diag.update(solve_time_s=0.009)
    ctrl.step(meas(context))
    ctrl.inner.diag.update(solve_time_s=math.nan, fallback=1.0)  # no solve on a fallback tick: not the watchdog's
    ctrl.step(meas(context, t=DT))
    assert not ctrl.trips
    ctrl.inner.diag.update(solve_time_s=0.011, fallback=0.0)
    ctrl.step(meas(context, t=2 * DT))
    assert ctrl.trips[-1].reason == "solve_time" and ctrl.trips[-1].value == 0.011
    ctrl = supervised(context, solve_time_overrun_ticks=1)
    ctrl.inner.diag.update(solve_time_s=math.nan)
    ctrl.step(meas(context))
    assert ctrl.trips[-1].reason == "solve_time" and ctrl.trips[-1].value == math.inf


def test_solve_time_watchdog_trips_on_the_nth_consecutive_late_tick_only(context):
    ctrl = supervised(context, solve_time_budget_s=0.05, solve_time_overrun_ticks=3)
    times = [0.06, 0.06, 0.01, 0.06, 0.06, 0.01, 0.2, 0.2]  # never three late ticks in a row
    for k, st in enumerate(times):
        ctrl.inner.diag["solve_time_s"] = st
        ctrl.step(meas(context, t=k * DT))
    assert not ctrl.trips
    ctrl.inner.diag["solve_time_s"] = 0.07
    ctrl.step(meas(context, t=len(times) * DT))  # the third in a row
    trip = ctrl.trips[0]
    assert (trip.reason, trip.value, trip.limit, trip.t_s) == ("solve_time", 0.07, 0.05, len(times) * DT)


def test_no_watchdog_for_a_controller_without_the_diagnostic_or_with_no_budget(context):
    ctrl = Supervised(Fixed(names=()), SafetyParams())
    ctrl.reset(context)
    ctrl.step(meas(context))
    ctrl = supervised(context, solve_time_budget_s=None)
    ctrl.inner.diag.update(solve_time_s=10.0)
    ctrl.step(meas(context))
    assert not ctrl.trips


def test_fallback_rate_trips_on_more_than_the_share_in_the_sliding_window(context):
    # window 0.1 s at 1 kHz: 100 ticks; at most 10 % of them may fall back
    ctrl = supervised(context, fallback_window_s=0.1, fallback_max_fraction=0.1)
    for k in range(300):
        ctrl.inner.diag["fallback"] = 1.0 if k % 10 == 0 else 0.0  # exactly 10 %: never more
        ctrl.step(meas(context, t=k * DT))
    assert not ctrl.trips
    for j in range(11):
        ctrl.inner.diag["fallback"] = 1.0 if j < 2 else 0.0  # two in a row: 11 in the last 100 ticks
        ctrl.step(meas(context, t=(300 + j) * DT))
        if ctrl.trips:
            break
    assert ctrl.trips[0].reason == "fallback_rate" and ctrl.trips[0].value == pytest.approx(0.11)


def test_non_finite_reading_counts_as_over_its_limit(context):
    ctrl = supervised(context)
    dq = np.zeros(context.arm.nv)
    dq[4] = math.nan
    ctrl.step(meas(context, dq=dq))
    assert ctrl.trips[0].reason == "joint_speed" and ctrl.trips[0].value == math.inf


# -- pass-through, safe state, latch and release ----------------------------------------------------------------
def test_a_non_finite_command_trips_to_the_safe_state_and_the_run_goes_on():
    class NaNAfter(Controller):
        name = "nan_after"

        def step(self, m):
            return np.full(len(m.q_rad), np.nan if m.t_s >= 0.005 else 0.0)

    sim = Simulation(load_scenario(REPO / "scenarios" / "reach.py"), NaNAfter())
    a = sim.run(0.02).arrays
    trip = sim.controller.trips[0]
    assert (trip.reason, trip.value, trip.t_s) == ("joint_torque", math.inf, 0.005)
    assert np.all(np.isfinite(a["tau_cmd"])) and a["diag_safety_tripped"][5:].all()


def test_untripped_wrapper_returns_the_inner_command_itself(context):
    ctrl = supervised(context)
    ctrl.inner.tau = np.linspace(-1, 1, context.arm.nv)
    assert ctrl.step(meas(context)) is ctrl.inner.tau


@pytest.mark.parametrize("state", ["damp", "stop"])
def test_safe_state_never_commands_more_than_the_torque_limits(context, state):
    ctrl = supervised(context, safe_state=state, damping_Nm_s_per_rad=1e4, stop_deceleration_rad_s2=1e4)
    tau_max = np.asarray(context.arm.model.effortLimit)
    dq = np.full(context.arm.nv, 20.0)  # far over every speed limit: trips, and the safe state wants huge torques
    tau = ctrl.step(meas(context, dq=dq, forces={"hand": 500.0}))
    assert ctrl.trips and np.all(np.abs(tau) <= tau_max)
    assert np.any(np.isclose(np.abs(tau), tau_max))  # the clip was needed, and it held


def test_damp_safe_state_is_gravity_compensation_minus_damping(context):
    ctrl = supervised(context, damping_Nm_s_per_rad=3.0)
    q = pin.neutral(context.arm.model) + 0.2
    dq = np.zeros(context.arm.nv)
    dq[3] = 9.0  # over twice the elbow's rated 4 rad/s: trips
    tau = ctrl.step(meas(context, q=q, dq=dq))
    g = pin.computeGeneralizedGravity(context.arm.model, context.arm.model.createData(), q)
    np.testing.assert_allclose(tau, np.clip(g - 3.0 * dq, -context.arm.model.effortLimit,
                                            context.arm.model.effortLimit), atol=1e-12)


def test_controlled_stop_brakes_at_the_bounded_deceleration_over_v2_over_2a(context):
    # forward dynamics by pinocchio's ABA, semi-implicit Euler at the control period, no wearer (no cuff force)
    a_max, v0 = 10.0, 2.0
    mon = SafetyMonitor(SafetyParams(safe_state="stop", stop_deceleration_rad_s2=a_max))
    mon.reset(context)
    model, data = context.arm.model, context.arm.model.createData()
    elbow = list(context.arm.joint_names).index("exo_elbow")
    q = pin.neutral(model) + 0.3
    v = np.zeros(model.nv)
    v[elbow] = v0
    q_start, t = q.copy(), 0.0
    while v[elbow] > 1e-9 and t < 1.0:
        tau = mon.safe_torque(meas(context, t=t, q=q, dq=v))
        assert np.all(np.abs(tau) < model.effortLimit)  # this stop is within the torque limits
        qdd = pin.aba(model, data, q, v, tau)
        if v[elbow] > a_max * DT:
            assert qdd[elbow] == pytest.approx(-a_max, rel=1e-6)
        v = v + qdd * DT
        q = q + v * DT
        t += DT
    # v / a = 0.2 s and v² / (2a) = 0.2 rad; the Euler sum differs by about v0 dt / 2 = 1 mrad
    assert t == pytest.approx(v0 / a_max, abs=2 * DT)
    assert q[elbow] - q_start[elbow] == pytest.approx(v0**2 / (2 * a_max), abs=2e-3)
    others = [i for i in range(model.nv) if i != elbow]
    assert np.max(np.abs(q[others] - q_start[others])) < 1e-6  # the other joints were held at rest


def test_latched_monitor_stays_in_the_safe_state_with_release_never(context):
    ctrl = supervised(context, release="never")
    ctrl.step(meas(context, forces={"hand": 200.0}))
    for k in range(1, 2000):
        ctrl.step(meas(context, t=k * DT))
    assert ctrl.diagnostics()["safety_tripped"] == 1.0
    assert len(ctrl.trips) == 1 and ctrl.trips[0].released_s is None


def test_release_after_the_hold_time_under_the_fraction_and_not_before(context):
    ctrl = supervised(context, release="hold", release_fraction=0.5, release_hold_s=0.2)
    ctrl.inner.tau = np.full(context.arm.nv, 0.125)
    ctrl.step(meas(context, forces={"hand": 200.0}))  # trips at t = 0
    k = 1
    for _ in range(100):  # 0.1 s at 80 N: under the limit, above half of it: no release
        ctrl.step(meas(context, t=k * DT, forces={"hand": 80.0}))
        k += 1
    assert ctrl.diagnostics()["safety_tripped"] == 1.0
    under = k * DT
    while ctrl.diagnostics()["safety_tripped"] == 1.0 and k < 2000:
        tau = ctrl.step(meas(context, t=k * DT, forces={"hand": 60.0}))
        k += 1
    released = ctrl.trips[0].released_s
    assert released == pytest.approx(under + 0.2, abs=1e-9)
    assert tau is ctrl.inner.tau  # back to the inner controller on the release tick
    assert ctrl.diagnostics()["safety_reason"] == 0.0
    ctrl.step(meas(context, t=k * DT, forces={"hand": 150.0}))  # and it trips again
    assert len(ctrl.trips) == 2 and ctrl.trips[1].released_s is None


def test_no_release_while_another_watch_is_violated(context):
    ctrl = supervised(context, release="hold", release_fraction=0.5, release_hold_s=0.05)
    ctrl.step(meas(context, forces={"hand": 200.0}))  # trips on the force
    fast = np.zeros(context.arm.nv)
    fast[3] = 9.0  # the elbow over twice its rated 4 rad/s
    for k in range(1, 200):  # the force is back under half its limit, the speed is not under its own
        ctrl.step(meas(context, t=k * DT, dq=fast))
    assert ctrl.diagnostics()["safety_tripped"] == 1.0 and len(ctrl.trips) == 1
    for k in range(200, 260):
        ctrl.step(meas(context, t=k * DT))
    assert ctrl.trips[0].released_s == pytest.approx(0.25, abs=1e-9)  # 0.200 s + the 0.05 s hold


def test_trip_reason_codes_round_trip():
    assert TRIP_REASONS[0] == "none" and all(TRIP_REASONS[TRIP_CODES[n]] == n for n in TRIP_CODES)


# -- wrapper, registry ------------------------------------------------------------------------------------
def test_structure_shows_the_inner_levels_and_the_monitor_settings():
    ctrl = make_controller("transparent", safety=SafetyParams(release="never"))
    s = ctrl.structure()
    assert isinstance(ctrl, Supervised) and isinstance(ctrl.inner, HQPController)
    assert s["levels"] == ctrl.inner.structure()["levels"] and len(s["levels"]) == 2
    assert s["safety"]["release"] == "never" and s["safety"]["speed_limit_factor"] == 2.0
    json.dumps(s)


def test_registry_wraps_the_powered_variants_and_never_zero():
    assert isinstance(make_controller("zero", safety=SafetyParams()), ZeroTorque)
    for name in ("gravity", "transparent", "walls"):
        assert isinstance(make_controller(name, safety=SafetyParams()), Supervised)
        assert not isinstance(make_controller(name), Supervised)
    mine = make_controller("mine", {"mine": [["damping"]]}, safety=SafetyParams())
    assert isinstance(mine, Supervised) and mine.name == "mine"


def test_a_run_logs_the_safety_diagnostics_and_keeps_wall_clock_ones_out():
    sc = load_scenario(REPO / "scenarios" / "reach.py")
    sim = Simulation(sc, "transparent")
    assert {"diag_safety_tripped", "diag_safety_reason", "diag_fallback"} <= set(sim.columns)
    assert "diag_solve_time_s" not in sim.columns
    off = Simulation(dataclasses.replace(sc, safety=None), "transparent")
    assert not any(c.startswith("diag_safety") for c in off.columns)
    # meta.json: the variant's own structure, and the monitor's settings beside it (None when off)
    assert sim.meta["controller_structure"] == json.loads(json.dumps(make_controller("transparent").structure()))
    assert sim.meta["safety"]["safe_state"] == "damp" and off.meta["safety"] is None
    # an object built in code runs supervised too (not twice), and a zero-torque one never
    assert isinstance(Simulation(sc, make_controller("transparent")).controller, Supervised)
    wrapped = Supervised(make_controller("gravity"), SafetyParams(release="never"))
    assert Simulation(sc, wrapped).controller is wrapped
    assert isinstance(Simulation(sc, ZeroTorque()).controller, ZeroTorque)
    a, b = sim.run(0.2).arrays, off.run(0.2).arrays
    for k in b:  # the monitor changes nothing while it does not trip
        np.testing.assert_array_equal(a[k], b[k])


# -- metrics, warnings -----------------------------------------------------------------------------------
def test_trips_are_read_back_from_the_logged_columns():
    n = 10
    tripped = np.array([0, 0, 1, 1, 1, 0, 0, 1, 1, 1], float)
    reason = tripped * np.array([0, 0, 2, 2, 2, 0, 0, 1, 1, 1])
    arrays = {"t": np.arange(n) * DT, "diag_safety_tripped": tripped, "diag_safety_reason": reason,
              "diag_safety_value": np.where(tripped > 0, 7.0, np.nan),
              "diag_safety_limit": np.where(tripped > 0, 6.0, np.nan),
              "diag_safety_where": np.where(tripped > 0, np.array([0, 0, 3, 3, 3, 0, 0, 2, 2, 2]), -1)}
    m = safety_metrics(arrays, ["upper_arm", "forearm", "hand"], [f"j{i}" for i in range(7)], DT)
    assert m["safety_trip_count"] == 2
    assert m["safety_trips"][0] == {"reason": "joint_speed", "t_s": 2 * DT, "value": 7.0, "limit": 6.0,
                                    "joint": "j3", "released_s": 5 * DT}
    assert m["safety_trips"][1]["cuff"] == "hand" and m["safety_trips"][1]["released_s"] is None
    assert safety_metrics({"t": np.zeros(3)}, [], None, DT) == {"safety_trip_count": None, "safety_trips": []}
    assert METRICS["safety_trip_count"].better == "lower"


def test_run_warnings():
    assert run_warnings({"safety_trip_count": 0, "force_limit_exceed_count": 0, "hqp_fallback_fraction": 0.0}) == []
    trip = {"reason": "cuff_force", "t_s": 1.5, "value": 150.0, "limit": 140.0, "cuff": "hand"}
    w = run_warnings({"safety_trip_count": 1, "safety_trips": [trip], "force_limit_exceed_count": 3,
                      "hqp_fallback_fraction": 2 * FALLBACK_WARN_FRACTION})
    assert len(w) == 3 and "cuff_force (hand) at t = 1.500 s" in w[0] and "3 tick" in w[1] and "2.0 %" in w[2]
    assert run_warnings({"hqp_fallback_fraction": 0.5 * FALLBACK_WARN_FRACTION}) == []


# -- the shipped demonstration --------------------------------------------------------------------------------
def test_demo_trips_goes_to_the_safe_state_and_releases(tmp_path):
    sc = load_scenario(DEMO)
    sim = Simulation(sc, "pushy")
    a = sim.run(1.0).arrays
    trips = sim.controller.trips
    assert trips and trips[0].reason in ("joint_speed", "cuff_force") and trips[0].t_s < 0.1
    assert trips[0].released_s is not None and trips[0].released_s - trips[0].t_s >= sc.safety.release_hold_s
    tripped = a["diag_safety_tripped"] > 0.5
    model = sim.controller.context.arm.model
    data = model.createData()
    for k in np.flatnonzero(tripped)[::50]:  # the logged command of a tripped tick is the safe state's
        g = pin.computeGeneralizedGravity(model, data, a["q_exo_meas"][k])
        expect = np.clip(g - sc.safety.damping_Nm_s_per_rad * a["dq_exo_meas"][k], -model.effortLimit,
                         model.effortLimit)
        np.testing.assert_allclose(a["tau_cmd"][k], expect, atol=1e-9)
    assert np.any(~tripped[np.flatnonzero(tripped)[0]:])  # released at some point after the first trip
    assert not Simulation(sc, "transparent").run(1.0).arrays["diag_safety_tripped"].any()


def test_demo_run_reports_the_trips_and_the_cli_warns_with_exit_code_0(tmp_path, capsys):
    sc = dataclasses.replace(load_scenario(DEMO), duration_s=0.5)
    m = run_scenario(sc, "pushy", tmp_path / "api").metrics
    assert m["safety_trip_count"] >= 1 and m["safety_trips"][0]["joint"] == "exo_elbow"
    report = (tmp_path / "api" / "report.md").read_text()
    assert "## Safety" in report and "joint_speed" in report
    assert main(["run", str(DEMO), "--controller", "pushy", "--duration", "0.5", "--out",
                 str(tmp_path / "cli")]) == 0
    lines = capsys.readouterr().out.splitlines()
    assert lines[0].startswith("results in") and any(x.startswith("warning: the safety monitor tripped")
                                                      for x in lines[1:])
    saved = json.loads((tmp_path / "cli" / "metrics.json").read_text())
    assert saved["safety_trip_count"] >= 1 and saved["safety_trips"][0]["reason"] == "joint_speed"


def test_compare_warns_for_the_run_that_tripped_only_and_a_shipped_run_prints_no_warning(tmp_path, capsys):
    assert main(["compare", str(DEMO), "--duration", "0.3", "--out", str(tmp_path / "cmp")]) == 0
    warnings = [x for x in capsys.readouterr().out.splitlines() if x.startswith("warning:")]
    assert warnings and all(x.startswith("warning: pushy: the safety monitor tripped") for x in warnings)
    assert main(["run", str(REPO / "scenarios" / "reach.py"), "--controller", "transparent", "--duration", "0.3",
                 "--out", str(tmp_path / "reach")]) == 0
    out = capsys.readouterr().out
    assert "results in" in out and "warning:" not in out
    assert json.loads((tmp_path / "reach" / "metrics.json").read_text())["safety_trip_count"] == 0
