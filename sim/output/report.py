"""Markdown and CSV reports of a run, a comparison of runs, and a sweep.

Each report holds the metrics, the plots (:mod:`sim.output.plots`) and the cautions.
The "better" value of a row follows :data:`sim.analysis.metrics.METRICS`: lower, higher,
closest to zero, to one, or to the commanded wall stiffness.

Rules every comparison here follows (a run's ``meta.json`` tells what its controller is,
``controller_structure``):

* timing rows (:func:`sim.analysis.metrics.is_timing_key`) measure the machine, not the controller: they are
  shown, never marked better, and no verdict is drawn from them;
* a row that does not apply to a variant (:func:`is_applicable`) is ``n/a`` for it and marks nothing: the wall
  rows of a variant that renders no wall (:func:`renders_wall`), a per-level row of a level the variant does
  not have or whose tasks differ between the variants compared, a value the metrics give as null (e.g. a
  felt mass the fit rejected, its reason in ``apparent_mass_hand_note``);
* numbers follow one rule of significant digits (:func:`fmt`, :func:`fmt_stat`), and a mean over runs that
  agree (one run, or a spread of exactly 0) is printed without "± 0".
"""

from __future__ import annotations

import json
import math
from collections.abc import Mapping, Sequence
from pathlib import Path

import numpy as np

from sim.analysis.levels import level_activity
from sim.analysis.metrics import (
    METRICS,
    TARGET_TOLERANCE_M,
    flat_metrics,
    is_timing_key,
)
from sim.analysis.tables import run_rows, write_csv, write_text
from sim.loop.runlog import Run, RunLogError, load_run
from sim.output import plots
from sim.output.figures import compare_figures, run_figures

__all__ = ["CAUTION", "best_index", "best_indices", "key_info", "comparison_rows", "markdown_table",
           "write_run_report", "compare_runs", "write_sweep_report", "write_sweeps_report", "sweep_verdicts",
           "has_wall", "transparency_key", "fmt", "fmt_stat", "renders_wall", "is_applicable", "TIMING_NOTE",
           "controller_section", "variant_differences", "faults_section", "safety_section", "wearer_section",
           "assistance_section",
           "drives_section", "drives_applies",
           "follows_path"]

#: Printed in every report.
CAUTION = (
    "**Caution.** These are results of a simulation. They are no evidence that a controller is safe on a person. "
    "Anything prototyped here must be verified on the real device under IEC 80601-2-78 (medical robots for "
    "rehabilitation), ISO 13482 where it applies, and local regulation, and used with patients only under "
    "clinical supervision and licensed practice. The body-region force limits used here (ISO/TS 15066 Annex A) "
    "were set for industrial collaborative robots; some of their values are unconfirmed (see the run's metrics)."
)


#: Said once in every report that shows timing rows.
TIMING_NOTE = ("Timing rows (tick and solve times, the realtime factor, per-level solve times) measure this "
               "machine and what else ran on it, not the controller: they are shown but never marked better, "
               "and no verdict is drawn from them.")


def fmt(v, digits: int = 4) -> str:
    """A number for a table or a sentence: ``digits`` (4) significant digits, ``n/a`` for None.

    The rule of every report: a value on its own (one run's metric) has 4 significant digits; integers and
    booleans are printed as they are; a mean with its spread follows :func:`fmt_stat` (the spread to 2
    significant digits, the mean to the spread's last digit, no "± 0").
    """
    if v is None:
        return "n/a"
    if isinstance(v, bool):
        return str(v)
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        if not math.isfinite(v):
            return str(v)
        return f"{v:.{digits}g}"
    return str(v)


def fmt_stat(mean, std, unit: str = "") -> str:
    """``mean ± std`` by the rule of the reports (common practice for a measured value and its spread, as in
    the GUM, JCGM 100:2008, section 7.2.6, from memory: the uncertainty to at most two significant digits).

    * ``std`` None or 0 (one run, or runs that agree to the bit): the mean alone, as :func:`fmt` (4
      significant digits), never ``± 0``;
    * else the spread to 2 significant digits and the mean rounded to the same decimal place, both in fixed
      notation: ``8.4337 ± 0.2634`` -> ``8.43 ± 0.26``, ``590.2 ± 5`` -> ``590.2 ± 5.0``, ``12345 ± 250`` ->
      ``12340 ± 250``; where that would need more than 8 decimals or the mean is 10^7 or more, 3 and 2
      significant digits in exponent notation.

    ``unit`` is appended after a space when given. None for the mean gives ``n/a``.
    """
    tail = f" {unit}" if unit else ""
    if mean is None:
        return "n/a"
    if not isinstance(mean, (int, float)) or isinstance(mean, bool) or not math.isfinite(mean):
        return fmt(mean) + tail
    if std is None or not isinstance(std, (int, float)) or not math.isfinite(std) or std == 0:
        return fmt(mean) + tail
    std = abs(float(std))
    place = math.floor(math.log10(std)) - 1  # the decimal place of the spread's second significant digit
    rounded = round(std, -place)
    if rounded > 0 and math.floor(math.log10(rounded)) - 1 > place:  # 0.0996 -> 0.10: one place coarser
        place += 1
        rounded = round(std, -place)
    if -place > 8 or abs(mean) >= 1e7:
        return f"{mean:.3g} ± {std:.2g}{tail}"
    if place >= 0:
        step = 10 ** place
        return f"{round(mean / step) * step:.0f} ± {round(std / step) * step:.0f}{tail}"
    return f"{mean:.{-place}f} ± {rounded:.{-place}f}{tail}"


def best_indices(values: Sequence, better: str | None, commanded: Sequence | None = None) -> tuple[int, ...]:
    """Indices of the values that share the best score under ``better`` (see :class:`sim.analysis.metrics.MetricInfo`).

    Missing and non-finite values never win. Empty when there is no winner:
    fewer than two valid values, or every valid value equal.
    """
    if better is None:
        return ()
    score = []
    for i, v in enumerate(values):
        if v is None or isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v):
            score.append(None)
            continue
        if better == "lower":
            s = v
        elif better == "higher":
            s = -v
        elif better == "zero":
            s = abs(v)
        elif better == "one":
            s = abs(v - 1.0)
        elif better == "commanded":
            c = commanded[i] if commanded is not None else None
            if not c:
                score.append(None)
                continue
            s = abs(v - c)
        else:
            raise ValueError(f"unknown 'better' rule {better!r}")
        score.append(s)
    valid = [s for s in score if s is not None]
    if len(valid) < 2 or len(set(valid)) == 1:
        return ()
    top = min(valid)
    return tuple(i for i, s in enumerate(score) if s == top)


def best_index(values: Sequence, better: str | None, commanded: Sequence | None = None) -> int | None:
    """Index of the better value under ``better`` (see :class:`sim.analysis.metrics.MetricInfo`), None if no winner.

    Missing values never win; a tie has no winner, whether every value is equal
    or only the best ones are (two controllers that give the same number, e.g.
    a wall variant in a scenario without wall contact): :func:`best_indices`
    names them.
    """
    best = best_indices(values, better, commanded)
    return best[0] if len(best) == 1 else None


def key_info(key: str) -> tuple[str, str | None, str]:
    """Unit, better side and label of a flat metric key, per-cuff (``cuffs.NAME.KEY``), per-level and per-joint
    bandwidth (``torque_bandwidth_Hz.JOINT``) keys too."""
    info = METRICS.get(key)
    if info is not None:
        return info.unit, info.better, info.label
    if key.startswith("cuffs."):
        _, cuff, tail = key.split(".", 2)
        unit = "N" if tail.endswith("_N") else "N m" if tail.endswith("_Nm") else "-"
        better = None if tail == "force_limit_N" else "lower" if tail.endswith(("_N", "_Nm", "_ratio")) else None
        return unit, better, f"{cuff} cuff: {tail.replace('_', ' ')}"
    if key.startswith("hqp_levels."):
        _, level, tail = key.split(".", 2)
        return "us", "lower", f"level {level}: {tail.replace('_', ' ')}"
    if key.startswith("torque_bandwidth_Hz."):
        info = METRICS["torque_bandwidth_Hz"]
        return info.unit, info.better, f"{key.split('.', 1)[1]}: {info.label}"
    return "", None, ""


def _structure(meta: Mapping | None) -> Mapping | None:
    s = (meta or {}).get("controller_structure")
    return s if isinstance(s, Mapping) else None


def _task_entries(meta: Mapping | None):
    s = _structure(meta)
    for level in (s or {}).get("levels") or []:
        yield from level.get("tasks") or []


#: The task classes of the wall family (``controllers.tasks.WallTask`` and the shipped walls), by class name.
_WALL_CLASSES = frozenset({"WallTask", "PlaneWall", "BoxWall", "SphereWall"})


def renders_wall(meta: Mapping | None) -> bool:
    """Whether the run's controller renders a virtual wall: a task of its ``controller_structure`` (``meta.json``)
    is of the wall family (its class or a base class is ``WallTask`` or a shipped wall, or, for a task whose
    classes are not recorded, its name starts with ``wall``).

    A run recorded without ``controller_structure`` (before it was recorded) counts as rendering one, so that
    its rows are shown as they were.
    """
    if _structure(meta) is None:
        return True
    for t in _task_entries(meta):
        classes = {str(t.get("type")), *map(str, t.get("bases") or ())}
        if classes & _WALL_CLASSES or str(t.get("name", "")).startswith("wall"):
            return True
    return False


#: The task classes that follow the exercise's reference hand path, by class name.
_PATH_CLASSES = frozenset({"AssistAsNeeded", "GuidanceTunnel"})
#: The keys of the fit of the robot's torque on its own gravity and inertia terms (``compensation_shares``).
_SHARE_KEYS = frozenset({"gravity_share_left", "inertia_share_left"})


def _path_tasks(meta: Mapping | None) -> list:
    """The tasks of the run's ``controller_structure`` that follow the reference path (their class or a base
    class is a shipped path task)."""
    return [t for t in _task_entries(meta) if {str(t.get("type")), *map(str, t.get("bases") or ())} & _PATH_CLASSES]


def follows_path(meta: Mapping | None) -> bool:
    """Whether the run's controller holds a task that pushes the hand toward the exercise's reference path
    (assist-as-needed, the guidance tunnel, or a class derived from them)."""
    return bool(_path_tasks(meta))


def _level_signature(meta: Mapping | None, level: int):
    """The tasks of ``level`` (type, name, kind) in the run's ``controller_structure``; None without it, ``()`` if
    the controller has no such level."""
    s = _structure(meta)
    if s is None:
        return None
    levels = s.get("levels") or []
    if level >= len(levels):
        return ()
    return tuple((t.get("type"), t.get("name"), t.get("kind")) for t in levels[level].get("tasks") or [])


def is_applicable(key: str, metrics: Mapping, meta: Mapping | None) -> bool:
    """Whether the flat metric ``key`` applies to a run (its ``metrics.json`` and ``meta.json``).

    Not applicable (shown ``n/a``, marking nothing):

    * a value the metrics give as null (e.g. ``apparent_mass_hand_kg`` when the fit was rejected; the reason is
      in ``apparent_mass_hand_note``) or a key the run does not have;
    * the wall rows (every ``wall_*`` key: stiffness and damping commanded and rendered, penetration, energy
      returned, bounces, contacts) of a run whose controller renders no wall (:func:`renders_wall`): there is no
      wall to render, and the hand's excursion past a plane the variant does not know is no penetration;
    * a per-level row (``hqp_levels.I.*``) of a level the controller does not have;
    * the compensation shares (``gravity_share_left``, ``inertia_share_left``) of a run whose controller
      pushes the hand toward a reference path (:func:`follows_path`): the fit reads the robot's torque as
      compensation of its own gravity and inertia, and a force toward the path is neither.

    Per-level rows of stacks whose level I holds different tasks are not comparable either: that needs the
    other runs, and :func:`comparison_rows` checks it.
    """
    value = metrics.get(key) if key in metrics else flat_metrics(metrics).get(key)
    if value is None:
        return False
    if key.startswith("wall_") and not renders_wall(meta):
        return False
    if key in _SHARE_KEYS and follows_path(meta):
        return False
    if key.startswith("hqp_levels."):
        sig = _level_signature(meta, int(key.split(".")[1]))
        if sig == ():
            return False
    return True


def comparison_rows(labels: Sequence[str], metrics: Sequence[Mapping], metas: Sequence[Mapping] | None = None
                    ) -> list[dict]:
    """One row per metric key present in any run: ``key``, ``unit``, one value per label and ``best`` (a label or
    empty).  Known keys come in :data:`sim.analysis.metrics.METRICS` order, per-cuff and per-level keys after them.

    With the runs' ``metas`` (``meta.json``), a value that does not apply to its run (:func:`is_applicable`) is
    None (``n/a``), and a per-level row is None for every run when the runs' stacks hold different tasks at
    that level. Timing rows (:func:`sim.analysis.metrics.is_timing_key`) never have a ``best``. Text notes
    (keys ending in ``_note``) are left out: the reports print them below their tables.
    """
    flats = [flat_metrics(m) for m in metrics]
    metas = list(metas) if metas is not None else [None] * len(flats)
    keys = [k for k in METRICS if any(k in f for f in flats)]
    keys += [k for k in dict.fromkeys(k for f in flats for k in f) if k not in METRICS]
    keys = [k for k in keys if not k.endswith("_note")]
    rows = []
    for k in keys:
        unit, better, _ = key_info(k)
        values = [f.get(k) if meta is None or is_applicable(k, f, meta) else None for f, meta in zip(flats, metas)]
        if k.startswith("hqp_levels."):
            sigs = {_level_signature(meta, int(k.split(".")[1])) for meta, v in zip(metas, values) if v is not None}
            if len(sigs) > 1:  # level I is not the same level in every stack: no side by side
                values = [None] * len(values)
        ref = METRICS[k].reference if k in METRICS else None
        b = None if is_timing_key(k) else best_index(values, better, [f.get(ref) for f in flats] if ref else None)
        rows.append({"key": k, "unit": unit, **dict(zip(labels, values)), "best": labels[b] if b is not None else ""})
    return rows


def markdown_table(header: Sequence[str], rows: Sequence[Sequence]) -> str:
    """A GitHub-flavoured Markdown table (cells already formatted as text)."""
    def esc(c):
        return str(c).replace("|", "\\|")

    lines = ["| " + " | ".join(esc(h) for h in header) + " |", "|" + "---|" * len(header)]
    lines += ["| " + " | ".join(esc(c) for c in r) + " |" for r in rows]
    return "\n".join(lines)


def text_table(header: Sequence[str], rows: Sequence[Sequence]) -> str:
    """A plain-text table with aligned columns, for the terminal."""
    cells = [list(map(str, header))] + [list(map(str, r)) for r in rows]
    widths = [max(len(r[i]) for r in cells) for i in range(len(header))]
    out = []
    for j, r in enumerate(cells):
        out.append("  ".join(c.ljust(w) if i == 0 else c.rjust(w) for i, (c, w) in enumerate(zip(r, widths))))
        if j == 0:
            out.append("  ".join("-" * w for w in widths))
    return "\n".join(out)


def _marked(rows: Sequence[Mapping], labels: Sequence[str], mark: str) -> list[list[str]]:
    """Rows of text cells, the better value wrapped in ``mark`` (``**`` for Markdown, ``*`` suffix for text)."""
    out = []
    for r in rows:
        cells = [r["key"], r["unit"]]
        for lab in labels:
            s = fmt(r[lab])
            if r["best"] == lab:
                s = f"**{s}**" if mark == "md" else f"{s} *"
            cells.append(s)
        out.append(cells)
    return out


def _value_text(v) -> str:
    """A task parameter as text: numbers by :func:`fmt`, lists in brackets."""
    if isinstance(v, float):
        return fmt(v)
    if isinstance(v, list):
        return "[" + ", ".join(_value_text(x) for x in v) + "]"
    if isinstance(v, Mapping):
        return "{" + ", ".join(f"{k}: {_value_text(x)}" for k, x in v.items()) + "}"
    return str(v)


def _params_text(params: Mapping | None) -> str:
    return ", ".join(f"{k} = {_value_text(v)}" for k, v in (params or {}).items()) or "—"


def _level_label(level: Mapping) -> str:
    return ", ".join(str(t.get("name")) for t in level.get("tasks") or [])


def _stack_text(structure: Mapping | None) -> str:
    """``[a, b] > [c] > [d]`` for a stack of levels; the class and its description for a controller without."""
    if structure is None:
        return "not recorded (a run from before meta.json held the controller's structure)"
    levels = structure.get("levels") or []
    if not levels:
        return f"{structure.get('type')}: {structure.get('description') or 'no priority levels'}"
    return " > ".join(f"[{_level_label(level)}]" for level in levels)


def controller_section(meta: Mapping, metrics: Mapping, arrays: Mapping[str, np.ndarray]) -> list[str]:
    """The "Controller" section of a run report (Markdown lines, without the timeline figure): the levels and
    their tasks in priority order with their parameters, then per level the share of ticks it was active,
    binding and solved by the QP backend (:func:`sim.analysis.levels.level_activity`) with its solve times."""
    structure = _structure(meta)
    text = ["## Controller", ""]
    if structure is None:
        return text + ["The controller's structure is not recorded in this run's meta.json.", ""]
    levels = structure.get("levels") or []
    head = f"`{structure.get('name', meta.get('controller'))}` ({structure.get('type')})"
    if not levels:
        return text + [f"{head}: {structure.get('description') or 'no priority levels'}. It has no priority "
                       "levels: it computes its torque directly.", ""]
    text += [f"{head}: {len(levels)} priority levels, the highest first. A level below can use only the "
             "freedom the levels above leave; the tasks of one level combine by their weights.", "",
             markdown_table(["level", "task", "type", "kind", "weight", "parameters"],
                            [[str(level.get("level", i)), str(t.get("name")), str(t.get("type")), str(t.get("kind")),
                              _value_text(t.get("weight")), _params_text(t.get("params"))]
                             for i, level in enumerate(levels) for t in level.get("tasks") or []]), ""]
    activity = level_activity(arrays)
    times = {d.get("level"): d for d in metrics.get("hqp_levels") or [] if isinstance(d, Mapping)}
    if not activity:
        return text + ["This run has no per-level diagnostics (it was logged before they were).", ""]
    n_ticks = len(np.asarray(arrays["t"])) if "t" in arrays else activity[0].solved_ticks

    def pct(x):
        return "n/a" if x is None else fmt(100.0 * x)

    rows = []
    for a in activity:
        label = _level_label(levels[a.level]) if a.level < len(levels) else ""
        tm = times.get(a.level, {})
        rows.append([str(a.level), label, pct(a.share("active")), pct(a.share("binding")), pct(a.share("qp")),
                     fmt(tm.get("solve_median_us")), fmt(tm.get("solve_p99_us"))])
    text += [f"Per level over the {activity[0].solved_ticks} solved ticks (of {n_ticks}; a fallback tick solves "
             "nothing): the share of ticks on which it had rows (active), was binding (an equality row not met, "
             f"or an inequality row at its bound, within {fmt(structure.get('binding_tol'))} relative to the "
             "row's right-hand side) and was solved by the QP backend, and its solve time.", "",
             markdown_table(["level", "tasks", "active [%]", "binding [%]", "QP backend [%]",
                             "solve median [us]", "solve p99 [us]"], rows), "",
             *[f"- {x}" for x in _activity_sentences(activity, levels)], "",
             "Why this matters: a level the compiled solve cannot finish goes to the QP backend, whose solve "
             "time is longer and varies from tick to tick, so those ticks set the 99th-percentile tick time. A "
             "level that is often binding is one the controller cannot meet because of the levels above it "
             "(or, for limits, one whose bound holds back every level below): its task is met only as far as "
             "the higher priorities allow.", ""]
    return text


def safety_section(meta: Mapping, metrics: Mapping) -> list[str]:
    """The "Safety" section of a run report (Markdown lines): the safety monitor's settings as recorded in
    ``meta.json`` (``safety``), its trips (``safety_trips`` of ``metrics.json``), and the ticks
    above a body-region force limit."""
    text = ["## Safety", ""]
    settings = (meta or {}).get("safety")
    n = metrics.get("safety_trip_count")
    exceed = metrics.get("force_limit_exceed_count")
    if settings is None and n is None:
        text.append("The safety monitor was off for this run (the scenario's `safety=None`, or the `zero` variant, "
                    "which commands no torque).")
    else:
        if isinstance(settings, Mapping):
            release = ("stays latched until the run ends" if settings.get("release") == "never" else
                       f"releases once the tripping quantity has stayed under {fmt(settings.get('release_fraction'))}"
                       f" of its limit for {fmt(settings.get('release_hold_s'))} s")
            state = ("gravity compensation with joint damping "
                     f"{fmt(settings.get('damping_Nm_s_per_rad'))} N m s/rad" if settings.get("safe_state") == "damp"
                     else f"a controlled stop at up to {fmt(settings.get('stop_deceleration_rad_s2'))} rad/s²")
            text += [f"Monitor: safe state {state}; it {release}. Joint speed limit "
                     f"{fmt(settings.get('speed_limit_factor'))} × the model's, torque limit "
                     f"{fmt(settings.get('torque_limit_factor'))} × the model's, solve-time budget "
                     f"{fmt(settings.get('solve_time_budget_s'))} s, fallback share at most "
                     f"{fmt(settings.get('fallback_max_fraction'))} over {fmt(settings.get('fallback_window_s'))} s.",
                     ""]
        trips = metrics.get("safety_trips") or []
        if not trips:
            text.append("The monitor did not trip.")
        else:
            text += [f"The monitor tripped {len(trips)} time(s):", "",
                     markdown_table(["reason", "t [s]", "value", "limit", "cuff or joint", "released at [s]"],
                                    [[str(t.get("reason")), fmt(t.get("t_s")), fmt(t.get("value")), fmt(t.get("limit")),
                                      str(t.get("cuff", t.get("joint", ""))),
                                      "latched" if t.get("released_s") is None else fmt(t.get("released_s"))]
                                     for t in trips])]
    if exceed:
        text += ["", f"A cuff force exceeded its body-region limit on {exceed} tick(s) (`force_limit_exceed_count`)."]
    return text + [""]


def _activity_sentences(activity, levels: Sequence[Mapping]) -> list[str]:
    """One sentence per level worth a word: binding on most solved ticks, or ever sent to the QP backend."""
    out = []
    for a in activity:
        name = f"Level {a.level} ({_level_label(levels[a.level])})" if a.level < len(levels) else f"Level {a.level}"
        binding, qp = a.share("binding") or 0.0, a.share("qp") or 0.0
        kinds = {t.get("kind") for t in levels[a.level].get("tasks", [])} if a.level < len(levels) else set()
        if binding >= 0.5 and kinds == {"ineq"}:
            out.append(f"{name} has a bound reached on {fmt(100 * binding)} % of the solved ticks: there it holds "
                       "back the levels below.")
        elif binding >= 0.5:
            above = "the levels above it decide" if a.level > 0 else "its own rows conflict on"
            out.append(f"{name} is not met exactly on {fmt(100 * binding)} % of the solved ticks: {above} those "
                       "ticks, not its task.")
        if qp > 0:
            n = int(np.count_nonzero(a.qp))
            out.append(f"{name} went to the QP backend on {fmt(100 * qp)} % of the solved ticks ({n} "
                       f"{'tick' if n == 1 else 'ticks'}): those are among the slowest ticks, which set the 99th "
                       "percentile.")
    return out or ["No level is binding on most ticks, and none went to the QP backend."]


def _timeline(run, meta: Mapping, folder: Path) -> list[Path]:
    """The level timeline figure of a run with per-level diagnostics (none without them)."""
    activity = level_activity(run.arrays)
    structure = _structure(meta)
    if not activity:
        return []
    levels = (structure or {}).get("levels") or []
    lanes = [(f"{a.level}: {_level_label(levels[a.level])}" if a.level < len(levels) else str(a.level),
              a.active, a.binding, a.qp) for a in activity]
    return [plots.level_timeline(np.asarray(run["t"]), lanes, folder / "plots" / "level_timeline.png",
                                 title=f"{meta['scenario']} / {meta['controller']}: priority levels over time")]


def faults_section(meta: Mapping) -> list[str]:
    """The "Faults" section of a run report (Markdown lines): a table of the scenario's faults with their times
    and parameters (``meta["faults"]``); nothing for a run without faults."""
    faults = meta.get("faults") or []
    if not faults:
        return []
    rows = [[f["name"], f["kind"], fmt(f["start_s"]), fmt(f["end_s"]), _params_text(f.get("parameters"))]
            for f in faults]
    return ["## Faults", "",
            f"{len(faults)} timed fault(s), each active for start <= t < end; the log's `fault_active` column "
            "says which at each tick, and the interaction-force figure shades their periods.", "",
            markdown_table(["fault", "kind", "start [s]", "end [s]", "parameters"], rows), ""]


def drives_applies(meta: Mapping | None) -> bool:
    """Whether a run's drives differ from the default (``meta["drives"]``): another model than the first-order lag,
    or a control delay.  A run recorded without ``drives`` had the default."""
    d = (meta or {}).get("drives")
    return isinstance(d, Mapping) and (d.get("model") != "lag" or bool(d.get("control_delay_ticks")))


#: The series-elastic parameters the "Drives" section lists per joint: (key, column header).
_SEA_COLUMNS = (("spring_stiffness_Nm_per_rad", "k_s [N m/rad]"), ("motor_inertia_kg_m2", "J_m [kg m²]"),
                ("motor_damping_Nm_s_per_rad", "b_m [N m s/rad]"), ("motor_torque_limit_Nm", "motor limit [N m]"),
                ("torque_kp", "K_p [-]"), ("torque_kd_s", "K_d [s]"))


def drives_section(meta: Mapping, metrics: Mapping) -> list[str]:
    """The "Drives" section of a run report (Markdown lines): the drive model and its key parameters
    (``meta["drives"]``), the torque bandwidth per joint, the tracking RMS, the motor saturation and the control
    delay (``metrics.json``); nothing for the default drives (:func:`drives_applies`)."""
    if not drives_applies(meta):
        return []
    d = meta["drives"]
    model, p = d.get("model"), d.get("parameters") or {}
    delay = int(d.get("control_delay_ticks") or 0)
    names = meta.get("exo_joints") or []
    bw = metrics.get("torque_bandwidth_Hz") or {}
    text = ["## Drives", ""]
    if model == "series_elastic":
        text += [f"Series-elastic drives (Pratt & Williamson 1995): a motor behind a torsion spring per joint, the "
                 f"spring's deflection the joint-torque reading, an inner PD torque loop at "
                 f"{fmt(p.get('loop_rate_Hz'))} Hz (damping ratio {fmt(p.get('torque_damping_ratio'))} when K_d is "
                 "derived), feed-forward of the motor's damping " + ("on" if p.get("damping_feedforward") else "off")
                 + " and of its inertia " + ("on" if p.get("inertia_feedforward") else "off")
                 + " as the joint moves. The rotor inertia and gear "
                 "friction are on the motor side: the robot model of this run has zero armature and joint friction.",
                 ""]
        rows = [[n, *(fmt((p.get(key) or [None] * len(names))[i]) for key, _ in _SEA_COLUMNS), fmt(bw.get(n))]
                for i, n in enumerate(names)]
        text += [markdown_table(["joint", *(h for _, h in _SEA_COLUMNS), "bandwidth [Hz]"], rows), ""]
    else:
        what = ("an ideal torque source (the command clipped to the torque limit, at once)" if model == "ideal" else
                f"torque sources with a first-order lag of {fmt(p.get('torque_time_constant_s'))} s")
        text += [f"Drive model: {what}."
                 + (" Torque bandwidth (output locked): " + ", ".join(f"{n} {fmt(v)} Hz" for n, v in bw.items()) + "."
                    if bw else ""), ""]
    text.append(f"Torque tracking (clipped command less delivered torque), RMS: "
                f"{fmt(metrics.get('torque_tracking_rms_Nm'))} N m. Motor at its torque limit: "
                f"{fmt(metrics.get('motor_saturation_fraction'))} of the ticks. Control delay: {delay} tick(s)"
                f" ({fmt(delay * float(meta.get('dt_s', 0.0)))} s), ahead of any `ControlDelay` fault.")
    return text + [""]


def wearer_section(meta: Mapping, metrics: Mapping, arrays: Mapping[str, np.ndarray] | None = None) -> list[str]:
    """The "Wearer" section of a run report (Markdown lines): the wearer's impairment with its parameters as
    ``meta.json`` records it (``parameters.impairment``, :mod:`sim.physics.impairment`), the completion metrics,
    the largest involuntary torque per joint (``tau_human_impairment``), and a warning line when the movement
    was not completed; nothing for a wearer without an impairment."""
    impairment = ((meta or {}).get("parameters") or {}).get("impairment")
    if not impairment:
        return []
    parts = [[name, _params_text(p)] for name, p in impairment.items() if p is not None]
    text = ["## Wearer", "",
            "The wearer is impaired (grades and their values are illustrative, not clinical):", "",
            markdown_table(["part", "parameters"], parts or [["none", ""]]), ""]
    c, t = metrics.get("movement_completion"), metrics.get("time_to_target_s")
    if c is None:
        text.append("The intent holds no hand movement: `movement_completion` and `time_to_target_s` are n/a.")
    else:
        tol = f"{fmt(TARGET_TOLERANCE_M)} m"
        reached = (f"reached the target within {tol} {fmt(t)} s after the start of the move" if t is not None
                   else f"never came within {tol} of the target")
        text.append(f"The hand covered {fmt(100 * c)} % of the intended displacement (`movement_completion`) and "
                    f"{reached} (`time_to_target_s`).")
        if t is None:
            text += ["", f"**Warning: the movement was not completed.** The wearer's hand reached "
                     f"{fmt(100 * c)} % of the way to the target."]
    inv = None if arrays is None else arrays.get("tau_human_impairment")
    if inv is not None and len(inv):
        peak = np.max(np.abs(np.asarray(inv)), axis=0)
        names = list((meta or {}).get("human_joints") or [str(i) for i in range(len(peak))])
        rows = [[names[j], fmt(float(peak[j]))] for j in range(len(peak)) if peak[j] > 0]
        if rows:
            text += ["", "Largest involuntary torque (spasticity + contracture + tremor, the log's "
                     "`tau_human_impairment`):", "", markdown_table(["joint", "peak [N m]"], rows)]
    return text + [""]


def assistance_section(meta: Mapping, metrics: Mapping) -> list[str]:
    """The "Assistance" section of a run report (Markdown lines), for a run with a reference hand path
    (``meta["reference_path"]``) or a controller holding a task that follows one; nothing otherwise.

    The path (via points and duration), the variant's path task and its parameters, and the assistance metrics:
    the robot's positive work on the wearer and its share of the positive work on the arm, the hand's RMS
    error from the path, and the assist-as-needed stiffness (peak and end of the run).
    """
    path = (meta or {}).get("reference_path")
    tasks = _path_tasks(meta)
    if path is None and not tasks:
        return []
    text = ["## Assistance", ""]
    if isinstance(path, Mapping):
        times = path.get("times_s") or []
        text.append(f"Reference hand path (the exercise's, set before the run): {len(times)} via points over "
                    f"{fmt(times[-1] - times[0]) if times else 'n/a'} s, minimum-jerk between them.")
        text.append("")
    else:
        text.append("The run has no reference hand path.")
    if tasks:
        text += [f"Path task: `{t.get('name')}` ({t.get('type')}), "
                 + _params_text({k: v for k, v in (t.get("params") or {}).items() if not k.startswith("path.")})
                 for t in tasks]
    else:
        text.append("This variant has no task that follows the path: the robot does not guide the hand.")
    rows = [[k, key_info(k)[0], fmt(metrics.get(k)) if metrics.get(k) is not None else "n/a", key_info(k)[2]]
            for k in ("assistance_work_J", "assistance_share", "path_error_rms_m", "assist_stiffness_peak_N_per_m",
                      "assist_stiffness_final_N_per_m")]
    text += ["", markdown_table(["key", "unit", "value", "meaning"], rows), "",
             "Work: the robot's is the positive part of the power its cuffs deliver to the wearer (each cuff's wrench "
             "on the human times the human cuff frame's twist, summed over the cuffs per tick); the wearer's is the "
             "positive part of their joint power; the share is the robot's over the sum of the two.", ""]
    return text


def write_run_report(folder: str | Path, metrics: Mapping | None = None, *, run: Run | None = None,
                     figures: bool = True) -> Path:
    """``report.md`` and ``plots/*.png`` of one coupled run folder: the controller, the metrics, the figures
    (:func:`sim.output.figures.run_figures`), the cautions.

    ``run``: the run already read from ``folder`` (:func:`sim.loop.runlog.load_run`),
    so that it is not read again (nor its derived columns computed again).
    ``figures``: False leaves the figures out (the level timeline of the
    controller section stays): drawing them takes about 2 s, longer than a
    short run, so a sweep leaves them out unless asked (``run_figures``).
    """
    folder = Path(folder)
    run = load_run(folder) if run is None else run
    m = dict(run.metrics if metrics is None else metrics)
    meta = run.meta
    figs = run_figures(run, m, folder) if figures else []
    timeline = _timeline(run, meta, folder)
    flat = flat_metrics(m)
    rows = [[k, key_info(k)[0], fmt(v) if is_applicable(k, flat, meta) else "n/a", key_info(k)[2]]
            for k, v in flat.items() if not k.endswith("_note")]
    notes = [f"{key_info(k[:-5] + '_kg')[2] or k}: n/a, {v}" if k == "apparent_mass_hand_note" else f"{k}: {v}"
             for k, v in flat.items() if k.endswith("_note") and v]
    if not renders_wall(meta) and any(k.startswith("wall_") for k in flat):
        notes.append("The wall rows are n/a: this controller renders no wall.")
    if follows_path(meta) and any(k in flat for k in _SHARE_KEYS):
        notes.append("The gravity and inertia share rows are n/a: this controller also pushes the hand toward the "
                     "reference path, which their fit would read as compensation.")
    text = [f"# Run report: {meta['scenario']} / {meta['controller']} / seed {meta['seed']}", "",
            f"Status: {meta.get('status', 'unknown')}, {fmt(m.get('sim_duration_s'))} s simulated at "
            f"{1.0 / float(meta['dt_s']):g} Hz control, {meta['substeps']} physics substeps.", "", CAUTION, ""]
    text += controller_section(meta, m, run.arrays)
    text += [f"![{p.stem}](plots/{p.name})" for p in timeline] + ([""] if timeline else [])
    text += safety_section(meta, m)
    text += faults_section(meta)
    text += drives_section(meta, m)
    text += wearer_section(meta, m, run.arrays)
    text += assistance_section(meta, m)
    text += ["## Metrics", "", markdown_table(["key", "unit", "value", "meaning"], rows), ""]
    text += [f"- {n}" for n in notes] + ([""] if notes else []) + [TIMING_NOTE, "", "## Plots", ""]
    text += [f"![{p.stem}](plots/{p.name})" for p in figs]
    if not figures:
        text += ["Not drawn: a sweep leaves each run's figures out, since drawing them takes longer than a short "
                 "run. `exosandbox sweep --run-figures` draws them; for this folder alone, "
                 "`sim.output.report.write_run_report(FOLDER)`."]
    out = folder / "report.md"
    write_text(out, "\n".join(text) + "\n")  # atomic: a sweep takes a run with its report.md as finished
    return out


def compare_runs(run_dirs: Sequence[str | Path], out_dir: str | Path, labels: Sequence[str] | None = None
                 ) -> tuple[list[dict], list[str], Path]:
    """Compare run folders side by side: ``compare.md``, ``compare.csv`` and plots in ``out_dir``.

    Labels default to each run's controller name (made unique with the
    folder's name when two runs share one).  Returns the comparison rows, the
    labels and the Markdown report's path.
    """
    runs = [load_run(d) for d in run_dirs]
    for d, r in zip(run_dirs, runs):
        if not r.metrics:
            raise RunLogError(f"{d}: no metrics.json (not a finished 'exosandbox run' folder)")
    if labels is None:
        labels = [str(r.meta.get("controller")) for r in runs]
        if len(set(labels)) < len(labels):
            labels = [f"{lab} ({Path(d).name})" for lab, d in zip(labels, run_dirs)]
    labels = list(labels)
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    rows = comparison_rows(labels, [r.metrics for r in runs], [r.meta for r in runs])
    write_csv(out / "compare.csv", rows)
    figs = compare_figures(runs, labels, out)
    header = ["metric", "unit", *labels]
    scen = sorted({str(r.meta.get("scenario")) for r in runs})
    text = ["# Comparison: " + ", ".join(labels), "",
            f"Scenario(s): {', '.join(scen)}. Runs: " + ", ".join(f"`{Path(d).name}`" for d in run_dirs) + ".", "",
            "The better value of each row is in bold (lower, higher, closest to zero or one, or closest to the "
            "commanded wall stiffness, as the metric calls for). n/a: the row does not apply to that variant "
            "(the wall rows of a variant that renders no wall; a per-level row where the variants' levels hold "
            "different tasks, see below) or the run gave no value; such a row marks nothing. " + TIMING_NOTE, "",
            CAUTION, "", markdown_table(header, _marked(rows, labels, "md")), ""]
    notes = [f"`{lab}`: felt mass at the hand n/a, {r.metrics['apparent_mass_hand_note']}"
             for lab, r in zip(labels, runs) if r.metrics.get("apparent_mass_hand_note")]
    text += [f"- {n}" for n in notes] + ([""] if notes else [])
    text += variant_differences(labels, [r.meta for r in runs], [r.metrics for r in runs])
    text += ["## Plots", ""]
    text += [f"![{p.stem}](plots/{p.name})" for p in figs]
    md = out / "compare.md"
    md.write_text("\n".join(text) + "\n", encoding="utf-8")
    return rows, labels, md


def variant_differences(labels: Sequence[str], metas: Sequence[Mapping], metrics: Sequence[Mapping] | None = None
                        ) -> list[str]:
    """The "What differs between the variants" section of a comparison (Markdown lines), from each run's
    ``controller_structure`` (``meta.json``): each variant's levels, the tasks only some variants have, the task
    parameters (and level and weight) that differ between the variants that share a task, and each variant's
    per-level solve times with the tasks of each level (the main table leaves them n/a where the levels
    differ). Tasks are matched by name (the k-th task of a name with the k-th of the same name)."""
    text = ["## What differs between the variants", ""]
    structures = [_structure(m) for m in metas]
    text += [f"- `{lab}`: {_stack_text(s)}" for lab, s in zip(labels, structures)] + [""]
    tasks: dict[tuple[str, int], dict[str, dict]] = {}  # (name, k) -> label -> {"level", "weight", params...}
    for lab, s in zip(labels, structures):
        seen: dict[str, int] = {}
        for i, level in enumerate((s or {}).get("levels") or []):
            for t in level.get("tasks") or []:
                name = str(t.get("name"))
                k = seen[name] = seen.get(name, -1) + 1
                tasks.setdefault((name, k), {})[lab] = {"type": t.get("type"), "level": level.get("level", i),
                                                         "weight": t.get("weight"), **(t.get("params") or {})}
    def task_name(name: str, k: int) -> str:
        return name if k == 0 else f"{name} #{k + 1}"

    partial = [(task_name(*key), [lab for lab in labels if lab in by]) for key, by in tasks.items()
               if 0 < len(by) < len(labels)]
    if partial:
        text += ["Tasks not in every variant:", ""]
        text += [f"- {name}: only in " + ", ".join(f"`{lab}`" for lab in have) for name, have in partial] + [""]
    diff_rows = []
    for key, by in tasks.items():
        if len(by) < 2:
            continue
        have = [lab for lab in labels if lab in by]
        for p in dict.fromkeys(q for lab in have for q in by[lab]):
            values = [by[lab].get(p) for lab in have]
            if any(v != values[0] for v in values[1:]):
                diff_rows.append([task_name(*key), p] + [_value_text(by[lab][p]) if lab in by and p in by[lab]
                                                         else "—" for lab in labels])
    if diff_rows:
        text += ["Task settings that differ between the variants that have the task (— : the variant does not "
                 "have it):", "", markdown_table(["task", "setting", *labels], diff_rows), ""]
    elif len([s for s in structures if s and s.get("levels")]) > 1:
        text += ["The tasks the variants share have the same level, weight and parameters in each.", ""]
    if metrics is not None:
        rows = []
        for lab, s, m in zip(labels, structures, metrics):
            levels = (s or {}).get("levels") or []
            for d in m.get("hqp_levels") or []:
                i = d.get("level")
                name = _level_label(levels[i]) if isinstance(i, int) and i < len(levels) else ""
                rows.append([lab, str(i), name, fmt(d.get("solve_median_us")), fmt(d.get("solve_p99_us"))])
        if rows:
            text += ["Per-level solve times, each level with its tasks (timing: this machine):", "",
                     markdown_table(["variant", "level", "tasks", "median [us]", "p99 [us]"], rows), ""]
    return text


def headline(summary: Sequence[Mapping], key: str = "interaction_force_rms_N") -> list[str]:
    """Sentences saying which controller has the better overall mean of ``key`` and by how much.

    Controllers that share the best mean (e.g. a wall variant in a scenario
    without wall contact gives the same torques as the variant without the
    wall) are said to be level, and each is then compared with the others;
    when every controller has the same mean, they are all said to be level.
    A timing key (:func:`sim.analysis.metrics.is_timing_key`) has no verdict:
    it measures the machine. Means and spreads are printed by :func:`fmt_stat`.
    """
    if is_timing_key(key):
        return []
    info = METRICS[key]
    overall = [r for r in summary if r["subject"] == "all" and r.get(f"{key}_mean") is not None]
    if len(overall) < 2:
        return []
    means = [r[f"{key}_mean"] for r in overall]
    top = best_indices(means, info.better,
                       [r.get(f"{info.reference}_mean") for r in overall] if info.reference else None)
    if not top and len(set(means)) == 1:  # every one the same: all level
        top = tuple(range(len(overall)))
    bests = [overall[i] for i in top]

    def stat(r: Mapping) -> str:
        return fmt_stat(r[f"{key}_mean"], r.get(f"{key}_std"), info.unit)

    def listed(items) -> str:
        items = list(items)
        return items[0] if len(items) == 1 else ", ".join(items[:-1]) + " and " + items[-1]

    out = []
    if len(bests) > 1:
        out.append(listed(f"`{r['controller']}`" for r in bests) + f" are level on {info.label}: "
                   + listed(stat(r) for r in bests) + ", over " + listed(str(r["n_ok"]) for r in bests) + " runs.")
    for best in bests:
        for i, r in enumerate(overall):
            if i in top:
                continue
            other, mine = r[f"{key}_mean"], best[f"{key}_mean"]
            rel = ""
            if other:
                pct = 100 * (mine - other) / abs(other)
                rel = f" ({pct:+.0f} %)" if abs(pct) >= 1 else f" ({pct:+.2g} %)"
            out.append(f"`{best['controller']}` is better than `{r['controller']}` on {info.label}: "
                       f"{stat(best)} against {stat(r)}{rel}, over {best['n_ok']} and {r['n_ok']} runs.")
    return out


def has_wall(summary: Sequence[Mapping]) -> bool:
    """Whether a sweep's summary rows (:func:`sim.experiments.sweep.summarize`) come from a scenario with a
    plane wall (some run measured a penetration)."""
    return any(r.get("wall_penetration_max_m_mean") is not None for r in summary)


def sweep_verdicts(summary: Sequence[Mapping]) -> dict[str, list[str]]:
    """The sweep's verdicts (:func:`headline`), by question: which variant is more transparent and, with a wall,
    which renders it closest to its commanded stiffness.

    With a wall in the scenario, transparency is judged on
    ``interaction_force_free_rms_N`` (the hand outside the wall, the same ticks
    for every variant): inside, the force is the wall itself, which a wall
    variant renders on purpose and a variant without it does not; variants
    that tie on it are said to be level on it (never judged on the whole-run
    force instead).  Without a wall, on ``interaction_force_rms_N``.
    """
    walled = has_wall(summary)
    out = {"Which is more transparent": headline(summary, transparency_key(summary))}
    if walled:
        out["Which renders the wall closest to its commanded stiffness"] = headline(
            summary, "wall_stiffness_rendered_N_per_m")
    return {q: lines for q, lines in out.items() if lines}


def summary_cells(summary: Sequence[Mapping], keys: Sequence[str]) -> tuple[list[str], list[list[str]]]:
    """Header and text cells of a sweep summary: ``mean ± std`` per key (:func:`fmt_stat`: no "± 0"); the better
    mean per subject group in bold, except on timing keys (they measure the machine)."""
    header = ["controller", "subject", "runs ok", "failed"] + [f"{k} [{METRICS[k].unit}]" for k in keys]
    best = {}
    for k in keys:
        if is_timing_key(k):
            continue
        for subject in dict.fromkeys(r["subject"] for r in summary):
            group = [r for r in summary if r["subject"] == subject]
            ref = METRICS[k].reference
            i = best_index([r.get(f"{k}_mean") for r in group], METRICS[k].better,
                           [r.get(f"{ref}_mean") for r in group] if ref else None)
            if i is not None:
                best[(k, subject)] = group[i]["controller"]
    rows = []
    for r in summary:
        cells = [r["controller"], r["subject"], str(r["n_ok"]), str(r["n_failed"])]
        for k in keys:
            c = fmt_stat(r.get(f"{k}_mean"), r.get(f"{k}_std"))
            if best.get((k, r["subject"])) == r["controller"]:
                c = f"**{c}**"
            cells.append(c)
        rows.append(cells)
    return header, rows


def _write_run_tables(out: Path, result, settings: Mapping) -> None:
    """``runs.csv``, ``runs.md`` and ``sweep.json`` of a sweep: one row per run (after its scenario in a sweep over
    several), each run's folder relative to ``out`` (:attr:`sim.experiments.sweep.SweepCase.label`)."""
    rows = run_rows(result.results)
    write_csv(out / "runs.csv", rows)
    several = any(r.case.scenario for r in result.results)
    run_keys = [*(["scenario"] if several else []), "controller", "subject", "seed", "status",
                "interaction_force_rms_N", "error"]
    (out / "runs.md").write_text(markdown_table(run_keys, [[fmt(r.get(k, "")) for k in run_keys] for r in rows])
                                 + "\n", encoding="utf-8")
    doc = {"settings": dict(settings), "wall_time_s": result.wall_time_s,
           "runs": [{**({"scenario": r.case.scenario} if several else {}), "controller": r.case.controller,
                     "subject": r.case.subject, "seed": r.case.seed, "folder": r.case.label, "error": r.error,
                     "metrics": r.metrics} for r in result.results]}
    (out / "sweep.json").write_text(json.dumps(doc, indent=1, allow_nan=False) + "\n", encoding="utf-8")


def write_sweep_report(result, settings: Mapping) -> Path:
    """``summary.csv``, ``summary.md``, ``runs.md``, ``sweep.json``, ``report.md`` and plots of a sweep."""
    out = Path(result.out_dir)
    out.mkdir(parents=True, exist_ok=True)  # a scenario of a sweep over several whose every run failed has none yet
    summary = list(result.summary)
    keys = [k for k, m in METRICS.items() if m.summary and any(r.get(f"{k}_mean") is not None for r in summary)]
    write_csv(out / "summary.csv", summary)
    header, cells = summary_cells(summary, keys)
    (out / "summary.md").write_text(markdown_table(header, cells) + "\n", encoding="utf-8")
    _write_run_tables(out, result, settings)
    # with a wall, transparency is judged with the hand outside it: inside, the force is the wall a variant renders
    walled = has_wall(summary)
    figs = []
    for k in ("interaction_force_rms_N", *(("interaction_force_free_rms_N",) if walled else ()),
              "apparent_mass_hand_kg", "human_effort_ratio", "wall_stiffness_rendered_N_per_m", "hqp_solve_median_us"):
        if k in keys:
            figs.append(plots.sweep_bars(summary, k, out / "plots" / f"{k}.png",
                                         ylabel=f"{METRICS[k].label} [{METRICS[k].unit}]",
                                         title=f"{METRICS[k].label}\nmean ± std (all: over subjects and seeds)"))
    failed = result.failed
    text = [f"# Sweep report: {Path(settings['scenario']).name}", "",
            f"Controllers {', '.join(settings['controllers'])}; subjects {', '.join(settings['subjects'])}; "
            f"seeds {', '.join(map(str, settings['seeds']))}; executor: {settings['executor']}; "
            f"{len(result.results)} runs, {len(failed)} failed, {result.wall_time_s:.1f} s wall time.", "",
            CAUTION, ""]
    for question, lines in sweep_verdicts(summary).items():
        text += [f"## {question}", ""] + [f"- {s}" for s in lines] + [""]
    text += ["## Summary (mean ± standard deviation; subject 'all' pools every subject and seed)", "",
             "The better value per subject group is in bold. A value without ± is one run's, or the same in every "
             "run; n/a: the metric does not apply to the variant (e.g. the wall rows of a variant that renders "
             "no wall) or no run gave it. " + TIMING_NOTE, "", markdown_table(header, cells), ""]
    if failed:
        text += ["## Failed runs", ""] + [f"- `{r.case.label}`: {r.error}" for r in failed] + [""]
    text += ["## Plots", ""] + [f"![{p.stem}](plots/{p.name})" for p in figs]
    text += ["", "Every run's metrics: `runs.csv`; every run's folder: `CONTROLLER/SUBJECT/seedN/`."]
    md = out / "report.md"
    md.write_text("\n".join(text) + "\n", encoding="utf-8")
    return md


def transparency_key(summary: Sequence[Mapping]) -> str:
    """The metric a sweep judges transparency on (:func:`sweep_verdicts`): ``interaction_force_free_rms_N`` with
    a wall in the scenario, else ``interaction_force_rms_N``."""
    return "interaction_force_free_rms_N" if has_wall(summary) else "interaction_force_rms_N"


def write_sweeps_report(result, settings: Mapping, parts: Sequence[tuple[str, object]]) -> Path:
    """``runs.csv``, ``runs.md``, ``summary.csv``, ``summary.md``, ``sweep.json`` and ``report.md`` of a sweep
    over several scenarios.

    ``parts`` are ``(name, SweepResult)`` per scenario, whose folders
    :func:`write_sweep_report` has written; ``result.summary`` is their
    summary rows, each with its ``scenario`` first.  The report's first table
    gives each scenario's transparency figure (:func:`transparency_key`) per
    controller over every subject and seed, the better in bold; then each
    scenario's verdicts (:func:`sweep_verdicts`) and a link to its report.
    """
    out = Path(result.out_dir)
    summary = list(result.summary)
    keys = [k for k, m in METRICS.items() if m.summary and any(r.get(f"{k}_mean") is not None for r in summary)]
    write_csv(out / "summary.csv", summary)
    header, cells = None, []
    for name, part in parts:  # the better value is marked within each scenario
        header, rows = summary_cells(part.summary, keys)
        cells += [[name, *row] for row in rows]
    (out / "summary.md").write_text(markdown_table(["scenario", *header], cells) + "\n", encoding="utf-8")
    _write_run_tables(out, result, settings)

    controllers = list(dict.fromkeys(r["controller"] for r in summary))
    across, bars = [], []
    for name, part in parts:
        key = transparency_key(part.summary)
        overall = {r["controller"]: r for r in part.summary if r["subject"] == "all"}
        # the figure as plots.sweep_bars draws a summary: one group per scenario, one bar per controller
        bars += [{"controller": c, "subject": name, "transparency_mean": r.get(f"{key}_mean"),
                  "transparency_std": r.get(f"{key}_std")} for c, r in overall.items()]
        values = [overall[c].get(f"{key}_mean") if c in overall else None for c in controllers]
        top = best_indices(values, METRICS[key].better)  # every one of a tie at the top
        row = [name, "outside the wall" if key == "interaction_force_free_rms_N" else "whole run"]
        for i, c in enumerate(controllers):
            v = values[i]
            cell = ("—" if c not in overall else "every run failed" if not overall[c]["n_ok"]
                    else "n/a" if v is None else fmt_stat(v, overall[c].get(f"{key}_std")))
            row.append(f"**{cell}**" if i in top else cell)
        across.append(row)
    force = METRICS["interaction_force_rms_N"]
    fig = plots.sweep_bars(bars, "transparency", out / "plots" / "transparency_across_scenarios.png",
                           ylabel=f"{force.label} [{force.unit}]",
                           title="transparency across the scenarios, mean ± std over subjects and seeds\n"
                                 "(with a wall: the hand outside it)")
    failed = result.failed
    text = [f"# Sweep report: {len(parts)} scenarios", "",
            f"Scenarios {', '.join(name for name, _ in parts)}; controllers {', '.join(settings['controllers'])}; "
            f"subjects {', '.join(settings['subjects'])}; seeds {', '.join(map(str, settings['seeds']))}; "
            f"executor: {settings['executor']}; {len(result.results)} runs, {len(failed)} failed, "
            f"{result.wall_time_s:.1f} s wall time.", "", CAUTION, "",
            "## Transparency across the scenarios", "",
            f"{METRICS['interaction_force_rms_N'].label} [{METRICS['interaction_force_rms_N'].unit}], mean ± "
            "standard deviation over every subject and seed; in a scenario with a wall, over the ticks with the "
            "hand outside it (`interaction_force_free_rms_N`), since inside it the force is the wall a variant "
            "renders on purpose. The better value per scenario is in bold (each of those level at the top); — : not "
            "run in that scenario; a value without ± is one run's, or the same in every run.", "",
            markdown_table(["scenario", "ticks", *controllers], across), "", f"![{fig.stem}](plots/{fig.name})", "",
            "## Scenario by scenario", ""]
    for name, part in parts:
        text += [f"### {name}", "", f"Report: [{name}/report.md]({name}/report.md).", ""]
        verdicts = sweep_verdicts(part.summary)
        for question, lines in verdicts.items():
            text += [f"{question}:", ""] + [f"- {s}" for s in lines] + [""]
        if not verdicts:
            text += ["No verdict: fewer than two variants have the figures.", ""]
    if failed:
        text += ["## Failed runs", ""] + [f"- `{r.case.label}`: {r.error}" for r in failed] + [""]
    text += ["Every run's metrics: `runs.csv`; every summary row: `summary.csv`; each scenario's tables, plots and "
             "runs: `SCENARIO/` (runs in `SCENARIO/CONTROLLER/SUBJECT/seedN/`)."]
    md = out / "report.md"
    md.write_text("\n".join(text) + "\n", encoding="utf-8")
    return md
