"""Sweeps over scenario fields (``--vary``), the sampled population (``--population``) and their statistics.

Outside sources named beside each check:

* the ANSUR II stature and body-mass means and standard deviations per sex: Gordon C.C. et al. (2014),
  *2012 Anthropometric Survey of U.S. Army Personnel: Methods and Summary Statistics*, NATICK/TR-15/007
  (unweighted values of its public working data);
* the Student-t quantile and the paired t test: scipy.stats (``t.ppf``, ``ttest_rel``), a general-purpose
  reference library;
* the coverage of a 95 % interval: its definition (Student 1908), checked by a seeded Monte-Carlo count with a
  binomial tolerance.
"""

from __future__ import annotations

import csv
import json
import math

import numpy as np
import pytest
from _scenario_files import write_scenario
from scipy import stats

from sim.analysis.stats import mean_ci95, paired_difference_ci95
from sim.cli import main
from sim.experiments.sweep import PLAN_FILE, SweepError, plan_sweep, run_sweep
from sim.experiments.vary import (
    ANSUR_II,
    NAMED_VALUES,
    VaryError,
    parse_vary,
    sample_population,
    sensitivity_rows,
    vary_scenario,
)
from sim.loop.scenario import load_scenario

# Gordon et al. (2014), ANSUR II working data, unweighted: stature [mm] and body mass [kg], mean (SD) and n.
SURVEY = {"male": {"stature_mm": (1756.2, 68.6), "mass_kg": (85.5, 14.2)},
          "female": {"stature_mm": (1628.5, 64.2), "mass_kg": (67.8, 11.0)}}


def test_the_sampled_population_matches_the_survey_within_its_sampling_error():
    # Gordon et al. (2014): means and SDs per sex; 4 standard errors for n = 2000 per sex
    n = 4000
    wearers = [s for _, s in sample_population(n, seed=7)]
    for sex, survey in SURVEY.items():
        mine = [s for s in wearers if s.sex == sex]
        k = len(mine)
        assert 1800 < k < 2200  # half the wearers expected of each sex (binomial, 6 SD = 190)
        for key, values in (("stature_mm", [1000 * s.stature_m for s in mine]), ("mass_kg", [s.mass_kg for s in mine])):
            mu, sd = survey[key]
            m, s = float(np.mean(values)), float(np.std(values, ddof=1))
            assert abs(m - mu) < 4 * sd / math.sqrt(k), (sex, key, m, mu)
            # the standard error of a normal sample's SD is about sd / sqrt(2 (k - 1))
            assert abs(s - sd) < 4 * sd / math.sqrt(2 * (k - 1)), (sex, key, s, sd)
    # our constants carry the survey's values (stature in m)
    assert ANSUR_II["male"]["stature_m"] == (1.7562, 0.0686) and ANSUR_II["female"]["mass_kg"] == (67.8, 11.0)


def test_the_population_is_seeded_and_its_names_are_stable():
    a, b = sample_population(12, seed=3), sample_population(12, seed=3)
    assert a == b
    assert sample_population(5, seed=3) == a[:5]  # the first wearers do not depend on N
    assert sample_population(12, seed=4) != a
    assert [name for name, _ in a[:2]] == ["p001", "p002"]


def test_the_interval_of_a_mean_has_its_stated_coverage():
    # definition of a 95 % interval (Student 1908): a seeded Monte-Carlo count over 2000 trials of n = 8 draws of
    # N(3, 2^2); the count is binomial(2000, 0.95), SD = 9.7, so 4 SD = 39 trials
    rng = np.random.default_rng(np.random.SeedSequence(2024))
    trials, n, mu = 2000, 8, 3.0
    hits = 0
    for _ in range(trials):
        ci = mean_ci95(rng.normal(mu, 2.0, n))
        hits += ci.low <= mu <= ci.high
    assert abs(hits - 0.95 * trials) < 4 * math.sqrt(trials * 0.95 * 0.05)


def test_the_interval_uses_the_student_quantile():
    # scipy.stats.t as the reference for the quantile and the interval
    x = [1.2, 0.7, 1.9, 1.4, 0.3]
    ci = mean_ci95(x)
    lo, hi = stats.t.interval(0.95, len(x) - 1, loc=np.mean(x), scale=stats.sem(x))
    assert ci.low == pytest.approx(lo, rel=1e-12) and ci.high == pytest.approx(hi, rel=1e-12)
    assert ci.std == pytest.approx(np.std(x, ddof=1), rel=1e-12) and ci.n == 5
    assert math.isnan(mean_ci95([2.0]).low)


def test_paired_differences_agree_with_scipy_ttest_rel():
    # scipy.stats.ttest_rel: the paired t statistic and its interval
    rng = np.random.default_rng(5)
    a = rng.normal(10.0, 3.0, 15)
    b = a + rng.normal(0.8, 0.5, 15)
    ci = paired_difference_ci95(a, b)
    ref = stats.ttest_rel(b, a)
    t = ci.mean / (ci.std / math.sqrt(ci.n))
    assert t == pytest.approx(ref.statistic, rel=1e-12)
    lo, hi = ref.confidence_interval(0.95)
    assert ci.low == pytest.approx(lo, rel=1e-12) and ci.high == pytest.approx(hi, rel=1e-12)
    assert ci.excludes_zero == (ref.pvalue < 0.05)
    with pytest.raises(ValueError, match="as many in b as in a"):
        paired_difference_ci95(a, b[:-1])


@pytest.fixture(scope="module")
def short(tmp_path_factory):
    return write_scenario(tmp_path_factory.mktemp("vary") / "lift.py", duration_s="0.2",
                          controllers='("gravity", "transparent")')


def test_field_paths_set_the_right_fields(short):
    # mechanism check (no outside source applies): each path reaches its own field, nothing else changes
    s = load_scenario(short)
    v = vary_scenario(s, "plant.model_mass_scale", 0.7)
    assert v.plant.model_mass_scale == 0.7 and v.plant.gravity_m_s2 == s.plant.gravity_m_s2 and v.cuffs == s.cuffs
    v = vary_scenario(s, "force_sensor.delay_ticks", 5)
    assert v.force_sensor.delay_ticks == 5
    v = vary_scenario(s, "cuffs.hand.params.stiffness_N_per_m", (3000.0, 3000.0, 1500.0))
    assert v.cuffs[2].params.stiffness_N_per_m == (3000.0, 3000.0, 1500.0) and v.cuffs[0] == s.cuffs[0]
    v = vary_scenario(s, "registration.misalignment_m", (0.01, 0.0, 0.0))
    assert v.registration.misalignment_m == (0.01, 0.0, 0.0)
    var = parse_vary("impairment=none,moderate")
    assert vary_scenario(s, "impairment", var.value("moderate")).impairment == NAMED_VALUES["impairment"]["moderate"]
    assert type(vary_scenario(s, "actuators", parse_vary("actuators=ideal").value("ideal")).actuators).__name__ \
        == "IdealActuatorParams"
    assert parse_vary("registration.misalignment_m=(0.01, 0, 0),(0, 0.01, 0)").values == ("(0.01, 0, 0)",
                                                                                         "(0, 0.01, 0)")


def test_bad_paths_and_values_are_refused_in_one_line(short):
    s = load_scenario(short)
    with pytest.raises(VaryError, match=r"Scenario.plant \(PlantParams\) has no field 'mass'; its fields: "
                                        r"gravity_m_s2, .*model_mass_scale") as e:
        vary_scenario(s, "plant.mass", 1.0)
    assert "\n" not in str(e.value)
    with pytest.raises(VaryError, match="model_mass_scale must be in"):
        vary_scenario(s, "plant.model_mass_scale", -1.0)
    with pytest.raises(VaryError, match="'heavy' is not a Python literal or one of geared, ideal, sea"):
        parse_vary("actuators=heavy").value("heavy")
    with pytest.raises(VaryError, match="FIELD.PATH=V1,V2"):
        parse_vary("plant.model_mass_scale")
    with pytest.raises(VaryError, match="has no field 'nope'"):
        plan_sweep(short, None, ["m50"], 1, "out", vary=[parse_vary("nope=1,2")])


def test_vary_and_population_enter_the_plan_so_resume_refuses_other_values(short, tmp_path):
    # mechanism check: the plan (plan.json) carries each case's varied value and sampled wearer
    out = tmp_path / "s"
    cases = plan_sweep(short, ["gravity"], ["m50"], 1, out, vary=[parse_vary("plant.model_mass_scale=0.7,1.3")],
                       population=3)
    assert len(cases) == 6 and {c.vary for c in cases} == {("plant.model_mass_scale", "0.7"),
                                                           ("plant.model_mass_scale", "1.3")}
    assert {c.subject for c in cases} == {"p001", "p002", "p003"} and all(c.wearer for c in cases)
    assert cases[0].label == "plant.model_mass_scale=0.7/gravity/p001/seed0"
    run_sweep(short, ["gravity"], ["m50"], 1, out_dir=out, jobs=1, duration_s=0.05,
              vary=[parse_vary("plant.model_mass_scale=0.7,1.3")])
    assert json.loads((out / PLAN_FILE).read_text())["cases"][0][-1]["vary"] == ["plant.model_mass_scale", "0.7"]
    with pytest.raises(SweepError, match="planned with other runs"):
        run_sweep(short, ["gravity"], ["m50"], 1, out_dir=out, jobs=1, duration_s=0.05, resume=True,
                  vary=[parse_vary("plant.model_mass_scale=0.7,1.0")])


def test_a_tiny_sweep_with_vary_writes_the_table_and_the_chart(short, tmp_path, capsys):
    # mechanism check of the command: three values of the model error, two controllers; the relative change is
    # checked against the runs' own metrics (definition of a relative change)
    out = tmp_path / "sweep"
    code = main(["sweep", str(short), "--vary", "plant.model_mass_scale=0.7,1.0,1.3", "--duration", "0.1",
                 "--jobs", "1", "--out", str(out)])
    assert code == 0, capsys.readouterr()
    assert (out / "plots" / "sensitivity.png").stat().st_size > 5000
    assert "# Sensitivity" in (out / "sensitivity.md").read_text()
    assert "Varied parameters and population" in (out / "report.md").read_text()
    rows = list(csv.DictReader((out / "sensitivity.csv").open()))
    runs = {(r["controller"], r["folder"].split("/")[0]): r for r in csv.DictReader((out / "runs.csv").open())}
    row = next(r for r in rows if r["metric"] == "human_effort_ratio" and r["controller"] == "gravity")
    ref = float(runs[("gravity", "plant.model_mass_scale=1.0")]["human_effort_ratio"])
    high = float(runs[("gravity", "plant.model_mass_scale=1.3")]["human_effort_ratio"])
    assert float(row["change_high_pct"]) == pytest.approx(100 * (high - ref) / abs(ref), rel=1e-9)
    assert (out / "population.md").is_file()


def test_sensitivity_rows_sort_by_effect():
    # mechanism check on hand-made results (definition of a relative change)
    class Case:
        def __init__(self, c, v):
            self.controller, self.vary, self.folder, self.subject, self.seed = c, v, "/nonexistent", "m50", 0

    class R:
        def __init__(self, c, v, x):
            self.case, self.ok, self.metrics = Case(c, v), True, {"a": x, "b": 2 * x + (v[1] == "2")}

    var = parse_vary("p=1,2,3")
    res = [R("g", ("p", t), x) for t, x in (("1", 1.0), ("2", 2.0), ("3", 4.0))]
    rows = sensitivity_rows(res, [var], ["a", "b"])
    assert [r["metric"] for r in rows] == ["a", "b"]
    assert rows[0]["change_low_pct"] == pytest.approx(-50.0) and rows[0]["change_high_pct"] == pytest.approx(100.0)
    assert rows[1]["change_high_pct"] == pytest.approx(100 * (8 - 5) / 5)
