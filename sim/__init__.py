"""How the world evolves: the coupled exoskeleton-human loop, sensors, logging and the CLI.

Main entry points: :func:`sim.load_scenario`, :func:`sim.run_scenario`,
:func:`sim.simulate` and :func:`sim.load_run`.
"""

from sim.loop.runlog import Run, RunLog, load_run
from sim.loop.scenario import Scenario, ScenarioError, deg, load_scenario
from sim.loop.simulate import RunResult, SimulationError, run_scenario, simulate
from sim.physics.intent import JointIntent, Via

__all__ = ["JointIntent", "Via", "Run", "RunLog", "load_run", "Scenario", "ScenarioError", "deg", "load_scenario",
           "RunResult", "SimulationError", "run_scenario", "simulate"]
