"""Controllers by name, as the command line and scenario files refer to them.

Shipped variants, usable in every scenario:

* ``zero``: zero torque;
* ``gravity``: model gravity compensation only;
* ``transparent``: dynamics + force-feedback transparency (half the inertia
  compensated) > joint damping;
* ``walls``: joint position and velocity limits > the scenario's virtual
  walls > transparency > joint damping.

Shipped variants for a scenario with a reference hand path (``Scenario.reference_path``, a
:class:`controllers.tasks.HandPath`), :data:`PATH_VARIANTS`:

* ``assist``: joint position and velocity limits > assist-as-needed toward the path
  (:class:`controllers.tasks.AssistAsNeeded`) > transparency > joint damping;
* ``tunnel``: joint position and velocity limits > a guidance tunnel around the path
  (:class:`controllers.tasks.GuidanceTunnel`) > transparency > joint damping.

A scenario may declare its own variants as an ordered list of levels, each a
list of tasks given by name (see :data:`controllers.tasks.TASKS`), by
``(name, {parameter: value})`` or as Task objects; a Task object is a
template, copied (:func:`copy.deepcopy`) for every controller built, so a task
that keeps state between ticks starts afresh in every run.

**Safety monitor.** :func:`make_controller` with ``safety`` (a
:class:`controllers.safety.SafetyParams`) wraps the controller in the safety
monitor (:class:`controllers.safety.Supervised`); a scenario's run passes its
``Scenario.safety`` (``SafetyParams()`` by default), so ``gravity``,
``transparent``, ``walls`` and a scenario's own variants run supervised unless
the scenario says ``safety=None``.  ``zero`` is never wrapped: it is the
unpowered reference (the wearer carries the robot), and a safe state would
power it.
"""

from __future__ import annotations

import copy
from collections.abc import Callable, Mapping, Sequence
from types import MappingProxyType

from models.errors import ParameterError, UnknownNameError

from .base import Controller
from .basic import GravityCompensation, ZeroTorque
from .hqp import HQPController
from .safety import SafetyParams, Supervised
from .tasks import (
    TASKS,
    AssistAsNeeded,
    GuidanceTunnel,
    HandPath,
    JointDamping,
    JointPositionLimits,
    JointVelocityLimits,
    Task,
    Transparency,
)

__all__ = ["CONTROLLERS", "SHIPPED", "UNSUPERVISED", "PATH_VARIANTS", "make_controller", "build_levels"]

TaskSpec = str | tuple | Task
LevelsSpec = Sequence[Sequence[TaskSpec]]


def _transparent() -> Controller:
    return HQPController([[Transparency()], [JointDamping()]], name="transparent")


def _walls(walls: Sequence[TaskSpec]) -> Controller:
    levels = [[JointPositionLimits(), JointVelocityLimits()]]
    if walls:
        levels.append([_task(w, "walls") for w in walls])
    levels += [[Transparency()], [JointDamping()]]
    return HQPController(levels, name="walls")


def _walls_default() -> Controller:
    return _walls(())


#: Name -> factory of a fresh controller (no arguments).
CONTROLLERS: Mapping[str, Callable[[], Controller]] = MappingProxyType({
    "zero": ZeroTorque,
    "gravity": GravityCompensation,
    "transparent": _transparent,
    "walls": _walls_default,
})
#: Shipped factories that take the scenario's wall specs.
_WITH_WALLS: Mapping[Callable[[], Controller], Callable[[Sequence[TaskSpec]], Controller]] = MappingProxyType(
    {_walls_default: _walls})
SHIPPED = tuple(CONTROLLERS)


def _path_levels(task: Task, name: str) -> Controller:
    return HQPController([[JointPositionLimits(), JointVelocityLimits()], [task], [Transparency()], [JointDamping()]],
                         name=name)


def _assist(path: HandPath) -> Controller:
    return _path_levels(AssistAsNeeded(path), "assist")


def _tunnel(path: HandPath) -> Controller:
    return _path_levels(GuidanceTunnel(path), "tunnel")


#: Shipped variants that follow the scenario's reference hand path: name -> factory of the path (a HandPath).
PATH_VARIANTS: Mapping[str, Callable[[HandPath], Controller]] = MappingProxyType({"assist": _assist,
                                                                                   "tunnel": _tunnel})
#: Shipped variants never wrapped in the safety monitor (``zero``: the unpowered reference commands nothing).
UNSUPERVISED = frozenset({"zero"})


def _task(spec: TaskSpec, where: str) -> Task:
    if isinstance(spec, Task):  # a template: each controller gets its own copy, so no state passes between runs
        try:
            return copy.deepcopy(spec)
        except Exception as e:  # whatever stops the copy, it is reported the same way
            raise ParameterError(f"{where}: task object {spec.name!r} ({type(spec).__name__}) cannot be copied "
                                 f"for a new controller ({type(e).__name__}: {e}); give it plain attributes, or "
                                 f"register its class in controllers.tasks.TASKS and name it") from e
    name, params = (spec, {}) if isinstance(spec, str) else (spec[0], dict(spec[1]) if len(spec) > 1 else {})
    cls = TASKS.get(name)
    if cls is None:
        raise UnknownNameError(f"{where}: unknown task {name!r}; tasks are {', '.join(TASKS)}")
    try:
        return cls(**params)
    except TypeError as e:
        raise ParameterError(f"{where}: task {name!r}: {e}") from e


def build_levels(spec: LevelsSpec, variant: str = "variant") -> list[list[Task]]:
    """Tasks of a declared variant, level by level (fresh Task objects)."""
    if isinstance(spec, (str, bytes)) or not spec:
        raise ParameterError(f"variant {variant!r} must be a list of levels, got {spec!r}")
    out = []
    for i, level in enumerate(spec):
        if isinstance(level, (str, Task)) or (isinstance(level, tuple) and level and isinstance(level[0], str)
                                               and len(level) == 2 and isinstance(level[1], Mapping)):
            level = [level]
        out.append([_task(t, f"variant {variant!r} level {i}") for t in level])
    return out


def make_controller(name: str, variants: Mapping[str, LevelsSpec] | None = None,
                    walls: Sequence[TaskSpec] = (), safety: SafetyParams | None = None,
                    path: HandPath | None = None) -> Controller:
    """A new controller by name: a scenario's own variant first, then the shipped ones.

    ``walls`` (task specs, e.g. ``("wall_plane", {...})``) are the scenario's
    virtual walls, used by the ``walls`` variant; each call builds fresh tasks.
    ``path`` is the scenario's reference hand path (``Scenario.reference_path``), used by the
    variants of :data:`PATH_VARIANTS`, which cannot be built without it.
    ``safety``: wrap the controller in the safety monitor with these
    parameters (:class:`controllers.safety.Supervised`; not ``zero``, see
    :data:`UNSUPERVISED`); None: unwrapped.
    """
    if safety is not None and not isinstance(safety, SafetyParams):
        raise ParameterError(f"make_controller: safety must be SafetyParams or None, got {type(safety).__name__}")
    if path is not None and not isinstance(path, HandPath):
        raise ParameterError(f"make_controller: path must be a HandPath or None, got {type(path).__name__}")
    controller = _make(name, variants, walls, path)
    if safety is None or (name in UNSUPERVISED and not (variants and name in variants)):
        return controller
    return Supervised(controller, safety)


def _make(name: str, variants: Mapping[str, LevelsSpec] | None, walls: Sequence[TaskSpec],
          path: HandPath | None) -> Controller:
    if variants and name in variants:
        return HQPController(build_levels(variants[name], name), name=name)
    with_path = PATH_VARIANTS.get(name)
    if with_path is not None:
        if path is None:
            raise ParameterError(f"variant {name!r} follows the exercise's reference hand path: set "
                                 f"Scenario.reference_path (a HandPath)")
        return with_path(path)
    factory = CONTROLLERS.get(name)
    if factory is None:
        known = list(CONTROLLERS) + list(PATH_VARIANTS) + [v for v in (variants or {}) if v not in CONTROLLERS]
        raise UnknownNameError(f"unknown controller {name!r}; controllers are {', '.join(known)}")
    with_walls = _WITH_WALLS.get(factory)
    return with_walls(walls) if with_walls is not None else factory()
