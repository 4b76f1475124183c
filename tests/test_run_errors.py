"""``exosandbox run`` on bad input and on runs that cannot go on: one line on stderr, the log kept.

The expected behaviour is the issue's contract for ``run`` (and the module
docstring of ``sim/cli.py``): a non-zero exit status, exactly one line on
stderr naming the culprit, no traceback; a run that stops keeps its log.
"""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path
from types import MappingProxyType

import numpy as np
import pytest
from _scenario_files import write_scenario

import sim
from controllers import registry
from controllers.base import Controller
from controllers.registry import CONTROLLERS
from sim.cli import main
from sim.loop.scenario import load_scenario
from sim.loop.simulate import simulate
from sim.loop.simulation import SimulationError

REPO = Path(__file__).resolve().parents[1]
REACH = REPO / "scenarios" / "reach.py"



def run_cli(cwd: Path, *args: str) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "sim.cli", "run", *args], cwd=cwd, capture_output=True,
                          text=True, timeout=60)


def one_error_line(done: subprocess.CompletedProcess) -> str:
    """The single stderr line of a failed command (asserting the contract on the way)."""
    assert done.returncode != 0
    assert "Traceback" not in done.stderr
    lines = done.stderr.strip().splitlines()
    assert len(lines) == 1, done.stderr
    assert done.stdout == ""
    return lines[0]


# ----------------------------------------------------------------------------------------------
# bad input: refused before anything is written
# ----------------------------------------------------------------------------------------------


def test_scenario_missing_a_required_field_names_the_field(tmp_path):
    path = write_scenario(tmp_path / "no_intent.py", intent=None)
    line = one_error_line(run_cli(tmp_path, str(path)))
    assert "'intent'" in line and "no_intent.py" in line
    assert not (tmp_path / "runs").exists()


def test_scenario_with_an_unknown_subject_names_the_subject(tmp_path):
    path = write_scenario(tmp_path / "stranger.py", subject='"m51"')
    line = one_error_line(run_cli(tmp_path, str(path)))
    assert "'m51'" in line and "subject" in line
    assert not (tmp_path / "runs").exists()


def test_unknown_controller_option_names_the_controller(tmp_path):
    line = one_error_line(run_cli(tmp_path, str(REACH), "--controller", "no_such_ctrl"))
    assert "'no_such_ctrl'" in line
    assert not (tmp_path / "runs").exists()


def test_scenario_listing_an_unregistered_controller_names_it(tmp_path):
    path = write_scenario(tmp_path / "typo.py", controllers='("gravty",)')
    line = one_error_line(run_cli(tmp_path, str(path)))
    assert "unknown controller 'gravty'" in line
    assert not (tmp_path / "runs").exists()


def test_controller_not_listed_in_the_scenario_names_it(tmp_path):
    path = write_scenario(tmp_path / "only_zero.py", controllers='("zero",)')
    line = one_error_line(run_cli(tmp_path, str(path), "--controller", "gravity"))
    assert "'gravity'" in line and "zero" in line
    assert not (tmp_path / "runs").exists()


def test_missing_scenario_file_names_the_file(tmp_path):
    line = one_error_line(run_cli(tmp_path, "nowhere/absent.py"))
    assert "absent.py" in line and "does not exist" in line
    assert not (tmp_path / "runs").exists()


def test_non_empty_out_folder_is_refused_and_left_untouched(tmp_path):
    path = write_scenario(tmp_path / "short.py")
    out = tmp_path / "taken"
    out.mkdir()
    (out / "notes.txt").write_text("mine\n")
    line = one_error_line(run_cli(tmp_path, str(path), "--out", "taken"))
    assert "'taken'" in line
    assert [p.name for p in out.iterdir()] == ["notes.txt"]


# ----------------------------------------------------------------------------------------------
# runs that cannot go on
# ----------------------------------------------------------------------------------------------

#: 20 ms control period, one physics step per period: the stiff cuffs make the explicit step diverge.
_UNSTABLE = {"name": '"unstable"', "duration_s": "1.0", "controllers": '("zero",)',
             "control_period_s": "0.02", "substeps": "1"}


@pytest.fixture(scope="module")
def unstable_run(tmp_path_factory):
    cwd = tmp_path_factory.mktemp("unstable")
    path = write_scenario(cwd / "unstable.py", **_UNSTABLE)
    return run_cli(cwd, str(path), "--out", "blown"), cwd / "blown"


def test_non_finite_state_exits_with_one_line_naming_the_state_and_the_kept_log(unstable_run):
    done, folder = unstable_run
    line = one_error_line(done)
    assert "non-finite" in line
    assert any(state in line for state in ("q_exo", "v_exo", "q_human", "v_human"))
    assert "kept" in line and "blown" in line


def test_non_finite_state_keeps_an_intact_loadable_partial_log(unstable_run):
    done, folder = unstable_run
    assert done.returncode != 0
    run = sim.load_run(folder)
    assert run.meta["status"] == "failed" and not run.complete
    assert "non-finite" in run.meta["reason"]
    assert 0 < run.ticks < run.meta["n_ticks_planned"]  # it did blow up, and only after some ticks
    assert run.meta["ticks"] == run.ticks
    np.testing.assert_array_equal(run["t"], np.arange(run.ticks) * 0.02)  # no tick lost
    for name, arr in run.arrays.items():
        assert np.all(np.isfinite(arr)), name


class _NaNTorque(Controller):
    """Returns NaN torques."""

    name = "nan_torque"

    def step(self, measurement):
        return np.full(self.context.arm.nv, np.nan)


def test_controller_returning_nan_raises_simulation_error_naming_the_controller(tmp_path, monkeypatch):
    monkeypatch.setattr(registry, "CONTROLLERS", MappingProxyType({**CONTROLLERS, "nan_torque": _NaNTorque}))
    # without the safety monitor, which would command its safe state instead (tests/test_safety.py)
    scenario = load_scenario(write_scenario(tmp_path / "nan.py", controllers='("nan_torque",)', safety="None"))
    with pytest.raises(SimulationError, match="'nan_torque'"):
        simulate(scenario, "nan_torque", tmp_path / "run", seed=0)
    run = sim.load_run(tmp_path / "run")
    assert run.meta["status"] == "failed" and "'nan_torque'" in run.meta["reason"]


def test_controller_returning_nan_gives_one_line_from_main(tmp_path, monkeypatch, capsys):
    monkeypatch.setattr(registry, "CONTROLLERS", MappingProxyType({**CONTROLLERS, "nan_torque": _NaNTorque}))
    path = write_scenario(tmp_path / "nan.py", controllers='("nan_torque",)', safety="None")  # no monitor
    assert main(["run", str(path), "--out", str(tmp_path / "run")]) != 0
    err = capsys.readouterr().err
    assert len(err.strip().splitlines()) == 1 and "'nan_torque'" in err and "Traceback" not in err
