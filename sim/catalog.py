"""What a user can name: scenarios of a folder, controller variants, tasks, subjects and model frames.

:func:`catalog` gathers it as plain frozen records (``exosandbox catalog``
prints them, as text or JSON through :meth:`Catalog.as_dict`).  Nothing here
is computed anew: every entry is read from the registry it comes from
(:data:`controllers.registry.CONTROLLERS` and ``PATH_VARIANTS``, :data:`controllers.tasks.TASKS`,
:data:`models.human.SUBJECTS`, the models built by :func:`models.build_exo`
and :func:`models.build_human`), so the list cannot drift from the code.
"""

from __future__ import annotations

import dataclasses
import inspect
import re
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path

import pinocchio as pin

from controllers.registry import CONTROLLERS, PATH_VARIANTS, build_levels, make_controller
from controllers.tasks import TASKS, HandPath, Task
from models import HumanParams, build_exo, build_human
from models.coupling import DEFAULT_CUFFS
from models.errors import SandboxError
from models.human import SUBJECTS
from sim.loop.scenario import ScenarioError, load_scenario, scenario_files_in

__all__ = [
    "Catalog", "CuffEntry", "ModelFrames", "ParameterEntry", "ScenarioEntry", "SubjectEntry", "TaskEntry",
    "VariantEntry", "catalog", "shipped_scenarios_folder", "SCENARIO_WALLS",
]

#: How the level of a scenario's virtual walls shows in a shipped variant's levels.
SCENARIO_WALLS = "<the scenario's walls>"
#: The wearer whose model's frames are listed (frame names do not depend on the subject).
FRAMES_SUBJECT = "m50"


@dataclass(frozen=True)
class ScenarioEntry:
    """A scenario file of the folder; ``error`` is the one-line reason when it does not load (then the rest is
    empty).  ``own_variants`` maps each variant the file declares to its levels of task names."""

    file: str
    name: str = ""
    duration_s: float | None = None
    description: str = ""
    controllers: tuple[str, ...] = ()
    own_variants: Mapping[str, tuple[tuple[str, ...], ...]] = dataclasses.field(default_factory=dict)
    error: str | None = None


@dataclass(frozen=True)
class VariantEntry:
    """A shipped controller variant: its first docstring line, and for a task hierarchy its levels (highest
    priority first) of task names; :data:`SCENARIO_WALLS` stands for the scenario's virtual walls."""

    name: str
    summary: str
    levels: tuple[tuple[str, ...], ...] = ()


@dataclass(frozen=True)
class ParameterEntry:
    """A constructor parameter: ``default`` is its ``repr``, or None when the parameter is required."""

    name: str
    default: str | None
    keyword_only: bool = False


@dataclass(frozen=True)
class TaskEntry:
    """A registered task: the short name scenario files use, its class and constructor parameters."""

    name: str
    cls: str
    summary: str
    parameters: tuple[ParameterEntry, ...]


@dataclass(frozen=True)
class SubjectEntry:
    """A built-in subject: sex, stature [m] and body mass [kg]."""

    name: str
    sex: str
    stature_m: float
    mass_kg: float


@dataclass(frozen=True)
class ModelFrames:
    """Frames of one model: the hand point, the cuff sites (site -> frame) and the links."""

    model: str
    hand_frame: str
    sites: Mapping[str, str]
    links: tuple[str, ...]


@dataclass(frozen=True)
class CuffEntry:
    """A default cuff: its name (a wall task's ``sensor``) and the site it joins on each model."""

    name: str
    exo_site: str
    human_site: str


@dataclass(frozen=True)
class Catalog:
    """Everything :func:`catalog` lists."""

    scenarios_folder: str
    scenarios: tuple[ScenarioEntry, ...]
    variants: tuple[VariantEntry, ...]
    tasks: tuple[TaskEntry, ...]
    subjects: tuple[SubjectEntry, ...]
    frames: tuple[ModelFrames, ...]
    cuffs: tuple[CuffEntry, ...]
    #: The shipped variants that follow a scenario's reference hand path (:data:`controllers.registry.PATH_VARIANTS`).
    path_variants: tuple[VariantEntry, ...] = ()

    def as_dict(self) -> dict:
        """Plain dicts, lists, strings and numbers (JSON-ready)."""
        return _plain(dataclasses.asdict(self))


def _plain(obj):
    if isinstance(obj, Mapping):
        return {str(k): _plain(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_plain(v) for v in obj]
    return obj


def shipped_scenarios_folder() -> Path:
    """The ``scenarios`` folder installed beside the ``sim`` package."""
    return Path(__file__).resolve().parents[1] / "scenarios"


def _summary(obj) -> str:
    """First line of an object's docstring ('' without one)."""
    doc = inspect.getdoc(obj) or ""
    line = doc.strip().splitlines()[0] if doc.strip() else ""
    return re.sub(r":\w+:`([^`]*)`", r"\1", line).replace("``", "")  # reST roles and literals as plain text


def _task_names(levels: Sequence[Sequence[Task]]) -> tuple[tuple[str, ...], ...]:
    """Levels of Task objects as levels of names: the registry's short name of the class, else the task's own."""
    short = {cls: name for name, cls in TASKS.items()}
    return tuple(tuple(SCENARIO_WALLS if isinstance(t, _WallsMarker) else short.get(type(t), t.name) for t in level)
                 for level in levels)


class _WallsMarker(Task):
    """Stands in for a scenario's walls, to find the level where a shipped variant puts them (never run)."""

    name, kind = "scenario_walls", "ineq"

    def rows(self, state):  # pragma: no cover - never bound nor run
        raise NotImplementedError("a placeholder for listing, not a task to run")


def _variant(name: str) -> VariantEntry:
    # a path variant is listed with a one-point path: its levels do not depend on the path
    path = HandPath(points_m=((0.0, 0.0, 0.0),), times_s=(0.0,)) if name in PATH_VARIANTS else None
    controller = make_controller(name, walls=(_WallsMarker(),), path=path)
    levels = getattr(controller, "levels", None)
    if levels is None:  # a plain controller, no task hierarchy
        return VariantEntry(name, _summary(type(controller)))
    return VariantEntry(name, "prioritized tasks, highest level first", _task_names(levels))


def _task(name: str, cls: type) -> TaskEntry:
    params = []
    for p in list(inspect.signature(cls.__init__).parameters.values())[1:]:  # without self
        if p.kind in (p.VAR_POSITIONAL, p.VAR_KEYWORD):
            continue
        default = None if p.default is p.empty else repr(p.default)
        params.append(ParameterEntry(p.name, default, p.kind is p.KEYWORD_ONLY))
    return TaskEntry(name, f"{cls.__module__}.{cls.__qualname__}", _summary(cls), tuple(params))


def _scenario(path: Path) -> ScenarioEntry:
    try:
        s = load_scenario(path)
        own = {v: _task_names(build_levels(spec, v)) for v, spec in s.variants.items()}
    except Exception as e:  # a user's file, whatever fails: one line for it, and the others are still listed
        message = (str(e) if isinstance(e, ScenarioError) else f"{path}: {e}" if isinstance(e, SandboxError)
                   else f"{path}: {type(e).__name__}: {e}")
        return ScenarioEntry(path.name, error=" ".join(message.split()))
    return ScenarioEntry(path.name, s.name, s.duration_s, " ".join(s.description.split()), s.controllers, own)


def _frames(model: str, arm) -> ModelFrames:
    links = tuple(f.name for f in arm.model.frames if f.type == pin.FrameType.BODY)
    return ModelFrames(model, arm.hand_frame, dict(arm.sites), links)


def catalog(scenarios_folder: str | Path | None = None) -> Catalog:
    """List the scenarios of a folder (default: :func:`shipped_scenarios_folder`) and what they can name.

    A file that fails to load is listed with its one-line error; the others are listed as usual.  A folder
    that does not exist raises :class:`sim.loop.scenario.ScenarioError`.
    """
    folder = shipped_scenarios_folder() if scenarios_folder is None else Path(scenarios_folder)
    if not folder.is_dir():
        raise ScenarioError(f"scenarios folder {str(folder)!r} does not exist (expected a folder of *.py "
                            "scenario files)")
    exo, human = build_exo(), build_human(HumanParams(FRAMES_SUBJECT))
    return Catalog(
        scenarios_folder=str(folder),
        scenarios=tuple(_scenario(f) for f in scenario_files_in(folder)),
        variants=tuple(_variant(name) for name in CONTROLLERS),
        tasks=tuple(_task(name, cls) for name, cls in TASKS.items()),
        subjects=tuple(SubjectEntry(name, s.sex, s.stature_m, s.mass_kg) for name, s in SUBJECTS.items()),
        frames=(_frames("exo", exo), _frames(f"human {FRAMES_SUBJECT}", human)),
        cuffs=tuple(CuffEntry(c.name, c.exo_site, c.human_site) for c in DEFAULT_CUFFS),
        path_variants=tuple(_variant(name) for name in PATH_VARIANTS),
    )
