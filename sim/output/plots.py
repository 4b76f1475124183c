"""Plots of runs, comparisons and sweeps (matplotlib, PNG files, no display needed).

Computing and drawing stay apart: every function here takes arrays or metric
dicts already computed (:mod:`sim.analysis.metrics`) and only draws.  Each returns the
path it wrote.  matplotlib is imported on first use with the non-interactive
``Agg`` backend, so plotting works on a machine with no display.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from pathlib import Path

import numpy as np

__all__ = ["force_over_time", "force_against_penetration", "bars", "solve_time_histograms", "sweep_bars",
           "level_timeline"]


def _plt():
    import matplotlib

    matplotlib.use("Agg", force=True)
    import matplotlib.pyplot as plt

    return plt


def _save(fig, path: Path, margins: tuple[float, float, float, float] | None = None) -> Path:
    """Write ``fig`` as a PNG. ``margins`` (left, bottom, right, top, as fractions of the figure) place the axes
    directly; without them ``tight_layout`` fits the labels, which costs a second drawing of the figure."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    if margins is None:
        fig.tight_layout()
    else:
        left, bottom, right, top = margins
        fig.subplots_adjust(left=left, bottom=bottom, right=right, top=top)
    fig.savefig(path, dpi=110)
    _plt().close(fig)
    return path


def force_over_time(series: Mapping[str, tuple[np.ndarray, np.ndarray]], path: Path, *,
                    title: str = "interaction force") -> Path:
    """One line per label: (t [s], F [N]), e.g. the overall interaction force of each variant or each cuff."""
    plt = _plt()
    fig, ax = plt.subplots(figsize=(8, 3.6))
    for label, (t, f) in series.items():
        ax.plot(t, f, lw=1.0, label=label)
    ax.set_xlabel("time [s]")
    ax.set_ylabel("force [N]")
    ax.set_title(title)
    ax.grid(alpha=0.3)
    ax.legend(loc="upper right", fontsize=8)
    return _save(fig, path, margins=(0.08, 0.14, 0.98, 0.91))  # fixed labels: no second drawing for the layout


def force_against_penetration(series: Mapping[str, tuple[np.ndarray, np.ndarray]], path: Path, *,
                              commanded_N_per_m: float | None = None) -> Path:
    """Wall-normal force [N] against penetration [mm] per label, with the commanded spring as a dashed line."""
    plt = _plt()
    fig, ax = plt.subplots(figsize=(6, 4.2))
    pmax = 0.0
    for label, (p, f) in series.items():
        sel = p > -0.005
        ax.plot(1e3 * p[sel], f[sel], ".", ms=1.5, label=label)
        if np.any(sel):
            pmax = max(pmax, float(p[sel].max()))
    if commanded_N_per_m:
        x = np.linspace(0.0, max(pmax, 1e-3), 2)
        ax.plot(1e3 * x, commanded_N_per_m * x, "k--", lw=1, label=f"commanded {commanded_N_per_m:g} N/m")
    ax.axvline(0.0, color="0.5", lw=0.8)
    ax.set_xlabel("penetration of the hand [mm]")
    ax.set_ylabel("wall-normal force felt [N]")
    ax.set_title("force against penetration")
    ax.grid(alpha=0.3)
    ax.legend(fontsize=8, markerscale=6)
    return _save(fig, path, margins=(0.12, 0.12, 0.97, 0.92))  # fixed labels: no second drawing for the layout


def bars(values: Mapping[str, float | None], path: Path, *, ylabel: str, title: str) -> Path:
    """One bar per label (a missing value is shown as 'n/a')."""
    plt = _plt()
    fig, ax = plt.subplots(figsize=(max(4.0, 1.2 * len(values) + 2), 3.6))
    labels = list(values)
    y = [np.nan if values[k] is None else float(values[k]) for k in labels]
    ax.bar(range(len(labels)), np.nan_to_num(y), color="tab:blue")
    for i, v in enumerate(y):
        ax.annotate("n/a" if np.isnan(v) else f"{v:.3g}", (i, 0 if np.isnan(v) else v), ha="center",
                    va="bottom", fontsize=8)
    ax.set_xticks(range(len(labels)), labels, rotation=20, ha="right")
    ax.axhline(0.0, color="k", lw=0.8)
    ax.set_ylabel(ylabel)
    ax.set_title(title)
    ax.grid(axis="y", alpha=0.3)
    return _save(fig, path)


def solve_time_histograms(times_s: Mapping[str, np.ndarray], path: Path) -> Path:
    """Histogram of the per-tick QP solve time [us] per label, logarithmic bins."""
    plt = _plt()
    fig, ax = plt.subplots(figsize=(7, 3.6))
    data = {k: 1e6 * np.asarray(v)[np.isfinite(v)] for k, v in times_s.items()}
    data = {k: v[v > 0] for k, v in data.items() if np.any(v > 0)}
    if data:
        lo = min(v.min() for v in data.values())
        hi = max(v.max() for v in data.values())
        edges = np.geomspace(max(lo, 1e-3), max(hi, lo * 1.01), 60)
        for label, v in data.items():
            ax.hist(v, bins=edges, histtype="step", lw=1.2, label=f"{label} (median {np.median(v):.0f} us)")
        ax.set_xscale("log")
        from matplotlib.ticker import LogLocator, NullFormatter, StrMethodFormatter

        ax.xaxis.set_major_locator(LogLocator(subs=(1.0, 2.0, 5.0)))  # 100, 200, 500, 1000 ... in plain numbers
        ax.xaxis.set_major_formatter(StrMethodFormatter("{x:g}"))
        ax.xaxis.set_minor_formatter(NullFormatter())
        ax.legend(fontsize=8)
    else:
        ax.text(0.5, 0.5, "no QP in these controllers", ha="center", va="center", transform=ax.transAxes)
    ax.set_xlabel("solve time per tick [us]")
    ax.set_ylabel("ticks")
    ax.set_title("hierarchical QP solve time")
    ax.grid(alpha=0.3)
    return _save(fig, path)


def sweep_bars(rows: Sequence[Mapping], key: str, path: Path, *, ylabel: str, title: str) -> Path:
    """Grouped bars of ``KEY_mean`` with ``KEY_std`` error bars: one group per subject, one bar per controller.

    ``rows`` are :func:`sim.experiments.sweep.summarize` rows; the ``"all"`` group comes first.
    """
    plt = _plt()
    controllers = list(dict.fromkeys(r["controller"] for r in rows))
    subjects = list(dict.fromkeys(r["subject"] for r in rows))
    by = {(r["controller"], r["subject"]): r for r in rows}
    width_in, height_in = max(5.0, 1.1 * len(subjects) * max(1, len(controllers)) * 0.5 + 2), 3.8
    fig, ax = plt.subplots(figsize=(width_in, height_in))
    width = 0.8 / max(1, len(controllers))
    for j, c in enumerate(controllers):
        m = [by.get((c, s), {}).get(f"{key}_mean") for s in subjects]
        e = [by.get((c, s), {}).get(f"{key}_std") for s in subjects]
        x = np.arange(len(subjects)) + (j - (len(controllers) - 1) / 2) * width
        ax.bar(x, [np.nan if v is None else v for v in m], width, yerr=[0 if v is None else v for v in e],
               capsize=3, label=c)
    ax.set_xticks(range(len(subjects)), subjects)
    ax.axhline(0.0, color="k", lw=0.8)
    ax.set_ylabel(ylabel)
    ax.set_title(title, fontsize=10)
    ax.ticklabel_format(axis="y", style="sci", scilimits=(-3, 4))  # short tick labels: they fit the fixed margin
    ax.legend(fontsize=8)
    ax.grid(axis="y", alpha=0.3)
    # fixed margins in inches (the y label and its ticks, the subjects, a title of up to two lines): no second
    # drawing for the layout
    return _save(fig, path, margins=(0.95 / width_in, 0.4 / height_in, 1 - 0.15 / width_in, 1 - 0.55 / height_in))


def _segments(mask: np.ndarray, t: np.ndarray, dt: float) -> list[tuple[float, float]]:
    """(start [s], width [s]) of each run of True in ``mask`` over the ticks at times ``t``, each tick ``dt`` long."""
    m = np.asarray(mask, dtype=bool)
    if not m.any():
        return []
    edges = np.flatnonzero(np.diff(np.concatenate([[0], m.astype(np.int8), [0]])))
    return [(float(t[a]), float((b - a) * dt)) for a, b in zip(edges[::2], edges[1::2])]


def level_timeline(t: np.ndarray, lanes: Sequence[tuple[str, np.ndarray, np.ndarray, np.ndarray]], path: Path, *,
                   title: str = "priority levels over time") -> Path:
    """One lane per priority level (the highest on top) over time [s]: a pale band where the level had rows, a
    dark band inside it where it was binding, and a short bar above the band where the QP backend solved it.

    ``lanes``: ``(label, active, binding, qp)`` per level, the last three boolean arrays over the ticks ``t``.
    """
    plt = _plt()
    t = np.asarray(t, dtype=float)
    dt = float(np.median(np.diff(t))) if t.size > 1 else 1e-3
    n = max(len(lanes), 1)
    fig, ax = plt.subplots(figsize=(8, 1.2 + 0.55 * n))
    colours = {"active": "#c9d9ec", "binding": "#2d5f8b", "qp": "#d9822b"}
    for row, (_, active, binding, qp) in enumerate(lanes):
        y = n - 1 - row
        ax.broken_barh(_segments(active, t, dt), (y - 0.35, 0.7), facecolors=colours["active"], lw=0)
        ax.broken_barh(_segments(binding, t, dt), (y - 0.2, 0.4), facecolors=colours["binding"], lw=0)
        ax.broken_barh(_segments(qp, t, dt), (y + 0.22, 0.13), facecolors=colours["qp"], lw=0)
    ax.set_yticks(range(n))
    ax.set_yticklabels([lanes[n - 1 - y][0] for y in range(n)] if lanes else [""], fontsize=8)
    ax.set_ylim(-0.6, n - 0.4)
    if t.size:
        ax.set_xlim(float(t[0]), float(t[-1]) + dt)
    ax.set_xlabel("time [s]")
    ax.set_ylabel("level (highest priority on top)", fontsize=8)
    ax.grid(axis="x", alpha=0.3)
    from matplotlib.patches import Patch

    fig.legend(handles=[Patch(color=colours["active"], label="has rows (active)"),
                        Patch(color=colours["binding"], label="binding"),
                        Patch(color=colours["qp"], label="solved by the QP backend")],
               loc="lower center", ncol=3, fontsize=8, frameon=False)
    ax.set_title(title, fontsize=10)
    height = fig.get_size_inches()[1]
    fig.tight_layout(rect=(0.0, 0.32 / height, 1.0, 1.0))  # the lane labels, the title; the legend's strip below
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fig.savefig(path, dpi=110)
    plt.close(fig)
    return path
