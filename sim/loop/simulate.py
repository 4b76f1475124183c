"""A run folder from a scenario and a controller name: :class:`~sim.loop.simulation.Simulation` streamed to a log.

The rows go to a :class:`~sim.loop.runlog.RunLog` as the run goes, chunk by
chunk, so a run that stops (a non-finite state, SIGINT or SIGTERM, a full disk, a crash) keeps
every finished chunk and says in its ``meta.json`` why it stopped.  The same
seed gives bit-identical logs (:mod:`sim.loop.simulation`).
"""

from __future__ import annotations

import contextlib
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from sim.loop.interrupt import stop_on_signals
from sim.loop.scenario import Scenario
from sim.loop.simulation import Observer, Progress, Simulation, finish_run_folder, start_run_folder
from sim.physics.plant import PlantMode

__all__ = ["RunResult", "simulate"]


@dataclass(frozen=True)
class RunResult:
    """Where a run was written, its metrics, and whether it finished."""

    folder: Path
    metrics: dict
    complete: bool


def simulate(
    scenario: Scenario,
    controller_name: str,
    folder: str | Path,
    *,
    seed: int | None = None,
    mode: PlantMode = "coupled",
    progress: Progress | None = None,
    observer: Observer | None = None,
) -> RunResult:
    """Run one scenario with one controller and write the run folder.

    ``Simulation(scenario, controller_name, seed=seed, mode=mode).run(log=...)``
    into a new run folder: ``meta.json``, ``exo.urdf`` and ``human.urdf``,
    the log, ``timing.npz`` (and, without the coupling, a ``metrics.json`` of
    the run's duration and tick time).

    Parameters
    ----------
    scenario : Scenario
    controller_name : str
        A name known to :func:`controllers.registry.make_controller` (ignored
        for ``mode="human_alone"``).
    folder : path
        Run folder to create (must not hold a run already).
    seed : int, optional
        Overrides ``scenario.seed``.
    mode : {"coupled", "human_alone", "exo_alone"}
    progress : callable(done_ticks, total_ticks), optional
    observer : callable(t_s, q_exo, q_human, forces_world), optional
        Called after every tick (a live viewer; it must throttle itself).

    Raises
    ------
    SimulationError
        On a non-finite state or command; the log up to the last finished
        tick stays loadable, and its ``meta.json`` says why it stopped.
    KeyboardInterrupt
        On SIGINT or SIGTERM (:class:`~sim.loop.interrupt.RunInterrupted`,
        from the main thread: :func:`~sim.loop.interrupt.stop_on_signals`):
        the buffered ticks are written as the last chunk, ``timing.npz``
        holds the ticks done and ``meta.json`` says ``"interrupted"``.
    sim.loop.runlog.RunLogError
        When a chunk or file cannot be written (a full disk): ``meta.json``
        says ``"failed"`` with the reason, every chunk written before stays
        loadable and no temporary file is left.
    """
    sim = Simulation(scenario, controller_name, seed=seed, mode=mode)
    folder = Path(folder)
    with stop_on_signals(), start_run_folder(folder, sim.columns, sim.meta, sim.urdfs) as log:
        try:
            trajectory = sim.run(log=log, progress=progress, observer=observer)
        except KeyboardInterrupt:  # the wall-clock figures of the ticks done, for the metrics of that part
            with contextlib.suppress(OSError, ValueError):
                np.savez(folder / "timing.npz", **sim.trajectory.timing)
            raise
        metrics = finish_run_folder(log, trajectory)
    return RunResult(folder, metrics, True)
