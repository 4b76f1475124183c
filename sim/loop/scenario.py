"""Scenarios: what a run simulates, declared in a short Python file.

A scenario file defines ``SCENARIO = Scenario(...)``.  Required fields have
no default, so a file that forgets one fails with a message naming it.

A file whose settings depend on the wearer (a wall placed relative to the
hand, a target within reach) may also define
``for_subject(subject: str) -> Scenario``; :func:`load_scenario` calls it when
a subject is asked for (``exosandbox sweep --subjects``).  Without it, the
subject is simply replaced.

The file's own folder is importable while it runs: a module of tasks beside
it (``from my_tasks import HandSpeedCap``, ``my_tasks.py`` in the same folder)
needs no ``PYTHONPATH``.  As for a script run with ``python file.py``, the
folder comes first for modules not imported yet; the modules loaded from it are
forgotten again after the load, so another folder's module of the same name is
its own (see :func:`scenario_folder_importable`).
"""

from __future__ import annotations

import ast
import dataclasses
import importlib.machinery
import importlib.util
import math
import sys
from collections.abc import Iterator, Mapping, Sequence
from contextlib import contextmanager
from dataclasses import dataclass, field
from pathlib import Path

from controllers.safety import SafetyParams
from controllers.tasks.paths import HandPath
from models.checks import positive
from models.coupling import DEFAULT_CUFFS, CuffSpec, Registration
from models.errors import ParameterError, SandboxError
from models.exo import ExoParams
from models.human import HumanParams
from sim.physics.actuators import ActuatorParams, IdealActuatorParams
from sim.physics.faults import Fault, check_faults
from sim.physics.impairment import Impairment
from sim.physics.intent import JointIntent
from sim.physics.plant import PlantParams
from sim.physics.sea import SeriesElasticParams, loop_decimation
from sim.physics.sensors import EncoderParams, ForceSensorParams
from sim.physics.wearer import HumanMotorParams

__all__ = ["Scenario", "ScenarioError", "load_scenario", "scenario_folder_importable", "scenario_files_in", "deg",
           "MAX_DURATION_S", "MAX_TICKS", "MAX_SUBSTEPS", "MAX_SENSOR_DELAY_S"]

#: Longest simulated duration of one run [s]: 1 h (a project bound; the 60 s reference run is the longest shipped).
MAX_DURATION_S = 3600.0
#: Most control ticks of one run: 1 h at 1 kHz (a project bound on run time and log size).
MAX_TICKS = 3_600_000
#: Most physics substeps per control tick (a project bound; the default is 4).
MAX_SUBSTEPS = 1000
#: Longest force-sensor delay [s] (a project bound; sensor latencies are milliseconds).
MAX_SENSOR_DELAY_S = 1.0


class ScenarioError(SandboxError, ValueError):
    """A scenario file is missing, malformed or inconsistent."""


@dataclass(frozen=True, kw_only=True)
class Scenario:
    """Everything one run needs, SI units.

    Required: ``name``, ``subject``, ``intent``, ``duration_s``,
    ``controllers`` (the controller names the scenario supports; the first is
    the default).  Everything else has a documented default.
    """

    name: str
    subject: str | HumanParams
    intent: JointIntent
    duration_s: float
    controllers: tuple[str, ...]
    description: str = ""
    exo: ExoParams | None = None
    cuffs: tuple[CuffSpec, ...] = DEFAULT_CUFFS
    registration: Registration = field(default_factory=Registration)
    motor: HumanMotorParams = field(default_factory=HumanMotorParams)
    plant: PlantParams = field(default_factory=PlantParams)
    encoder: EncoderParams = field(default_factory=EncoderParams)
    force_sensor: ForceSensorParams = field(default_factory=ForceSensorParams)
    #: The drive model, by its parameter class: :class:`~sim.physics.actuators.ActuatorParams` (a first-order
    #: torque lag, the default), :class:`~sim.physics.actuators.IdealActuatorParams` (saturation only) or
    #: :class:`~sim.physics.sea.SeriesElasticParams` (series-elastic drives with an inner torque loop).
    actuators: ActuatorParams | IdealActuatorParams | SeriesElasticParams = field(default_factory=ActuatorParams)
    #: Control period [s] (1 kHz by default) and physics substeps per period.
    control_period_s: float = 1e-3
    substeps: int = 4
    seed: int = 0
    #: Virtual walls used by the ``walls`` variant: task specs such as
    #: ``("wall_plane", {"point_m": (0.45, 0, 0), "normal": (1, 0, 0)})``.
    walls: tuple = ()
    #: The scenario's own controller variants: name -> ordered levels of task specs.
    variants: Mapping[str, Sequence] = field(default_factory=dict)
    #: Body-region force limits [N] per cuff name, over the defaults of
    #: :data:`sim.analysis.metrics.BODY_REGION_FORCE_LIMITS_N` (ISO/TS 15066 Annex A).
    force_limits_N: Mapping[str, float] = field(default_factory=dict)
    #: Timed faults of the run (:mod:`sim.physics.faults`), e.g.
    #: ``(SensorDropout(name="hand sensor drops", cuff="hand", start_s=2.0, end_s=2.5),)``.
    faults: tuple[Fault, ...] = ()
    #: The safety monitor of the run's controller (:class:`controllers.safety.SafetyParams`; its force limits
    #: are its own, ``force_limits_N`` above only sets the metrics' reference lines); None: no monitor.
    safety: SafetyParams | None = field(default_factory=SafetyParams)
    #: The wearer's impairment (:mod:`sim.physics.impairment`: weakness, spasticity, contracture, tremor);
    #: None: a healthy arm.
    impairment: Impairment | None = None
    #: The exercise's reference hand path as a therapist sets it (:class:`controllers.tasks.HandPath`, world frame
    #: [m], time from the start of the run), followed by the ``assist`` and ``tunnel`` variants and measured by
    #: ``path_error_rms_m``; never derived from the wearer's intent.  None: no reference path.
    reference_path: HandPath | None = None
    #: The run's control delay [ticks]: the drives take the command of ``control_delay_ticks`` ticks before
    #: (at most 1 s of ticks); a :class:`~sim.physics.faults.ControlDelay` fault delays it further.
    control_delay_ticks: int = 0

    def __post_init__(self) -> None:
        o = f"Scenario({self.name!r})"
        if not self.name or not str(self.name).replace("_", "").replace("-", "").isalnum():
            raise ParameterError(f"Scenario.name must be a short identifier, got {self.name!r}")
        if isinstance(self.subject, str):
            object.__setattr__(self, "subject", HumanParams(self.subject))
        elif not isinstance(self.subject, HumanParams):
            raise ParameterError(f"{o}.subject must be a subject name or HumanParams, got {self.subject!r}")
        if not isinstance(self.intent, JointIntent):
            raise ParameterError(f"{o}.intent must be a JointIntent, got {type(self.intent).__name__}")
        object.__setattr__(self, "duration_s", positive(o, "duration_s", self.duration_s, "s"))
        if self.duration_s > MAX_DURATION_S:
            raise ParameterError(f"{o}.duration_s must be at most {MAX_DURATION_S:g} s (1 h of simulated time), "
                                 f"got {self.duration_s!r}")
        ctrl = (self.controllers,) if isinstance(self.controllers, str) else tuple(self.controllers)
        if not ctrl or not all(isinstance(c, str) and c for c in ctrl):
            raise ParameterError(f"{o}.controllers must name at least one controller, got {self.controllers!r}")
        object.__setattr__(self, "controllers", ctrl)
        object.__setattr__(self, "cuffs", tuple(self.cuffs))
        object.__setattr__(self, "walls", tuple(self.walls))
        object.__setattr__(self, "variants", dict(self.variants))
        limits = dict(self.force_limits_N)
        for cuff, lim in limits.items():
            positive(o, f"force_limits_N[{cuff!r}]", lim, "N")
        object.__setattr__(self, "force_limits_N", {k: float(v) for k, v in limits.items()})
        object.__setattr__(self, "control_period_s",
                           positive(o, "control_period_s", self.control_period_s, "s"))
        ticks = self.duration_s / self.control_period_s
        if not ticks >= 0.5:  # n_ticks rounds to 0: the run would have no tick at all
            raise ParameterError(f"{o}.control_period_s must be at most duration_s = {self.duration_s!r} s "
                                 f"(at least one tick), got {self.control_period_s!r}")
        if ticks >= MAX_TICKS + 0.5:
            raise ParameterError(f"{o}.control_period_s = {self.control_period_s!r} s gives {ticks:.3g} ticks in "
                                 f"duration_s = {self.duration_s!r} s; at most {MAX_TICKS} ticks (1 h at 1 kHz)")
        if not (isinstance(self.substeps, int) and not isinstance(self.substeps, bool) and self.substeps >= 1):
            raise ParameterError(f"{o}.substeps must be an integer >= 1, got {self.substeps!r}")
        if self.substeps > MAX_SUBSTEPS:
            raise ParameterError(f"{o}.substeps must be at most {MAX_SUBSTEPS}, got {self.substeps!r}")
        for name, kind in (("exo", (ExoParams, type(None))), ("registration", Registration),
                           ("motor", HumanMotorParams), ("plant", PlantParams), ("encoder", EncoderParams),
                           ("force_sensor", ForceSensorParams),
                           ("actuators", (ActuatorParams, IdealActuatorParams, SeriesElasticParams))):
            if not isinstance(getattr(self, name), kind):
                names = [k.__name__ if k is not type(None) else "None" for k in
                         (kind if isinstance(kind, tuple) else (kind,))]
                want = names[0] if len(names) == 1 else ", ".join(names[:-1]) + " or " + names[-1]
                raise ParameterError(f"{o}.{name} must be a {want}, got {type(getattr(self, name)).__name__}")
        delay_s = self.force_sensor.delay_ticks * self.control_period_s
        if delay_s > MAX_SENSOR_DELAY_S:
            raise ParameterError(f"{o}.force_sensor.delay_ticks = {self.force_sensor.delay_ticks} is "
                                 f"{delay_s:.6g} s at control_period_s = {self.control_period_s!r} s; at most "
                                 f"{MAX_SENSOR_DELAY_S:g} s")
        if isinstance(self.actuators, SeriesElasticParams):
            f_sub = self.substeps / self.control_period_s
            if loop_decimation(self.actuators.loop_rate_Hz, 1.0 / f_sub) is None:
                raise ParameterError(f"{o}.actuators.loop_rate_Hz must be the substep rate {f_sub:g} Hz over a whole "
                                     f"number ({f_sub:g}, {f_sub / 2:g}, {f_sub / 3:g}, ... Hz), got "
                                     f"{self.actuators.loop_rate_Hz!r}")
        d = self.control_delay_ticks
        if isinstance(d, bool) or not isinstance(d, int) or d < 0:
            raise ParameterError(f"{o}.control_delay_ticks must be an integer >= 0, got {d!r}")
        if d * self.control_period_s > MAX_SENSOR_DELAY_S:
            raise ParameterError(f"{o}.control_delay_ticks = {d} is {d * self.control_period_s:.6g} s at "
                                 f"control_period_s = {self.control_period_s!r} s; at most {MAX_SENSOR_DELAY_S:g} s")
        if not (isinstance(self.seed, int) and self.seed >= 0):
            raise ParameterError(f"{o}.seed must be an integer >= 0, got {self.seed!r}")
        faults = check_faults(self.faults, o)
        cuff_names = tuple(getattr(c, "name", None) for c in self.cuffs)
        # a fault may start after the run's end (a shortened run, --duration): it is then never active
        for i, f in enumerate(faults):
            if hasattr(f, "cuff") and f.cuff not in cuff_names:
                raise ParameterError(f"{o}.faults[{i}] {f.owner}.cuff must name one of the scenario's cuffs "
                                     f"({', '.join(map(str, cuff_names))}), got {f.cuff!r}")
        object.__setattr__(self, "faults", faults)
        if self.safety is not None and not isinstance(self.safety, SafetyParams):
            raise ParameterError(f"{o}.safety must be SafetyParams(...) or None, got {self.safety!r}")
        if self.impairment is not None:
            if not isinstance(self.impairment, Impairment):
                raise ParameterError(f"{o}.impairment must be Impairment(...) or None, got {self.impairment!r}")
            self.impairment.check_period(o, self.control_period_s)
        if self.reference_path is not None and not isinstance(self.reference_path, HandPath):
            raise ParameterError(f"{o}.reference_path must be a HandPath or None, got "
                                 f"{type(self.reference_path).__name__}")

    @property
    def human(self) -> HumanParams:
        """The wearer's parameters."""
        return self.subject  # normalised to HumanParams in __post_init__

    @property
    def n_ticks(self) -> int:
        """Number of control ticks."""
        return int(round(self.duration_s / self.control_period_s))


class _FolderFinder:
    """Finds top-level modules (``name.py``, ``name/``) in one folder, ahead of the import path, and
    remembers the names it found."""

    def __init__(self, folder: Path) -> None:
        self.folder, self.found = str(folder), set()

    def find_spec(self, name, path=None, target=None):  # noqa: D102 - importlib finder protocol
        if path is not None or "." in name:  # a submodule: found through its package's __path__
            return None
        spec = importlib.machinery.PathFinder.find_spec(name, [self.folder])
        if spec is not None:
            self.found.add(name)
        return spec


@contextmanager
def scenario_folder_importable(folder: str | Path) -> Iterator[None]:
    """Make ``folder``'s modules importable by name inside the ``with`` block, and forget them after it.

    Inside the block, ``import name`` finds ``folder/name.py`` (or the
    package ``folder/name/``) before the import path (after the built-in
    modules), as for a script run with ``python file.py``; a module already
    imported keeps its cached object (Python's own rule).  On leaving, the
    finder is removed, and the modules it found (with their submodules) are
    dropped from ``sys.modules`` (what a name held before is put back): the
    process is left as it was, so a second folder's ``my_tasks.py`` is
    loaded as itself, not shadowed by the first's.  The objects made from
    those modules (task classes, their instances) stay valid.  A module the
    scenario imports only later, while it runs (an ``import`` inside a
    task's method), is not found there: import the folder's modules at the
    top of the scenario file or of its module of tasks.
    """
    finder = _FolderFinder(Path(folder).resolve())
    # just before the import path's finder, as sys.path[0] would be: built-in and frozen modules keep precedence
    at = next((i for i, f in enumerate(sys.meta_path) if f is importlib.machinery.PathFinder), 0)
    before = dict(sys.modules)
    sys.meta_path.insert(at, finder)
    try:
        yield
    finally:
        try:
            sys.meta_path.remove(finder)
        except ValueError:  # removed by the code run inside: nothing left to undo
            pass
        for name in list(sys.modules):
            if name.partition(".")[0] in finder.found:
                if name in before:
                    sys.modules[name] = before[name]
                else:
                    del sys.modules[name]


def _declares_scenario(path: Path) -> bool:
    """Whether a file defines ``SCENARIO`` or ``for_subject`` at its top level (read, not run)."""
    try:
        tree = ast.parse(path.read_text(encoding="utf-8"), filename=str(path))
    except (OSError, SyntaxError, UnicodeDecodeError, ValueError):
        return True  # not readable as Python: loading it reports why
    for node in tree.body:
        if isinstance(node, ast.FunctionDef) and node.name == "for_subject":
            return True
        targets = (node.targets if isinstance(node, ast.Assign)
                   else [node.target] if isinstance(node, ast.AnnAssign) else [])
        if any(isinstance(t, ast.Name) and t.id == "SCENARIO" for t in targets):
            return True
    return False


def scenario_files_in(folder: str | Path) -> list[Path]:
    """The scenario files of a folder, sorted by name.

    Its ``*.py`` files that define ``SCENARIO`` or ``for_subject`` at their
    top level; files whose name starts with ``_`` (``__init__.py``) and
    modules of tasks or helpers that a scenario imports (no ``SCENARIO``) are
    left out, without running any file.
    """
    return sorted(f for f in Path(folder).glob("*.py") if not f.name.startswith("_") and _declares_scenario(f))


def load_scenario(path: str | Path, *, subject: str | None = None) -> Scenario:
    """Execute a scenario file and return its ``SCENARIO``.

    With ``subject`` (a built-in subject name such as ``"f5"``), return the
    file's ``for_subject(subject)`` if it defines one, else ``SCENARIO`` with
    that subject.

    The file's folder is importable while the file and its ``for_subject``
    run (:func:`scenario_folder_importable`), so a module of tasks beside it
    needs no ``PYTHONPATH``; a sweep's worker processes load the file by its
    path through this function, so the same holds there.

    Any error while the file runs (a missing required field, a bad value, a
    typo) becomes a :class:`ScenarioError` whose one-line message names the
    file and the culprit.
    """
    p = Path(path)
    if not p.is_file():
        raise ScenarioError(f"scenario file {str(p)!r} does not exist")
    with scenario_folder_importable(p.parent):
        return _load(p, subject)


#: Modules of the flat layout of ``sim`` that scenario files used to import from.
_MOVED_MODULES = frozenset({"sim.intent", "sim.scenario"})


def _load(p: Path, subject: str | None) -> Scenario:
    mod_name = f"_exosandbox_scenario_{p.stem}"
    spec = importlib.util.spec_from_file_location(mod_name, p)
    if spec is None or spec.loader is None:
        raise ScenarioError(f"{p}: not a Python scenario file")
    module = importlib.util.module_from_spec(spec)
    sys.modules[mod_name] = module
    try:
        spec.loader.exec_module(module)
    except SandboxError as e:
        raise ScenarioError(f"{p}: {e}") from e
    except ModuleNotFoundError as e:
        if e.name in _MOVED_MODULES:
            # a file written for the flat layout of sim: say where the names are now
            raise ScenarioError(f"{p}: the module {e.name} is gone; a scenario file imports from sim "
                                f"(from sim import JointIntent, Scenario, Via, deg)") from e
        raise ScenarioError(f"{p}: {type(e).__name__}: {e}") from e
    except TypeError as e:
        # a missing or unknown field of Scenario(...) or another record
        raise ScenarioError(f"{p}: {e}") from e
    except Exception as e:  # a user's file: report in one line, whatever it is
        raise ScenarioError(f"{p}: {type(e).__name__}: {e}") from e
    finally:
        sys.modules.pop(mod_name, None)
    scenario = getattr(module, "SCENARIO", None)
    if scenario is None:
        raise ScenarioError(f"{p}: defines no SCENARIO = Scenario(...)")
    if not isinstance(scenario, Scenario):
        raise ScenarioError(f"{p}: SCENARIO must be a Scenario, got {type(scenario).__name__}")
    if subject is None:
        return scenario
    try:
        factory = getattr(module, "for_subject", None)
        if factory is None:
            return dataclasses.replace(scenario, subject=subject)
        scenario = factory(subject)
    except SandboxError as e:
        raise ScenarioError(f"{p}: subject {subject!r}: {e}") from e
    except Exception as e:  # a user's for_subject: report in one line, whatever it is
        raise ScenarioError(f"{p}: for_subject({subject!r}): {type(e).__name__}: {e}") from e
    if not isinstance(scenario, Scenario):
        raise ScenarioError(f"{p}: for_subject({subject!r}) must return a Scenario, got {type(scenario).__name__}")
    return scenario


def deg(*angles: float) -> tuple[float, ...]:
    r"""Angles in degrees to a tuple of radians, for writing postures in scenario files.

    Each angle becomes :math:`\theta_\text{rad} = \theta_\text{deg}\,\pi / 180`
    (``math.radians``), in the order given, e.g. the joint order of
    :mod:`models.human` for a posture.

    Parameters
    ----------
    *angles : float
        Angles [deg].

    Returns
    -------
    tuple of float
        The same angles [rad].
    """
    return tuple(math.radians(a) for a in angles)
