"""Sweeps: a scenario run for every combination of controller variant, wearer and seed; or several scenarios.

Every run is independent (its own process, its own seed), so a sweep is an
embarrassingly parallel map.  Two executors run the same function,
:func:`run_case`:

* local processes: ``jobs`` runs at a time, in ``jobs - 1`` worker processes
  (forked on Linux, so that a worker starts with every module already
  imported; spawned elsewhere) and in this process, which takes the next case
  whenever it is free (it runs cases while the workers start); a free
  process prefers another controller's case of a wearer and seed whose
  baseline it has already simulated; ``jobs=1`` runs every case in this
  process;
* an existing Dask distributed cluster (``dask_address``), for users who
  outgrow one machine.  The workers must see the scenario file and ``out_dir``
  at the same paths (a shared file system).

A run's numbers depend only on its scenario, controller, subject and seed,
never on the executor (the logs are bit-identical per seed), except the
wall-clock figures (:data:`sim.analysis.metrics.TIMING_KEYS`). The human-alone
baseline does not depend on the controller: a local process that already ran
a case of the same wearer and seed copies its baseline
(:func:`sim.experiments.run.run_scenario`'s ``baseline_from``, through the
process's :class:`~sim.experiments.run.Batch`) instead of simulating it again
(a Dask task simulates its own).  A run that fails is recorded with its
error; the others go on.

Output folder::

    runs.csv, runs.md          one row per run (status, error, every scalar metric)
    summary.csv, summary.md    mean ± standard deviation per controller, over all
                               subjects and seeds, and per (controller, subject)
    report.md, plots/*.png     the summary, the plots and the cautions
    sweep.json                 the sweep's settings and every run's metrics
    plan.json                  its runs, scenario files' digests and software, for ``resume``
    CONTROLLER/SUBJECT/seedN/  the run folders (each with its human-alone baseline)

A sweep over several scenario files runs all their cases in the same
processes (one start-up, one queue: a process that is free takes the next
case of any scenario) and writes one such folder per scenario, named by the
file's stem, written as soon as that scenario's last run is back, beside the
tables of the whole sweep::

    runs.csv, runs.md          one row per run, the scenario first
    summary.csv, summary.md    the scenarios' summary rows, the scenario first
    report.md                  transparency across the scenarios, each scenario's verdicts, the cautions
    sweep.json                 the settings and every run's metrics
    plan.json                  as above
    SCENARIO/                  a sweep folder as above (without plan.json), for that scenario's runs

An interrupted sweep goes on where it stopped with ``resume=True`` (the
same scenarios and options): the runs it finished are read back, the others
run, and every table is then as the uninterrupted sweep's.
"""

from __future__ import annotations

import contextlib
import csv
import hashlib
import json
import math
import multiprocessing
import os
import queue
import shutil
import signal
import statistics
import sys
import threading
import time
import traceback
from collections.abc import Callable, Iterable, Mapping, Sequence
from dataclasses import dataclass, field, replace
from pathlib import Path

import numpy as np

from models.errors import ParameterError, SandboxError, UnknownNameError
from models.human import SUBJECTS, HumanParams, Subject
from sim.analysis.metrics import METRICS, flat_metrics
from sim.analysis.tables import run_rows, write_csv, write_json
from sim.experiments.cluster import dask_client
from sim.experiments.run import Batch, run_scenario
from sim.experiments.vary import Variation, check_paths, sample_population, vary_scenario, write_vary_outputs
from sim.loop.runlog import environment_metadata
from sim.loop.scenario import load_scenario, scenario_files_in
from sim.output.report import is_applicable, write_sweep_report, write_sweeps_report

__all__ = ["SweepCase", "CaseResult", "SweepResult", "SweepError", "run_case", "run_sweep", "summarize", "serve",
           "baseline_key", "plan_sweep", "scenario_files", "scenario_folders", "sweep_plan", "check_plan",
           "load_sweep", "PLAN_FILE", "vary_folder"]


class SweepError(SandboxError, ValueError):
    """A sweep cannot start (a bad option, an unknown name, an output folder in use)."""


@dataclass(frozen=True)
class SweepCase:
    """One run of a sweep (plain values, so that it pickles to any worker)."""

    scenario_path: str
    controller: str
    subject: str
    seed: int
    folder: str
    duration_s: float | None = None
    #: The scenario's folder in a sweep over several scenarios (its file's stem); ``""`` in a one-scenario sweep.
    scenario: str = ""
    #: Whether the run's report draws its figures (:func:`sim.output.report.write_run_report`).
    run_figures: bool = False
    #: A scenario parameter set for this run: ``(field path, value as typed)``
    #: (:mod:`sim.experiments.vary`); None: the scenario's own values.
    vary: tuple[str, str] | None = None
    #: A sampled wearer, ``(stature_m, mass_kg, sex)`` (:func:`sim.experiments.vary.sample_population`), named by
    #: ``subject`` (``p001``, ...); None: ``subject`` is a built-in subject.
    wearer: tuple[float, float, str] | None = None

    @property
    def label(self) -> str:
        """``controller/subject/seedN``, after ``SCENARIO/`` in a sweep over several scenarios and after
        ``PATH=VALUE/`` in a sweep that varies a parameter."""
        run = f"{self.controller}/{self.subject}/seed{self.seed}"
        if self.vary is not None:
            run = f"{vary_folder(self.vary)}/{run}"
        return f"{self.scenario}/{run}" if self.scenario else run

    @property
    def variant(self) -> str:
        """The controller, with the varied parameter's value: ``gravity`` or ``gravity @ plant.model_mass_scale=0.7``
        (the group of the summary rows)."""
        return self.controller if self.vary is None else f"{self.controller} @ {self.vary[0]}={self.vary[1]}"


def vary_folder(vary: tuple[str, str]) -> str:
    """The folder of the runs of one varied value, ``PATH=VALUE`` with any character other than letters, digits,
    ``.``, ``-``, ``_``, ``=`` and ``,`` written ``_``."""
    text = f"{vary[0]}={vary[1]}"
    return "".join(ch if ch.isalnum() or ch in ".-_=," else "_" for ch in text)


@dataclass(frozen=True)
class CaseResult:
    """What came back from one run: its metrics, or the error that stopped it."""

    case: SweepCase
    metrics: dict | None
    error: str | None
    wall_time_s: float

    @property
    def ok(self) -> bool:
        return self.error is None


@dataclass(frozen=True)
class SweepResult:
    """Every run's result (in the order of the combinations) and the summary rows."""

    out_dir: Path
    results: tuple[CaseResult, ...]
    summary: tuple[dict, ...] = field(default_factory=tuple)
    wall_time_s: float = 0.0

    @property
    def failed(self) -> tuple[CaseResult, ...]:
        return tuple(r for r in self.results if not r.ok)


def run_case(case: SweepCase, batch: Batch | None = None) -> CaseResult:
    """Run one case (:func:`sim.experiments.run.run_scenario`) and return its metrics or its error.

    ``batch``: the :class:`~sim.experiments.run.Batch` of the process running
    the case, whose human-alone baseline of another controller's case of the
    same wearer and seed (:func:`baseline_key`) is copied instead of simulated
    again; none (a Dask task): every case simulates its own.

    Never raises for a failing run: the error (type and message, plus the last
    traceback line for an unexpected one) is returned, so one bad combination
    does not stop a sweep.
    """
    t0 = time.perf_counter()
    key = baseline_key(case)
    batch = Batch() if batch is None else batch
    try:
        subject = case.subject if case.wearer is None else HumanParams(Subject(*case.wearer))
        scenario = load_scenario(case.scenario_path, subject=subject)
        if case.vary is not None:
            path, text = case.vary
            scenario = vary_scenario(scenario, path, Variation(path, (text,)).value(text))
        if case.duration_s is not None:
            scenario = replace(scenario, duration_s=case.duration_s)
        # the human-alone baseline of another controller's case of this wearer and seed, if this process ran one
        result = run_scenario(scenario, case.controller, case.folder, seed=case.seed, figures=case.run_figures,
                              baseline_from=batch.baseline_for(key), batch=batch)
        batch.share(key, Path(case.folder) / "human_alone")
        return CaseResult(case, result.metrics, None, time.perf_counter() - t0)
    except SandboxError as e:
        return CaseResult(case, None, f"{type(e).__name__}: {e}", time.perf_counter() - t0)
    except Exception as e:  # an unexpected failure is reported, never allowed to stop the sweep
        where = traceback.extract_tb(e.__traceback__)[-1]
        return CaseResult(case, None, f"{type(e).__name__}: {e} (at {Path(where.filename).name}:{where.lineno})",
                          time.perf_counter() - t0)


def _seeds(seeds: int | Sequence[int], first: int) -> tuple[int, ...]:
    if isinstance(seeds, (int, np.integer)) and not isinstance(seeds, bool):
        if seeds < 1:
            raise SweepError(f"seeds must be >= 1, got {seeds}")
        return tuple(range(first, first + int(seeds)))
    out = tuple(int(s) for s in seeds)
    if not out or any(s < 0 for s in out) or len(set(out)) != len(out):
        raise SweepError(f"seeds must be distinct integers >= 0, got {seeds!r}")
    return out


def plan_sweep(scenario_path: str | Path, controllers: Sequence[str] | None, subjects: Sequence[str],
               seeds: int | Sequence[int], out_dir: str | Path, *, duration_s: float | None = None,
               scenario: str = "", vary: Sequence[Variation] = (), population: int | None = None
               ) -> list[SweepCase]:
    """Check the options and list the cases, controllers outermost, then subjects, then seeds.

    ``controllers=None`` takes every variant the scenario lists; ``scenario``
    is the :attr:`SweepCase.scenario` of the cases (a sweep over several
    scenarios).  With ``vary`` (:class:`sim.experiments.vary.Variation`), every
    value of each varied field is run with the others at the scenario's own
    (one at a time), outermost, in folders ``PATH=VALUE/``; with
    ``population`` = N, the subjects are N wearers sampled from ANSUR II
    (:func:`sim.experiments.vary.sample_population`, seeded by the sweep's first
    seed) instead of ``subjects``.
    """
    loaded = load_scenario(scenario_path)  # a broken file fails here, once, with its own message
    controllers = list(loaded.controllers) if controllers is None else list(dict.fromkeys(controllers))
    subjects = list(dict.fromkeys(subjects))
    seed_list = _seeds(seeds, loaded.seed)
    wearers: dict[str, tuple[float, float, str]] = {}
    if population is not None:
        if isinstance(population, bool) or not isinstance(population, int) or population < 2:
            raise SweepError(f"population must be an integer >= 2 (a spread needs two wearers), got {population!r}")
        wearers = {name: (s.stature_m, s.mass_kg, s.sex) for name, s in sample_population(population, seed_list[0])}
        subjects = list(wearers)
    if vary:
        check_paths(loaded, vary)
    if not controllers:
        raise SweepError("give at least one controller")
    if not subjects:
        raise SweepError("give at least one subject")
    for c in controllers:
        if c not in loaded.controllers:
            raise UnknownNameError(f"scenario {loaded.name!r} ({Path(scenario_path).name}) supports the controllers "
                                   f"{', '.join(loaded.controllers)}; got {c!r}")
    for s in subjects:
        if s not in SUBJECTS and s not in wearers:
            raise UnknownNameError(f"unknown subject {s!r}; built-in subjects are {', '.join(SUBJECTS)}")
    if duration_s is not None and not (isinstance(duration_s, (int, float)) and math.isfinite(duration_s)
                                       and duration_s > 0):
        raise ParameterError(f"duration_s must be a finite number > 0, got {duration_s!r}")
    out = Path(out_dir)
    path = str(Path(scenario_path).resolve())
    points: list[tuple[str, str] | None] = [(v.path, text) for v in vary for text in v.values] or [None]
    return [SweepCase(path, c, s, seed,
                      str(((out if p is None else out / vary_folder(p)) / c / s / f"seed{seed}").resolve()),
                      duration_s, scenario, vary=p, wearer=wearers.get(s))
            for p in points for c in controllers for s in subjects for seed in seed_list]


def scenario_files(paths: Sequence[str | Path]) -> list[Path]:
    """The scenario files of a sweep: each path as given, a folder by its scenario files
    (:func:`sim.loop.scenario.scenario_files_in`: sorted by name, modules without a ``SCENARIO`` left out)."""
    files: list[Path] = []
    for p in paths:
        path = Path(p)
        if path.is_dir():
            found = scenario_files_in(path)
            if not found:
                raise SweepError(f"no scenario file (*.py) in the folder {str(path)!r}")
            files += found
        else:
            files.append(path)
    return files


def scenario_folders(scenario_paths: Sequence[str | Path]) -> dict[str, str]:
    """The folder of each scenario file in a sweep over several (its stem), keyed by the resolved path.

    The same file given twice is swept once. Two files of the same stem (from
    different folders) would share a folder: a :class:`SweepError` names both.
    """
    folders: dict[str, str] = {}
    for p in scenario_paths:
        path = Path(p)
        key = str(path.resolve())
        if key in folders:
            continue
        clash = next((other for other, stem in folders.items() if stem == path.stem), None)
        if clash is not None:
            raise SweepError(f"two scenario files share the name {path.stem!r}, and so would share its folder: "
                             f"{clash!r} and {key!r}; rename one (or copy it under another name)")
        folders[key] = path.stem
    return folders


def baseline_key(case: SweepCase) -> tuple:
    """The cases of one key share their human-alone baseline (it does not depend on the controller)."""
    return (case.scenario_path, case.subject, case.seed, case.duration_s, case.vary, case.wearer)


def _start_method() -> str:
    """``fork`` on Linux: a worker starts as a copy of this process, with every module already imported
    (about a second per worker saved); ``spawn`` elsewhere, where forking a process that has loaded system
    frameworks is unsafe (macOS) or impossible (Windows).

    :func:`_local` forks before it starts any thread of its own. Python 3.12 and later still warn
    (``DeprecationWarning``, hidden by default) because numpy's OpenBLAS keeps a thread pool; OpenBLAS
    registers a fork handler when it loads (``openblas_fork_handler``, driver/others/memory.c of its
    source) that shuts the pool down before a fork, and starts it again when next needed.
    """
    return "fork" if sys.platform.startswith("linux") else "spawn"


#: How often a sweep's worker process checks that the sweep's process is alive [s].
PARENT_POLL_S = 0.5
#: How long a worker whose sweep has gone may take to close its run before it exits regardless [s].
ORPHAN_GRACE_S = 10.0


def _watch_parent(parent_pid: int) -> None:
    """In a worker: once the sweep's process ``parent_pid`` has gone (this one re-parented), stop as on SIGTERM
    (the run going on is recorded as interrupted), and exit after :data:`ORPHAN_GRACE_S` whatever happens."""
    while os.getppid() == parent_pid:
        time.sleep(PARENT_POLL_S)
    os.kill(os.getpid(), signal.SIGTERM)
    time.sleep(ORPHAN_GRACE_S)
    os._exit(1)


def serve(conn, parent_pid: int | None = None) -> None:
    """A worker process: run each ``(function, case)`` it is sent, as ``function(case, batch)``, and send back the
    result, until sent ``None``.

    The worker makes its own :class:`~sim.experiments.run.Batch`: a forked
    worker never trusts the baselines its parent made, and reuses only those
    it simulates itself, as a spawned one does.  Interrupted (Ctrl-C reaches
    every process of the terminal, SIGTERM), it stops quietly; the parent
    reports the case.  It also stops when the process ``parent_pid`` (default:
    its parent at the call) has gone, killed or not, checking every
    :data:`PARENT_POLL_S` s: a sweep never leaves a worker behind.
    """
    parent_pid = os.getppid() if parent_pid is None else parent_pid
    threading.Thread(target=_watch_parent, args=(parent_pid,), name="exosandbox-sweep-parent-watch",
                     daemon=True).start()
    batch = Batch()
    try:
        while (job := conn.recv()) is not None:
            fn, case = job
            conn.send(fn(case, batch))
    except (KeyboardInterrupt, EOFError, OSError):  # interrupted, or the parent has gone
        pass
    finally:
        conn.close()


class _CaseQueue:
    """The cases left, handed out one at a time to the process that asks for one (thread-safe).

    A process asks with the set of baseline keys (:func:`baseline_key`) of
    the cases it has taken, which :meth:`take` updates.
    """

    def __init__(self, cases: Iterable[SweepCase]) -> None:
        self._todo = list(cases)
        self._lock = threading.Lock()
        self._started: set[tuple] = set()  # keys some process has taken a case of

    def take(self, mine: set[tuple]) -> SweepCase | None:
        """The first case whose baseline key is in ``mine``, else the first of a key no process has taken,
        else the first case; ``None`` when none is left."""
        with self._lock:
            todo = self._todo
            if not todo:
                return None
            i = next((i for i, c in enumerate(todo) if baseline_key(c) in mine),
                     next((i for i, c in enumerate(todo) if baseline_key(c) not in self._started), 0))
            case = todo.pop(i)
            self._started.add(baseline_key(case))
            mine.add(baseline_key(case))
            return case

    def clear(self) -> None:
        with self._lock:
            self._todo.clear()


def _local(cases: Sequence[SweepCase], jobs: int, batch: Batch) -> Iterable[CaseResult]:
    """Run the cases ``jobs`` at a time: in ``jobs - 1`` worker processes and in this process.

    Every worker is started (:func:`_start_method`) before any thread, and is
    driven by a thread of this process that hands it one case at a time,
    whenever it is free.  This process takes the next case whenever it is free
    too, so it works while the workers start.  A process that is free takes,
    first, a case whose human-alone baseline it has already simulated (another
    controller of the same wearer and seed: the baseline is copied, not
    simulated again), then a case of a wearer and seed no process has started,
    then the next case.  A worker that dies (killed, or a crash in compiled
    code) has its case reported as failed; the other processes take the cases
    left.  Results come in completion order.
    """
    if jobs == 1:
        for c in cases:
            yield run_case(c, batch)
        return
    todo = _CaseQueue(cases)
    finished: queue.SimpleQueue = queue.SimpleQueue()
    _done = object()  # a driving thread's last item

    def drive(proc, conn) -> None:  # hand one worker its cases, in a thread of this process
        mine: set[tuple] = set()
        try:
            while (case := todo.take(mine)) is not None:
                try:
                    conn.send((run_case, case))
                    result = conn.recv()
                except (EOFError, OSError):  # the worker has gone: its case failed, the others take the rest
                    proc.join(timeout=5.0)
                    finished.put(CaseResult(case, None, f"WorkerExit: the worker process running this case "
                                                        f"stopped (exit code {proc.exitcode})", math.nan))
                    return
                finished.put(result)
            conn.send(None)
        except (EOFError, OSError):
            pass
        finally:
            finished.put(_done)

    ctx = multiprocessing.get_context(_start_method())
    workers: list = []
    threads: list[threading.Thread] = []
    try:
        for _ in range(jobs - 1):  # every worker before any thread: a fork copies no thread's locks
            ours, theirs = ctx.Pipe()
            proc = ctx.Process(target=serve, args=(theirs, os.getpid()), name="exosandbox-sweep-worker",
                               daemon=True)
            proc.start()
            theirs.close()
            workers.append((proc, ours))
        threads = [threading.Thread(target=drive, args=w, name="exosandbox-sweep-driver", daemon=True)
                   for w in workers]
        for t in threads:
            t.start()
        mine: set[tuple] = set(batch.keys)
        running = len(threads)
        while True:
            while running and not finished.empty():
                item = finished.get()
                if item is _done:
                    running -= 1
                else:
                    yield item
            case = todo.take(mine)
            if case is None:
                break
            yield run_case(case, batch)
        while running:
            item = finished.get()
            if item is _done:
                running -= 1
            else:
                yield item
    except BaseException:  # interrupted (SIGINT, SIGTERM): the workers stop too, their runs marked interrupted
        for proc, _ in workers:
            if proc.is_alive():
                with contextlib.suppress(OSError):
                    os.kill(proc.pid, signal.SIGTERM)
        raise
    finally:
        todo.clear()  # no new case to the workers; cases already running finish
        for t in threads:
            t.join()
        for proc, conn in workers:
            conn.close()
            proc.join(timeout=5.0)
            if proc.is_alive():
                proc.terminate()
                proc.join()


def _dask(cases: Sequence[SweepCase], address: str) -> Iterable[CaseResult]:
    with dask_client(address, SweepError) as client:
        from dask.distributed import as_completed

        futures = client.map(run_case, list(cases), pure=False)
        for f in as_completed(futures):
            yield f.result()


def run_sweep(
    scenario_path: str | Path | Sequence[str | Path],
    controllers: Sequence[str] | None,
    subjects: Sequence[str],
    seeds: int | Sequence[int],
    *,
    out_dir: str | Path,
    jobs: int | None = None,
    dask_address: str | None = None,
    progress: bool = False,
    duration_s: float | None = None,
    on_result: Callable[[CaseResult], None] | None = None,
    resume: bool = False,
    batch: Batch | None = None,
    run_figures: bool = False,
    vary: Sequence[Variation] = (),
    population: int | None = None,
) -> SweepResult:
    """Run every (controller, subject, seed) of a scenario, or of several, and write the tables, plots and report.

    Parameters
    ----------
    scenario_path : path, or sequence of paths
        Scenario file; subjects are applied with :func:`sim.loop.scenario.load_scenario`
        (``subject=``), so a file's ``for_subject`` hook is honoured.  Several
        files run in one sweep: every case of every file in the same processes,
        each file's runs and report in a folder named by its stem (see the
        module's docstring); a one-file sequence is a one-scenario sweep.  A
        folder stands for its scenario files (:func:`scenario_files`).
    controllers : sequence of str, or None
        Controller variants, each listed by every scenario; ``None``: each
        scenario's own list.
    subjects : sequence of str
        Built-in subject names.
    seeds : int or sequence of int
        A count n (seeds ``scenario.seed`` ... ``scenario.seed + n - 1``, each
        scenario from its own) or the seeds themselves.
    out_dir : path
        Output folder; created, and must be empty if it exists (unless ``resume``).
        The sweep's plan is written there first (``plan.json``).
    jobs : int, optional
        Runs at a time on this machine (default: all cores): ``jobs - 1``
        worker processes and this one.  Ignored with ``dask_address``.
    dask_address : str, optional
        Address of a running Dask scheduler (``tcp://host:8786``) to run on instead.
    progress : bool
        Show a progress bar (tqdm) on standard error.
    duration_s : float, optional
        Override the scenarios' duration [s] (short trial sweeps).
    on_result : callable(CaseResult), optional
        Called as each run finishes, in completion order.
    resume : bool
        Go on with an interrupted sweep in ``out_dir``, given the same
        scenarios and options: the runs it finished are kept (their metrics
        read back, never simulated again), the others run, and the tables
        and reports are written over all of them.  The plan must match
        ``plan.json``: the same cases, the same scenario files to the byte,
        the same software versions (:func:`check_plan`); a run folder left
        unfinished (no ``report.md``) is deleted and run again, with the same
        seed, so with the same numbers.
    batch : Batch, optional
        The :class:`~sim.experiments.run.Batch` of this process (its
        baselines and warmed-up pairs), to share with earlier runs of this
        process; default: a new one.  Worker processes make their own.
    run_figures : bool
        Draw every run's figures in its ``report.md`` (about 2 s per run,
        longer than a short run); by default a sweep's run reports carry the
        tables and the controller section, and the sweep's own report its
        figures.
    vary : sequence of Variation
        Scenario parameters to vary one at a time by field path
        (:func:`sim.experiments.vary.parse_vary`); the sweep's folder gains
        ``sensitivity.csv``, ``sensitivity.md`` and ``plots/sensitivity.png``
        (:func:`sim.experiments.vary.write_vary_outputs`).  One scenario file only.
    population : int, optional
        Sample this many wearers from ANSUR II instead of ``subjects``; the
        folder gains ``population.csv`` and ``population.md`` (means, 95 %
        intervals and paired differences between variants).  One scenario file only.

    Returns
    -------
    SweepResult
        Results in the order of the combinations (scenario by scenario);
        ``runs.csv`` is rewritten after every finished run, so an interrupted
        sweep keeps its table.  Over several scenarios, the summary rows carry
        a ``scenario`` key first.
    """
    out = Path(out_dir)
    if resume:
        if not (out / PLAN_FILE).is_file():
            raise SweepError(f"nothing to resume: {str(out)!r} holds no {PLAN_FILE} of a sweep")
    elif out.exists() and (not out.is_dir() or any(out.iterdir())):
        raise SweepError(f"output folder {str(out)!r} already holds something; choose another (or resume the "
                         "sweep in it)")
    if jobs is None:
        jobs = os.cpu_count() or 1
    if not (isinstance(jobs, int) and jobs >= 1):
        raise SweepError(f"jobs must be an integer >= 1, got {jobs!r}")
    paths = scenario_files([scenario_path] if isinstance(scenario_path, (str, Path)) else list(scenario_path))
    if not paths:
        raise SweepError("give at least one scenario file")
    folders = scenario_folders(paths) if len(paths) > 1 else {}
    if (vary or population is not None) and len(folders) > 1:
        raise SweepError("vary and population take one scenario file; sweep the scenarios one at a time")
    if len(folders) > 1:  # every file is checked (and every case listed) before anything is written
        cases = [c for path, name in folders.items()
                 for c in plan_sweep(path, controllers, subjects, seeds, out / name, duration_s=duration_s,
                                     scenario=name)]
    else:
        folders = {}
        cases = plan_sweep(paths[0], controllers, subjects, seeds, out, duration_s=duration_s, vary=vary,
                           population=population)
    if run_figures:
        cases = [replace(c, run_figures=True) for c in cases]
    plan = sweep_plan(cases, out)
    finished: dict[str, CaseResult] = {}
    if resume:
        check_plan(out, plan)
        finished = _finished_cases(out, cases)
        for c in cases:  # what an interrupted run left: run again from the start (same seed, same numbers)
            if c.folder not in finished and Path(c.folder).exists():
                shutil.rmtree(c.folder)
    else:
        out.mkdir(parents=True, exist_ok=True)
        write_json(out / PLAN_FILE, plan)
    todo = [c for c in cases if c.folder not in finished]
    executor = f"dask {dask_address}" if dask_address else f"local, {jobs} jobs"
    settings = {"controllers": list(dict.fromkeys(c.controller for c in cases)),
                "subjects": list(dict.fromkeys(subjects)), "seeds": sorted({c.seed for c in cases}),
                "duration_s": duration_s, "executor": executor}
    if vary:
        settings["vary"] = {v.path: list(v.values) for v in vary}
    if population is not None:
        settings["population"] = population
        settings["subjects"] = list(dict.fromkeys(c.subject for c in cases))
    left = {name: sum(c.scenario == name for c in todo) for name in folders.values()}
    parts: dict[str, SweepResult] = {}
    bar = _bar(len(cases), len(finished)) if progress else None
    done: dict[str, CaseResult] = dict(finished)
    t0 = time.perf_counter()
    for name, n in left.items():  # a scenario a resumed sweep had finished
        if not n:
            parts[name] = _write_part(out, next(c for c in cases if c.scenario == name), cases, done, settings, t0,
                                      len(folders))
    if not todo:
        runner: Iterable[CaseResult] = ()
    else:
        runner = (_dask(todo, dask_address) if dask_address
                  else _local(todo, min(jobs, len(todo)), Batch() if batch is None else batch))
    try:
        for r in runner:
            done[r.case.folder] = r
            write_csv(out / "runs.csv", run_rows([done[c.folder] for c in cases if c.folder in done]))
            if bar is not None:
                bar.update(1)
                bar.set_postfix_str(f"{len(done) - sum(x.ok for x in done.values())} failed", refresh=False)
            if on_result is not None:
                on_result(r)
            if folders:
                left[r.case.scenario] -= 1
                if not left[r.case.scenario]:  # that scenario's last run: its report, while the others run on
                    parts[r.case.scenario] = _write_part(out, r.case, cases, done, settings, t0, len(folders))
    finally:
        if bar is not None:
            bar.close()
    results = tuple(done[c.folder] for c in cases)
    if not folders:
        result = SweepResult(out, results, tuple(summarize(results)), time.perf_counter() - t0)
        write_sweep_report(result, {"scenario": str(Path(paths[0])), **settings})
        if vary or population is not None:
            write_vary_outputs(result, vary)
        return result
    summary = tuple({"scenario": name, **row} for name in folders.values() for row in parts[name].summary)
    result = SweepResult(out, results, summary, time.perf_counter() - t0)
    write_sweeps_report(result, {"scenarios": [str(Path(p)) for p in dict.fromkeys(paths)], **settings},
                        [(name, parts[name]) for name in folders.values()])
    return result


#: The sweep's plan, written in its folder before the first run (:func:`sweep_plan`, :func:`check_plan`).
PLAN_FILE = "plan.json"


def sweep_plan(cases: Sequence[SweepCase], out: Path) -> dict:
    """What a resumed sweep must share with the sweep it goes on with: its cases (folder relative to ``out``,
    scenario file, controller, subject, seed, duration), the SHA-256 of every scenario file, and the software
    (:func:`sim.loop.runlog.environment_metadata` without ``git_dirty``)."""
    root = out.resolve()
    files = {}
    for c in cases:
        if c.scenario_path not in files:
            files[c.scenario_path] = hashlib.sha256(Path(c.scenario_path).read_bytes()).hexdigest()
    environment = {k: v for k, v in environment_metadata().items() if k != "git_dirty"}
    return {"cases": [[Path(c.folder).relative_to(root).as_posix(), Path(c.scenario_path).name, c.controller,
                       c.subject, c.seed, c.duration_s]
                      + ([{"vary": c.vary, "wearer": c.wearer}] if c.vary is not None or c.wearer is not None else [])
                      for c in cases],
            "scenario_sha256": {Path(p).name: h for p, h in files.items()}, "environment": environment}


def check_plan(out: Path, plan: Mapping) -> None:
    """Raise :class:`SweepError`, naming the first difference, unless ``plan`` is the plan recorded in ``out``."""
    path = Path(out) / PLAN_FILE
    try:
        recorded = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError) as e:
        raise SweepError(f"cannot read the plan of the sweep to resume, {str(path)!r}: {e}") from e
    old_cases = [tuple(c) for c in recorded.get("cases", [])]
    new_cases = [tuple(c) for c in json.loads(json.dumps(plan["cases"]))]
    if old_cases != new_cases:
        extra = [c for c in new_cases if c not in old_cases]
        missing = [c for c in old_cases if c not in new_cases]
        what = (f"this call adds {extra[0][0]}" if extra
                else f"this call leaves out {missing[0][0]}" if missing else "the order of the runs differs")
        raise SweepError(f"the sweep in {str(out)!r} was planned with other runs ({len(old_cases)} runs, this "
                         f"call {len(new_cases)}; {what}): resume it with the same scenarios and options")
    for name, digest in plan["scenario_sha256"].items():
        if recorded.get("scenario_sha256", {}).get(name) != digest:
            raise SweepError(f"the scenario file {name} changed since the sweep in {str(out)!r} started: its runs "
                             "would mix two scenarios; start a new sweep")
    old_env = recorded.get("environment", {})
    for key, value in plan["environment"].items():
        if old_env.get(key) != value:
            raise SweepError(f"the software changed since the sweep in {str(out)!r} started ({key}: "
                             f"{old_env.get(key)!r}, now {value!r}); start a new sweep")


def _finished_cases(out: Path, cases: Sequence[SweepCase]) -> dict[str, CaseResult]:
    """The cases of an interrupted sweep whose run finished: its ``report.md``, written last, is there, and its
    ``meta.json`` says ``"complete"``.

    Their metrics are read back from ``metrics.json``; their wall times from
    the sweep's ``runs.csv`` where it has them (NaN otherwise).  A run that
    failed is not finished: it runs again.
    """
    times = {}
    try:
        with (out / "runs.csv").open(newline="", encoding="utf-8") as f:
            times = {row["folder"]: float(row["wall_time_s"] or "nan") for row in csv.DictReader(f)}
    except (OSError, ValueError, KeyError, csv.Error):
        pass
    finished = {}
    for c in cases:
        folder = Path(c.folder)
        if not (folder / "report.md").is_file() or (_run_meta(c.folder) or {}).get("status") != "complete":
            continue
        try:
            metrics = json.loads((folder / "metrics.json").read_text(encoding="utf-8"))
        except (OSError, ValueError):
            continue
        finished[c.folder] = CaseResult(c, metrics, None, times.get(c.label, math.nan))
    return finished


def _write_part(out: Path, last: SweepCase, cases: Sequence[SweepCase], done: Mapping[str, CaseResult],
                settings: Mapping, t0: float, n_scenarios: int) -> SweepResult:
    """The one-scenario sweep folder of ``last``'s scenario in a sweep over several: its tables, plots and report."""
    mine = [c for c in cases if c.scenario == last.scenario]
    # as a one-scenario sweep of its own: the cases without the scenario's name, their folders relative to its folder
    results = tuple(replace(done[c.folder], case=replace(c, scenario="")) for c in mine)
    part = SweepResult(out / last.scenario, results, tuple(summarize(results)), time.perf_counter() - t0)
    write_sweep_report(part, {"scenario": last.scenario_path, **settings,
                              "controllers": list(dict.fromkeys(c.controller for c in mine)),
                              "seeds": sorted({c.seed for c in mine}),
                              "executor": f"{settings['executor']}, one of the {n_scenarios} scenarios of the sweep "
                                          "in the folder above (its report.md); wall time until this scenario's "
                                          "last run"})
    return part


def _bar(total: int, initial: int = 0):
    try:
        from tqdm import tqdm

        class Bar(tqdm):
            monitor_interval = 0  # no monitor thread: the sweep's workers are forked after the bar is made

        return Bar(total=total, initial=initial, desc="sweep", unit="run", file=sys.stderr,
                   disable=not sys.stderr.isatty())
    except ImportError:
        return None


# -- summaries ---------------------------------------------------------------------------
def _stats(values: list[float]) -> tuple[float | None, float | None, int]:
    """Mean, sample standard deviation (ddof = 1) and count of the finite values.

    :func:`statistics.mean` and :func:`statistics.stdev` sum exactly (rational
    arithmetic), so runs that agree to the bit (seeds that change nothing the
    controller reads) give their value as the mean and a spread of exactly 0,
    where numpy's rounded sum can leave ``± 1e-15``.
    """
    v = [float(x) for x in values if x is not None and math.isfinite(x)]
    if not v:
        return None, None, 0
    return float(statistics.mean(v)), float(statistics.stdev(v)) if len(v) > 1 else 0.0, len(v)


def _run_meta(folder: str) -> dict | None:
    """The ``meta.json`` of a run folder, None when it has none (or it cannot be read)."""
    try:
        return json.loads((Path(folder) / "meta.json").read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None


def summarize(results: Sequence[CaseResult], keys: Sequence[str] | None = None) -> list[dict]:
    """Mean and sample standard deviation (ddof = 1) of each summary metric.

    One row per controller over all its subjects and seeds (``subject`` =
    ``"all"``), then one per (controller, subject) over seeds.  Each row holds
    ``n_ok`` / ``n_failed`` and, per metric key, ``KEY_mean``, ``KEY_std``.

    A run's value counts only where the metric applies to it
    (:func:`sim.output.report.is_applicable`, from the ``meta.json`` in the
    run's folder when there is one): a variant that renders no wall has no
    wall rows, so its ``KEY_mean`` is None (``n/a``) rather than a number that
    would be compared with the wall variants'.
    """
    keys = list(keys) if keys is not None else [k for k, m in METRICS.items() if m.summary]
    flats = {id(r): flat_metrics(r.metrics) for r in results if r.ok}
    metas = {id(r): _run_meta(r.case.folder) for r in results if r.ok}

    def value(r: CaseResult, k: str):
        flat, meta = flats[id(r)], metas[id(r)]
        return flat.get(k) if meta is None or is_applicable(k, flat, meta) else None

    groups: dict[tuple[str, str], list[CaseResult]] = {}
    for r in results:
        groups.setdefault((r.case.variant, "all"), []).append(r)
    for r in results:
        groups.setdefault((r.case.variant, r.case.subject), []).append(r)
    rows = []
    for (controller, subject), rs in groups.items():
        ok = [r for r in rs if r.ok]
        row = {"controller": controller, "subject": subject, "n_ok": len(ok), "n_failed": len(rs) - len(ok)}
        for k in keys:
            mean, std, n = _stats([value(r, k) for r in ok])
            row[f"{k}_mean"], row[f"{k}_std"] = mean, std
        rows.append(row)
    return rows


def load_sweep(out_dir: str | Path) -> dict:
    """The ``sweep.json`` of a finished sweep (settings and every run's metrics)."""
    p = Path(out_dir) / "sweep.json"
    if not p.is_file():
        raise SweepError(f"no sweep.json in {str(out_dir)!r}")
    return json.loads(p.read_text(encoding="utf-8"))
