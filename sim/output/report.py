"""Markdown and CSV reports of a run, a comparison of runs, and a sweep.

Each report holds the metrics, the plots (:mod:`sim.output.plots`) and the cautions.
The "better" value of a row follows :data:`sim.analysis.metrics.METRICS`: lower, higher,
closest to zero, to one, or to the commanded wall stiffness.
"""

from __future__ import annotations

import json
import math
from collections.abc import Mapping, Sequence
from pathlib import Path

import numpy as np

from sim.analysis.derived import cuff_columns
from sim.analysis.metrics import METRICS, flat_metrics, hand_cuff_index, wall_normal_series
from sim.analysis.tables import run_rows, write_csv
from sim.loop.runlog import Run, RunLogError, load_run
from sim.output import plots
from sim.output.figures import compare_figures, run_figures

__all__ = ["CAUTION", "best_index", "best_indices", "key_info", "comparison_rows", "markdown_table",
           "write_run_report", "compare_runs", "write_sweep_report", "write_sweeps_report", "sweep_verdicts",
           "has_wall", "transparency_key"]

#: Printed in every report.
CAUTION = (
    "**Caution.** These are results of a simulation. They are no evidence that a controller is safe on a person. "
    "Anything prototyped here must be verified on the real device under IEC 80601-2-78 (medical robots for "
    "rehabilitation), ISO 13482 where it applies, and local regulation, and used with patients only under "
    "clinical supervision and licensed practice. The body-region force limits used here (ISO/TS 15066 Annex A) "
    "were set for industrial collaborative robots; some of their values are unconfirmed (see the run's metrics)."
)


def fmt(v, digits: int = 4) -> str:
    """A number for a table: 4 significant digits, ``n/a`` for None."""
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
    """Unit, better side and label of a flat metric key, per-cuff (``cuffs.NAME.KEY``) and per-level keys too."""
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
    return "", None, ""


def comparison_rows(labels: Sequence[str], metrics: Sequence[Mapping]) -> list[dict]:
    """One row per metric key present in any run: ``key``, ``unit``, one value per label and ``best`` (a label or
    empty).  Known keys come in :data:`sim.analysis.metrics.METRICS` order, per-cuff and per-level keys after them."""
    flats = [flat_metrics(m) for m in metrics]
    keys = [k for k in METRICS if any(k in f for f in flats)]
    keys += [k for k in dict.fromkeys(k for f in flats for k in f) if k not in METRICS]
    rows = []
    for k in keys:
        unit, better, _ = key_info(k)
        values = [f.get(k) for f in flats]
        ref = METRICS[k].reference if k in METRICS else None
        b = best_index(values, better, [f.get(ref) for f in flats] if ref else None)
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


def _wall_spec(meta: Mapping) -> dict | None:
    for w in meta.get("walls") or []:
        if isinstance(w, list) and len(w) == 2 and w[0] == "wall_plane":
            return w[1]
    return None


def _wall_series(run, spec: Mapping) -> tuple[np.ndarray, np.ndarray]:
    hand = hand_cuff_index(run.meta["cuffs"], spec.get("sensor", "hand"))
    return wall_normal_series(run.arrays | cuff_columns(run), spec["point_m"], spec["normal"], hand)


def write_run_report(folder: str | Path, metrics: Mapping | None = None, *, run: Run | None = None) -> Path:
    """``report.md`` and ``plots/*.png`` of one coupled run folder: key metrics, force plots, cautions.

    ``run``: the run already read from ``folder`` (:func:`sim.loop.runlog.load_run`),
    so that it is not read again (nor its derived columns computed again).
    """
    folder = Path(folder)
    run = load_run(folder) if run is None else run
    m = dict(run.metrics if metrics is None else metrics)
    meta = run.meta
    figs = run_figures(run, m, folder)
    flat = flat_metrics(m)
    rows = [[k, key_info(k)[0], fmt(v), key_info(k)[2]] for k, v in flat.items()]
    text = [f"# Run report: {meta['scenario']} / {meta['controller']} / seed {meta['seed']}", "",
            f"Status: {meta.get('status', 'unknown')}, {fmt(m.get('sim_duration_s'))} s simulated at "
            f"{1.0 / float(meta['dt_s']):g} Hz control, {meta['substeps']} physics substeps.", "", CAUTION, "",
            "## Metrics", "", markdown_table(["key", "unit", "value", "meaning"], rows), "", "## Plots", ""]
    text += [f"![{p.stem}](plots/{p.name})" for p in figs]
    out = folder / "report.md"
    out.write_text("\n".join(text) + "\n", encoding="utf-8")
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
    rows = comparison_rows(labels, [r.metrics for r in runs])
    write_csv(out / "compare.csv", rows)
    figs = compare_figures(runs, labels, out)
    header = ["metric", "unit", *labels]
    scen = sorted({str(r.meta.get("scenario")) for r in runs})
    text = ["# Comparison: " + ", ".join(labels), "",
            f"Scenario(s): {', '.join(scen)}. Runs: " + ", ".join(f"`{Path(d).name}`" for d in run_dirs) + ".", "",
            "The better value of each row is in bold (lower, higher, closest to zero or one, or closest to the "
            "commanded wall stiffness, as the metric calls for; timing rows depend on this machine).", "",
            CAUTION, "", markdown_table(header, _marked(rows, labels, "md")), "", "## Plots", ""]
    text += [f"![{p.stem}](plots/{p.name})" for p in figs]
    md = out / "compare.md"
    md.write_text("\n".join(text) + "\n", encoding="utf-8")
    return rows, labels, md


def headline(summary: Sequence[Mapping], key: str = "interaction_force_rms_N") -> list[str]:
    """Sentences saying which controller has the better overall mean of ``key`` and by how much.

    Controllers that share the best mean (e.g. a wall variant in a scenario
    without wall contact gives the same torques as the variant without the
    wall) are said to be level, and each is then compared with the others.
    """
    info = METRICS[key]
    overall = [r for r in summary if r["subject"] == "all" and r.get(f"{key}_mean") is not None]
    if len(overall) < 2:
        return []
    top = best_indices([r[f"{key}_mean"] for r in overall], info.better,
                       [r.get(f"{info.reference}_mean") for r in overall] if info.reference else None)
    bests = [overall[i] for i in top]

    def stat(r: Mapping) -> str:
        return f"{fmt(r[f'{key}_mean'])} ± {fmt(r[f'{key}_std'], 2)} {info.unit}"

    out = []
    if len(bests) > 1:
        out.append(" and ".join(f"`{r['controller']}`" for r in bests) + f" are level on {info.label}: "
                   + " and ".join(stat(r) for r in bests) + ", over "
                   + " and ".join(str(r["n_ok"]) for r in bests) + " runs.")
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
    variant renders on purpose and a variant without it does not.  Without a
    wall, on ``interaction_force_rms_N``.
    """
    walled = has_wall(summary)
    out = {"Which is more transparent": (headline(summary, transparency_key(summary)) if walled else [])
           or headline(summary)}
    if walled:
        out["Which renders the wall closest to its commanded stiffness"] = headline(
            summary, "wall_stiffness_rendered_N_per_m")
    return {q: lines for q, lines in out.items() if lines}


def summary_cells(summary: Sequence[Mapping], keys: Sequence[str]) -> tuple[list[str], list[list[str]]]:
    """Header and text cells of a sweep summary: ``mean ± std`` per key; the better overall mean in bold."""
    header = ["controller", "subject", "runs ok", "failed"] + [f"{k} [{METRICS[k].unit}]" for k in keys]
    best = {}
    for k in keys:
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
            m, s = r.get(f"{k}_mean"), r.get(f"{k}_std")
            c = "n/a" if m is None else f"{fmt(m)} ± {fmt(s, 2)}"
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
             "The better value per subject group is in bold.", "", markdown_table(header, cells), ""]
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
                    else "n/a" if v is None else f"{fmt(v)} ± {fmt(overall[c].get(f'{key}_std'), 2)}")
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
            "run in that scenario.", "",
            markdown_table(["scenario", "ticks", *controllers], across), "", f"![{fig.stem}](plots/{fig.name})", "",
            "## Scenario by scenario", ""]
    for name, part in parts:
        text += [f"### {name}", "", f"Report: [{name}/report.md]({name}/report.md).", ""]
        verdicts = sweep_verdicts(part.summary)
        for question, lines in verdicts.items():
            text += [f"{question}:", ""] + [f"- {s}" for s in lines] + [""]
        if not verdicts:
            text += ["No verdict: the variants are level (equal means) on every question, or fewer than two have "
                     "the figures.", ""]
    if failed:
        text += ["## Failed runs", ""] + [f"- `{r.case.label}`: {r.error}" for r in failed] + [""]
    text += ["Every run's metrics: `runs.csv`; every summary row: `summary.csv`; each scenario's tables, plots and "
             "runs: `SCENARIO/` (runs in `SCENARIO/CONTROLLER/SUBJECT/seedN/`)."]
    md = out / "report.md"
    md.write_text("\n".join(text) + "\n", encoding="utf-8")
    return md
