"""``sim.simulate.warm_up``: the compiled kernels are loaded before a run's timed loop, once per process.

No timing is asserted here (the bench prints figures): these tests check the
mechanism, that the warm-up leaves nothing behind, and that a failing warm-up
changes nothing a user sees.
"""

from __future__ import annotations

import importlib
import re
import tempfile

import pytest
from _scenario_files import write_scenario

from sim.scenario import load_scenario

simulate_module = importlib.import_module("sim.simulate")  # the package's name "simulate" is the function


@pytest.fixture()
def fresh(monkeypatch, tmp_path):
    """An empty registry of warmed pairs and a temporary folder of this test's own."""
    monkeypatch.setattr(simulate_module, "_WARMED", set())
    monkeypatch.setattr(tempfile, "tempdir", str(tmp_path / "tmp"))
    (tmp_path / "tmp").mkdir()
    return tmp_path


def test_warm_up_runs_once_per_scenario_and_controller_and_leaves_nothing(fresh, monkeypatch):
    sc = load_scenario(write_scenario(fresh / "s.py", name='"warm"'))
    runs = []
    simulate = simulate_module.simulate

    def counting(scenario, controller, folder, **kw):
        runs.append((scenario.n_ticks, controller))
        return simulate(scenario, controller, folder, **kw)

    monkeypatch.setattr(simulate_module, "simulate", counting)
    assert simulate_module.warm_up(sc, "gravity") > 0.0
    assert simulate_module.warm_up(sc, "gravity") == 0.0  # already warm: nothing run
    assert simulate_module.warm_up(sc, "zero") > 0.0  # another controller is another pair
    assert runs == [(simulate_module.WARM_UP_TICKS, "gravity"), (simulate_module.WARM_UP_TICKS, "zero")]
    assert list((fresh / "tmp").iterdir()) == []  # the throw-away runs are removed


def test_run_scenario_warms_up_before_its_runs_and_keeps_its_folder_as_before(fresh, monkeypatch):
    sc = load_scenario(write_scenario(fresh / "s.py", name='"warm"'))
    order = []
    warm_up, simulate = simulate_module.warm_up, simulate_module.simulate
    monkeypatch.setattr(simulate_module, "warm_up", lambda *a: order.append("warm_up") or warm_up(*a))
    monkeypatch.setattr(simulate_module, "simulate",
                        lambda s, c, folder, **kw: order.append(kw.get("mode", "coupled")) or simulate(s, c, folder,
                                                                                                        **kw))
    result = simulate_module.run_scenario(sc, "gravity", fresh / "out", report=False)
    # the warm-up's own coupled run comes first, then the run and its human-alone baseline
    assert order == ["warm_up", "coupled", "coupled", "human_alone"]
    assert sorted(p.name for p in (fresh / "out").iterdir()) == sorted(
        ["exo.urdf", "human.urdf", "human_alone", "log", "meta.json", "metrics.json", "timing.npz"])
    assert result.metrics["sim_duration_s"] == pytest.approx(sc.duration_s)


def test_a_warm_up_that_fails_is_silent_and_the_run_reports_the_error(fresh, monkeypatch):
    sc = load_scenario(write_scenario(fresh / "s.py", name='"warm"'))
    simulate = simulate_module.simulate

    def failing(scenario, controller, folder, **kw):
        raise simulate_module.SimulationError(f"non-finite plant state in {folder}")

    monkeypatch.setattr(simulate_module, "simulate", failing)
    assert simulate_module.warm_up(sc, "gravity") >= 0.0  # no exception
    assert ("warm", "gravity") not in simulate_module._WARMED  # tried again next time
    with pytest.raises(simulate_module.SimulationError, match=re.escape(str(fresh / "out"))):
        simulate_module.run_scenario(sc, "gravity", fresh / "out", report=False)
    monkeypatch.setattr(simulate_module, "simulate", simulate)
    assert simulate_module.warm_up(sc, "gravity") > 0.0 and ("warm", "gravity") in simulate_module._WARMED
