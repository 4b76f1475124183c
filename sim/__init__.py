"""How the world evolves: the coupled exoskeleton-human loop, sensors, logging and the CLI.

Main entry points: :func:`sim.load_scenario`, :class:`sim.Simulation` (a run
tick by tick, in memory: notebooks and scripts), :func:`sim.run_scenario`
(a run folder with its baseline, metrics and report), :func:`sim.loop.simulate`
and :func:`sim.load_run`. Scenario files import :class:`sim.Scenario`,
:class:`sim.JointIntent`, :class:`sim.Via`, :func:`sim.deg`, :class:`sim.SafetyParams` (the safety
monitor's settings), the faults of :mod:`sim.physics.faults` (:class:`sim.SensorDropout`, ...), the drive
models' parameters (:class:`sim.ActuatorParams`, :class:`sim.IdealActuatorParams`,
:class:`sim.SeriesElasticParams`), the
wearer's impairment of :mod:`sim.physics.impairment` (:class:`sim.Impairment`, :class:`sim.Weakness`,
:class:`sim.Spasticity`, :class:`sim.Contracture`, :class:`sim.Tremor`), and the exercise's reference hand path
:class:`sim.HandPath` with the tasks that follow it (:class:`sim.AssistAsNeeded`, :class:`sim.GuidanceTunnel`)
from here.
"""

from controllers.safety import SafetyParams
from controllers.tasks import AssistAsNeeded, GuidanceTunnel, HandPath
from sim.experiments.run import run_scenario
from sim.loop.runlog import Run, RunLog, load_run
from sim.loop.scenario import Scenario, ScenarioError, deg, load_scenario
from sim.loop.simulate import RunResult, simulate
from sim.loop.simulation import Simulation, SimulationError, Trajectory
from sim.physics.actuators import ActuatorParams, IdealActuatorParams
from sim.physics.faults import (
                                ControlDelay,
                                CuffSlip,
                                EncoderGlitch,
                                Fault,
                                SensorBiasDrift,
                                SensorBiasStep,
                                SensorDelay,
                                SensorDropout,
                                SensorNoiseBurst,
                                StuckDrive,
                                StuckEncoder,
                                TorqueLoss,
                                WearerJerk,
                                random_faults,
)
from sim.physics.impairment import Contracture, Impairment, Spasticity, Tremor, Weakness
from sim.physics.intent import JointIntent, Via
from sim.physics.sea import SeriesElasticParams

__all__ = ["JointIntent", "Via", "Run", "RunLog", "load_run", "Scenario", "ScenarioError", "deg", "load_scenario",
           "RunResult", "SimulationError", "run_scenario", "simulate", "Simulation", "Trajectory",
           "Fault", "SensorDropout", "SensorBiasStep", "SensorBiasDrift", "SensorNoiseBurst", "EncoderGlitch",
           "StuckEncoder", "SensorDelay", "ControlDelay", "TorqueLoss", "StuckDrive", "CuffSlip", "WearerJerk",
           "random_faults", "SafetyParams", "Impairment", "Weakness", "Spasticity", "Contracture", "Tremor",
           "HandPath", "AssistAsNeeded", "GuidanceTunnel",
           "ActuatorParams", "IdealActuatorParams", "SeriesElasticParams"]
