"""Sweep options beyond controllers, wearers and seeds: scenario parameters by field path, and a sampled population.

**Field paths.**  ``"plant.model_mass_scale"`` walks the frozen dataclasses of
:class:`sim.loop.scenario.Scenario` (``Scenario.plant.model_mass_scale``); an
element of a tuple of records is named by its ``name`` field or its index
(``"cuffs.hand.params.stiffness_N_per_m"``, ``"cuffs.0.params..."``).  The
new scenario is built with :func:`dataclasses.replace` at every level, so each
record validates its new value.  A value is a Python literal
(:func:`ast.literal_eval`: ``0.7``, ``5``, ``True``, ``None``, ``(0.01, 0, 0)``)
or, for fields whose values are objects, one of the names of
:data:`NAMED_VALUES`:

=============  =======================================================================
field          names
=============  =======================================================================
actuators      ``geared`` (ActuatorParams()), ``ideal`` (IdealActuatorParams()),
               ``sea`` (SeriesElasticParams())
impairment     ``none``, ``mild``, ``moderate``, ``severe`` (Weakness.grade of every
               arm joint), ``spastic-mild``, ``spastic-moderate``, ``spastic-severe``
               (Spasticity.grade of the elbow)
=============  =======================================================================

Any other object goes through the Python API: :func:`vary_scenario` takes the
value itself.

**Population.**  :func:`sample_population` draws wearers from normal
distributions of stature and body mass per sex with the means and standard
deviations of the ANSUR II survey (Gordon et al. 2014, unweighted values of
its public working data; men n = 4082, women n = 1986), seeded by
:class:`numpy.random.SeedSequence`.  Our summary of the survey has no
stature-mass correlation, so ``correlation`` defaults to 0 (independent
draws; a known value can be given); half the wearers are expected to be
women (``female_fraction`` = 0.5, common practice for a balanced virtual
cohort, not the survey's 33 %).  Draws outside :class:`models.human.Subject`'s
ranges are drawn again (a truncated normal; none at 4 standard deviations).

References
----------
.. [Gordon2014] Gordon C.C., Blackwell C.L., Bradtmiller B., Parham J.L.,
   Barrientos P., Paquette S.P., Corner B.D., Carson J.M., Venezia J.C.,
   Rockwell B.M., Mucher M., Kristensen S. (2014), *2012 Anthropometric
   Survey of U.S. Army Personnel: Methods and Summary Statistics*, Natick
   Technical Report NATICK/TR-15/007.
"""

from __future__ import annotations

import ast
import dataclasses
import json
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from types import MappingProxyType

import numpy as np

from models.errors import ParameterError, SandboxError
from models.human import Subject
from sim.physics.actuators import ActuatorParams, IdealActuatorParams
from sim.physics.impairment import GRADES, Impairment, Spasticity, Weakness
from sim.physics.sea import SeriesElasticParams

__all__ = ["VaryError", "Variation", "parse_vary", "vary_scenario", "field_value", "NAMED_VALUES",
           "ANSUR_II", "sample_population", "wearer_name", "check_paths",
           "SENSITIVITY_KEYS", "sensitivity_rows", "population_rows", "write_vary_outputs"]


class VaryError(SandboxError, ValueError):
    """A ``--vary`` option that names no field, or a value the field refuses."""


def _named_values() -> Mapping[str, Mapping[str, object]]:
    impairments: dict[str, object] = {"none": None}
    for g in GRADES:
        impairments[g] = Impairment(weakness=Weakness.grade(g))
    for g in GRADES:
        impairments[f"spastic-{g}"] = Impairment(spasticity=Spasticity.grade(g))
    return MappingProxyType({
        "actuators": MappingProxyType({"geared": ActuatorParams(), "ideal": IdealActuatorParams(),
                                       "sea": SeriesElasticParams()}),
        "impairment": MappingProxyType(impairments),
    })


#: Values of object fields by name, for the command line (the table in this module's docstring).
NAMED_VALUES: Mapping[str, Mapping[str, object]] = _named_values()


@dataclass(frozen=True)
class Variation:
    """One ``--vary`` option: a field path and its values as typed (text, so that a case pickles and plans)."""

    path: str
    values: tuple[str, ...]

    def value(self, text: str) -> object:
        """The value of ``text`` for this field: a name of :data:`NAMED_VALUES`, else a Python literal."""
        named = NAMED_VALUES.get(self.path, {})
        if text in named:
            return named[text]
        try:
            return ast.literal_eval(text)
        except (ValueError, SyntaxError) as e:
            hint = f" or one of {', '.join(named)}" if named else ""
            raise VaryError(f"--vary {self.path}: the value {text!r} is not a Python literal{hint}") from e


def parse_vary(option: str) -> Variation:
    """``"FIELD.PATH=V1,V2,..."`` as a :class:`Variation` (commas inside brackets belong to a value)."""
    path, sep, rest = option.partition("=")
    path = path.strip()
    if not sep or not path or not rest.strip():
        raise VaryError(f"--vary must be FIELD.PATH=V1,V2,..., e.g. plant.model_mass_scale=0.7,1.0,1.3; "
                        f"got {option!r}")
    values, depth, cur = [], 0, ""
    for ch in rest:
        depth += 1 if ch in "([{" else -1 if ch in ")]}" else 0
        if ch == "," and depth == 0:
            values.append(cur.strip())
            cur = ""
        else:
            cur += ch
    values.append(cur.strip())
    if any(not v for v in values) or len(set(values)) != len(values):
        raise VaryError(f"--vary {path}: the values must be distinct and non-empty, got {rest!r}")
    return Variation(path, tuple(values))


def _fields_of(obj: object) -> list[str]:
    if dataclasses.is_dataclass(obj):
        return [f.name for f in dataclasses.fields(obj) if f.init]
    if isinstance(obj, tuple):
        names = [str(getattr(x, "name", "")) for x in obj if getattr(x, "name", "")]
        return names + [str(i) for i in range(len(obj))]
    return []


def _element(seq: tuple, key: str, where: str) -> int:
    for i, x in enumerate(seq):
        if getattr(x, "name", None) == key:
            return i
    if key.isdigit() and int(key) < len(seq):
        return int(key)
    raise VaryError(f"--vary: {where} has no element {key!r}; its elements: {', '.join(_fields_of(seq)) or 'none'}")


def _describe(obj: object) -> str:
    return type(obj).__name__


def field_value(scenario: object, path: str) -> object:
    """The value at ``path`` in ``scenario`` (a :class:`VaryError` names a bad path and the fields there)."""
    obj, where = scenario, "Scenario"
    for key in path.split("."):
        if isinstance(obj, tuple):
            obj = obj[_element(obj, key, where)]
        elif dataclasses.is_dataclass(obj) and key in _fields_of(obj):
            obj = getattr(obj, key)
        else:
            there = ", ".join(_fields_of(obj)) or f"none ({_describe(obj)} has no fields)"
            raise VaryError(f"--vary {path}: {where} ({_describe(obj)}) has no field {key!r}; its fields: {there}")
        where = f"{where}.{key}"
    return obj


def _set(obj: object, keys: Sequence[str], value: object, where: str, path: str) -> object:
    key, rest = keys[0], keys[1:]
    if isinstance(obj, tuple):
        i = _element(obj, key, where)
        new = value if not rest else _set(obj[i], rest, value, f"{where}.{key}", path)
        return obj[:i] + (new,) + obj[i + 1:]
    if not (dataclasses.is_dataclass(obj) and key in _fields_of(obj)):
        there = ", ".join(_fields_of(obj)) or f"none ({_describe(obj)} has no fields)"
        raise VaryError(f"--vary {path}: {where} ({_describe(obj)}) has no field {key!r}; its fields: {there}")
    new = value if not rest else _set(getattr(obj, key), rest, value, f"{where}.{key}", path)
    return dataclasses.replace(obj, **{key: new})


def vary_scenario(scenario, path: str, value: object):
    """``scenario`` with the field at ``path`` set to ``value`` (every record on the way rebuilt and validated).

    Raises
    ------
    VaryError
        A path that names no field (the message lists the fields there), or a
        value the field refuses (the record's own message).
    """
    try:
        return _set(scenario, path.split("."), value, "Scenario", path)
    except VaryError:
        raise
    except (SandboxError, TypeError, ValueError) as e:
        raise VaryError(f"--vary {path}={value!r}: {e}") from e


# -- population ------------------------------------------------------------------------------------------------
#: ANSUR II stature [m] and body mass [kg]: mean and standard deviation per sex (Gordon et al. 2014, unweighted
#: values of the public working data, men n = 4082, women n = 1986).
ANSUR_II: Mapping[str, Mapping[str, tuple[float, float]]] = MappingProxyType({
    "male": MappingProxyType({"stature_m": (1.7562, 0.0686), "mass_kg": (85.5, 14.2), "n": (4082, 0)}),
    "female": MappingProxyType({"stature_m": (1.6285, 0.0642), "mass_kg": (67.8, 11.0), "n": (1986, 0)}),
})


def wearer_name(i: int, n: int) -> str:
    """The name of the ``i``-th of ``n`` sampled wearers: ``p`` and its zero-padded number (``p007``)."""
    return f"p{i + 1:0{max(3, len(str(n)))}d}"


def sample_population(n: int, seed: int, *, female_fraction: float = 0.5, correlation: float = 0.0
                      ) -> list[tuple[str, Subject]]:
    """``n`` wearers drawn from the ANSUR II distributions of stature and body mass per sex (seeded).

    Sex is female with probability ``female_fraction``; stature and mass are
    bivariate normal with the sex's means and standard deviations
    (:data:`ANSUR_II`) and ``correlation`` between them; a draw outside
    :class:`~models.human.Subject`'s ranges is drawn again.  The stream is
    ``numpy.random.default_rng(SeedSequence(seed))``: the same ``(n, seed)``
    gives the same wearers, and the first ``k`` wearers of a larger ``n`` are
    the same.

    Returns
    -------
    list of (name, Subject)
        Names from :func:`wearer_name` (``p001``, ...).
    """
    if isinstance(n, bool) or not isinstance(n, (int, np.integer)) or n < 1:
        raise ParameterError(f"population size must be an integer >= 1, got {n!r}")
    if not 0.0 <= female_fraction <= 1.0:
        raise ParameterError(f"female_fraction must be in [0, 1], got {female_fraction!r}")
    if not -1.0 < correlation < 1.0:
        raise ParameterError(f"correlation must be in (-1, 1), got {correlation!r}")
    rng = np.random.default_rng(np.random.SeedSequence(int(seed)))
    out = []
    for i in range(int(n)):
        sex = "female" if rng.random() < female_fraction else "male"
        (hm, hs), (mm, ms) = ANSUR_II[sex]["stature_m"], ANSUR_II[sex]["mass_kg"]
        while True:
            z1, z2 = rng.standard_normal(2)
            h = hm + hs * z1
            m = mm + ms * (correlation * z1 + np.sqrt(1.0 - correlation ** 2) * z2)
            if (Subject.STATURE_RANGE_M[0] <= h <= Subject.STATURE_RANGE_M[1]
                    and Subject.MASS_RANGE_KG[0] <= m <= Subject.MASS_RANGE_KG[1]):
                break
        out.append((wearer_name(i, n), Subject(round(float(h), 4), round(float(m), 2), sex)))
    return out


def check_paths(scenario, variations: Sequence[Variation]) -> None:
    """Apply every value of every variation to ``scenario`` once: a bad path or value fails before any run."""
    seen = set()
    for v in variations:
        if v.path in seen:
            raise VaryError(f"--vary {v.path} is given twice; list all its values in one option")
        seen.add(v.path)
        for text in v.values:
            vary_scenario(scenario, v.path, v.value(text))



# -- tables ----------------------------------------------------------------------------------------------------
#: The metrics of the sensitivity chart (the table holds every summary metric).
SENSITIVITY_KEYS: tuple[str, ...] = ("interaction_force_rms_N", "inertia_share_left", "apparent_mass_hand_kg",
                                     "human_effort_ratio")


def _run_values(results: Sequence, keys: Sequence[str]) -> list[tuple[object, dict]]:
    """``(case, {key: value or None})`` of every run that finished, a value only where the metric applies."""
    from sim.analysis.metrics import flat_metrics
    from sim.output.report import is_applicable

    out = []
    for r in results:
        if not r.ok:
            continue
        flat = flat_metrics(r.metrics)
        try:
            meta = json.loads((Path(r.case.folder) / "meta.json").read_text(encoding="utf-8"))
        except (OSError, ValueError):
            meta = None
        vals = {}
        for k in keys:
            v = flat.get(k) if meta is None or is_applicable(k, flat, meta) else None
            vals[k] = float(v) if isinstance(v, (int, float)) and math.isfinite(v) else None
        out.append((r.case, vals))
    return out


def _mean(values: Sequence) -> float | None:
    v = [x for x in values if x is not None]
    return float(np.mean(v)) if v else None


def _relative_pct(value: float | None, reference: float) -> float | None:
    return None if value is None or reference == 0 else 100.0 * (value - reference) / abs(reference)


def sensitivity_rows(results: Sequence, variations: Sequence[Variation], keys: Sequence[str],
                     reference: Mapping[str, str] | None = None) -> list[dict]:
    """Each metric's relative change at the first and last listed value of each parameter, per controller.

    The value of a (controller, parameter value) is the mean over its wearers
    and seeds; the change is relative to the value at ``reference[path]``
    (the text of the reference value: the scenario's own when it is listed),
    else at the middle listed value:

    .. math:: \\Delta_{low} = 100\\,(y(v_{first}) - y_{ref}) / |y_{ref}| \\ [\\%]

    (None where the reference is 0 or a value is missing).  Rows are sorted
    by effect, :math:`\\max(|\\Delta_{low}|, |\\Delta_{high}|)`, largest first.
    """
    runs = _run_values(results, keys)
    rows = []
    for v in variations:
        ref = (reference or {}).get(v.path, v.values[len(v.values) // 2])
        lo_t, hi_t = v.values[0], v.values[-1]
        for c in dict.fromkeys(case.controller for case, _ in runs):
            at = {t: [vals for case, vals in runs if case.controller == c and case.vary == (v.path, t)]
                  for t in v.values}
            for k in keys:
                y = {t: _mean([vals[k] for vals in at[t]]) for t in v.values}
                if y[ref] is None:
                    continue
                lo, hi = _relative_pct(y[lo_t], y[ref]), _relative_pct(y[hi_t], y[ref])
                effect = max([abs(x) for x in (lo, hi) if x is not None] or [0.0])
                rows.append({"parameter": v.path, "controller": c, "metric": k, "reference": ref, "low": lo_t,
                             "high": hi_t, "value_reference": y[ref], "value_low": y[lo_t], "value_high": y[hi_t],
                             "change_low_pct": lo, "change_high_pct": hi, "effect_pct": effect})
    rows.sort(key=lambda r: -r["effect_pct"])
    return rows


def population_rows(results: Sequence, keys: Sequence[str]) -> tuple[list[dict], list[dict]]:
    """Per variant (controller, and the varied value if any) and metric, the mean over the runs (wearers x seeds)
    with its 95 % interval (:func:`sim.analysis.stats.mean_ci95`); and per metric and varied value, the paired
    difference of each other controller minus the first (same wearer, same seed) with its 95 % interval
    (:func:`sim.analysis.stats.paired_difference_ci95`) and whether it excludes 0."""
    from sim.analysis.stats import mean_ci95, paired_difference_ci95

    runs = _run_values(results, keys)
    means, diffs = [], []
    for variant in dict.fromkeys(case.variant for case, _ in runs):
        for k in keys:
            v = [vals[k] for case, vals in runs if case.variant == variant and vals[k] is not None]
            if v:
                ci = mean_ci95(v)
                means.append({"controller": variant, "metric": k, "n": ci.n, "mean": ci.mean, "std": ci.std,
                              "ci95_low": ci.low, "ci95_high": ci.high})
    controllers = list(dict.fromkeys(case.controller for case, _ in runs))
    first = controllers[0] if controllers else None
    by = {(case.controller, case.subject, case.seed, case.vary): vals for case, vals in runs}
    for point in dict.fromkeys(case.vary for case, _ in runs):
        at = "" if point is None else f" @ {point[0]}={point[1]}"
        for c in controllers[1:]:
            for k in keys:
                pairs = [(by[(first, s, seed, p)][k], vals[k]) for (cc, s, seed, p), vals in by.items()
                         if cc == c and p == point and (first, s, seed, p) in by and vals[k] is not None
                         and by[(first, s, seed, p)][k] is not None]
                if len(pairs) < 2:
                    continue
                ci = paired_difference_ci95([a for a, _ in pairs], [b for _, b in pairs])
                diffs.append({"difference": f"{c} - {first}{at}", "metric": k, "n_pairs": ci.n, "mean": ci.mean,
                              "std": ci.std, "ci95_low": ci.low, "ci95_high": ci.high,
                              "larger_than_uncertainty": ci.excludes_zero})
    return means, diffs


def _g(x) -> str:
    return "n/a" if x is None or (isinstance(x, float) and not math.isfinite(x)) else f"{x:.5g}"


def _pct(x) -> str:
    return "n/a" if x is None else f"{x:+.1f} %"


def write_vary_outputs(result, variations: Sequence[Variation]) -> list[Path]:
    """Write a sweep's sensitivity and population tables (CSV and Markdown) and chart, and add them to its
    ``report.md``.

    ``result``: a :class:`sim.experiments.sweep.SweepResult` of one scenario.  With variations:
    ``sensitivity.csv``, ``sensitivity.md`` and ``plots/sensitivity.png`` (:func:`sensitivity_rows`); always:
    ``population.csv``, ``population_differences.csv`` and ``population.md`` (:func:`population_rows`).
    """
    from sim.analysis.metrics import METRICS, TIMING_KEYS
    from sim.analysis.tables import write_csv, write_text
    from sim.loop.scenario import load_scenario
    from sim.output.report import markdown_table
    from sim.output.sensitivity_plot import plot_sensitivity

    out = Path(result.out_dir)
    keys = [k for k, m in METRICS.items() if m.summary and k not in TIMING_KEYS]  # wall-clock figures vary anyway
    written, section = [], ["", "## Varied parameters and population", ""]
    if variations and result.results:
        scenario = load_scenario(result.results[0].case.scenario_path)
        reference = {}
        for v in variations:
            own = field_value(scenario, v.path)
            for t in v.values:
                try:
                    if v.value(t) == own:
                        reference[v.path] = t
                except VaryError:
                    pass
        rows = sensitivity_rows(result.results, variations, keys, reference)
        write_csv(out / "sensitivity.csv", rows)
        shown = [r for r in rows if r["metric"] in SENSITIVITY_KEYS] + \
            [r for r in rows if r["metric"] not in SENSITIVITY_KEYS]
        table = markdown_table(
            ["parameter", "controller", "metric", "reference", "at reference", "low", "at low", "change at low",
             "high", "at high", "change at high"],
            [[r["parameter"], r["controller"], r["metric"], r["reference"], _g(r["value_reference"]), r["low"],
              _g(r["value_low"]), _pct(r["change_low_pct"]), r["high"], _g(r["value_high"]),
              _pct(r["change_high_pct"])] for r in shown])
        text = ("# Sensitivity\n\nEach metric's change at the first (low) and last (high) listed value of each "
                "parameter, relative to its value at the reference (the scenario's own value when listed, else the "
                "middle one); mean over wearers and seeds (the values in the metric's unit beside each change: a "
                "reference near 0 makes any relative change large); the chart's four metrics first, then by effect.\n\n"
                + table + "\n")
        write_text(out / "sensitivity.md", text)
        labels = {k: f"{METRICS[k].label} ({k})" for k in SENSITIVITY_KEYS}
        plot = plot_sensitivity(rows, SENSITIVITY_KEYS, out / "plots" / "sensitivity.png", labels=labels,
                                title="Relative change of each metric at the low and high value of each parameter")
        written += [out / "sensitivity.csv", out / "sensitivity.md", plot]
        section += ["Sensitivity (full table: sensitivity.md):", "", markdown_table(
            ["parameter", "controller", "metric", "change at low", "change at high"],
            [[r["parameter"] + f" {r['low']}..{r['high']}", r["controller"], r["metric"], _pct(r["change_low_pct"]),
              _pct(r["change_high_pct"])] for r in rows if r["metric"] in SENSITIVITY_KEYS]), "",
            "![sensitivity](plots/sensitivity.png)", ""]
        missing = [k for k in SENSITIVITY_KEYS if not any(r["metric"] == k for r in rows)]
        if missing:
            section += [f"Not drawn (no applicable value at the reference; see each run's metrics.json): "
                        f"{', '.join(missing)}.", ""]
    means, diffs = population_rows(result.results, keys)
    write_csv(out / "population.csv", means)
    write_csv(out / "population_differences.csv", diffs)
    focus = [k for k in SENSITIVITY_KEYS] + [k for k in keys if k not in SENSITIVITY_KEYS]
    order = {k: i for i, k in enumerate(focus)}
    mt = markdown_table(["controller", "metric", "n", "mean", "std", "95 % CI"],
                        [[r["controller"], r["metric"], r["n"], _g(r["mean"]), _g(r["std"]),
                          f"[{_g(r['ci95_low'])}, {_g(r['ci95_high'])}]"]
                         for r in sorted(means, key=lambda r: order[r["metric"]])])
    dt = markdown_table(["difference", "metric", "pairs", "mean", "95 % CI", "verdict"],
                        [[r["difference"], r["metric"], r["n_pairs"], _g(r["mean"]),
                          f"[{_g(r['ci95_low'])}, {_g(r['ci95_high'])}]",
                          "larger than its uncertainty" if r["larger_than_uncertainty"] else "within its uncertainty"]
                         for r in sorted(diffs, key=lambda r: order[r["metric"]])])
    text = ("# Means and paired differences\n\nPer variant (controller, and the varied value if any): mean over "
            "the runs (wearers x seeds), sample standard deviation and "
            "two-sided 95 % Student-t interval of the mean; paired differences over the same wearer and seed "
            "(and varied value), with the paired-t interval: a difference is larger than its uncertainty when its "
            "interval excludes 0.\n\n" + mt + "\n\n## Paired differences\n\n" + dt + "\n")
    write_text(out / "population.md", text)
    written += [out / "population.csv", out / "population_differences.csv", out / "population.md"]
    section += ["Paired differences (means and intervals per variant: population.md):", "",
                "none: fewer than two runs of one wearer set per controller to pair (give --population N or more "
                "subjects or seeds)" if not diffs else markdown_table(
                    ["difference", "metric", "mean", "95 % CI", "verdict"],
                               [[r["difference"], r["metric"], _g(r["mean"]),
                                 f"[{_g(r['ci95_low'])}, {_g(r['ci95_high'])}]",
                                 "larger than its uncertainty" if r["larger_than_uncertainty"]
                                 else "within its uncertainty"]
                                for r in diffs if r["metric"] in SENSITIVITY_KEYS]), ""]
    report = out / "report.md"
    if report.is_file():
        write_text(report, report.read_text(encoding="utf-8").rstrip("\n") + "\n" + "\n".join(section))
    return written
