"""Plots of runs, comparisons and sweeps (matplotlib, PNG files, no display needed).

Computing and drawing stay apart: every function here takes arrays or metric
dicts already computed (:mod:`sim.analysis.metrics`, :mod:`sim.output.figures`)
and only draws.  Each returns the path it wrote.  matplotlib is imported on
first use with the non-interactive ``Agg`` backend, so plotting works on a
machine with no display.

Style
-----
One palette (:data:`PALETTE`, colours picked for this project: distinct in hue
and lightness, so that they also part in grey print) and one set of text sizes
(:data:`STYLE`) serve every figure; :data:`ROLE_COLOURS` gives the fixed colour
of a recurring meaning (the wearer's intent, the wearer with the robot, the
wearer alone, the robot, a wall or limit).  Titles are wrapped to the figure's
width and the top margin grows with them, and legends sit in a row of their own
between the title and the axes, so that neither a long title is cut off nor a
legend hides data.  Margins are set in inches from the text they must hold,
without a second drawing of the figure for the layout.
"""

from __future__ import annotations

import functools
import math
import textwrap
from collections.abc import Mapping, Sequence
from pathlib import Path
from types import MappingProxyType

import numpy as np

__all__ = ["PALETTE", "ROLE_COLOURS", "STYLE", "force_over_time", "force_against_penetration", "bars",
           "solve_time_histograms", "sweep_bars", "joint_angles", "hand_path", "torque_against_limits",
           "mass_scatter", "limit_phase", "wrap_title", "level_timeline", "envelope"]

#: Line colours in order of use (our own choice: ink blue, ochre, moss green, berry, slate, copper, teal, plum).
PALETTE = ("#23507a", "#c98a1b", "#5b7f2b", "#a13d63", "#5a6470", "#b8612f", "#2a8c89", "#6e4d99")
#: The colour of a recurring meaning, the same in every figure.
ROLE_COLOURS = MappingProxyType({
    "intent": "#333333",      # the scripted target: near black, dashed
    "with robot": PALETTE[0],  # the wearer in the robot
    "alone": PALETTE[1],       # the wearer without the robot (the baseline run)
    "robot": PALETTE[3],       # the robot's own point or joint
    "limit": "#b23a2e",        # a wall, a stop, a torque limit
    "limit fill": "#f2d4cf",   # the forbidden side of a limit
    "contact": "#e7e1f2",      # shading of the periods of wall contact
    "fault": "#f6e2c0",        # shading of the periods with a fault active
})
#: Text sizes [pt] and figure resolution [dpi].
STYLE = MappingProxyType({"title": 10.0, "label": 9.0, "tick": 8.0, "legend": 8.0, "panel": 8.5, "dpi": 110})

_RC = MappingProxyType({
    "axes.titlesize": STYLE["panel"], "axes.labelsize": STYLE["label"], "xtick.labelsize": STYLE["tick"],
    "ytick.labelsize": STYLE["tick"], "legend.fontsize": STYLE["legend"], "axes.spines.top": False,
    "axes.spines.right": False, "grid.alpha": 0.3})
_LINE_IN = 1.3 / 72  # height of one line of text per point of font size [in]


def _plt():
    import matplotlib

    matplotlib.use("Agg", force=True)
    import matplotlib.pyplot as plt

    return plt


def _styled(draw):
    """Run a drawing function under :data:`STYLE` (``matplotlib.rc_context``: matplotlib's own settings are left
    as they were afterwards)."""
    @functools.wraps(draw)
    def wrapper(*args, **kwargs):
        from cycler import cycler

        with _plt().rc_context({**_RC, "axes.prop_cycle": cycler(color=PALETTE)}):
            return draw(*args, **kwargs)

    return wrapper


def wrap_title(text: str, width_in: float, fontsize: float = STYLE["title"]) -> str:
    """``text`` broken into lines that fit ``width_in`` inches at ``fontsize`` points.

    A character of the default sans-serif font is at most about 0.6 of the
    font size wide on average over words (common practice for an estimate);
    existing line breaks are kept.
    """
    chars = max(12, int(width_in * 72 / (0.6 * fontsize)))
    return "\n".join(textwrap.fill(line, chars, break_long_words=True) or line for line in str(text).split("\n"))


def _legend_rows(labels: Sequence[str], width_in: float) -> int:
    """Rows a one-row-first legend of ``labels`` needs across ``width_in`` (entry width estimated as in
    :func:`wrap_title`, plus the handle)."""
    if not labels:
        return 0
    entry = max(len(s) for s in labels) * 0.6 * STYLE["legend"] / 72 + 0.6
    per_row = max(1, int(width_in // entry))
    return math.ceil(len(labels) / per_row)


def _frame(fig, title: str, *, handles: Sequence = (), labels: Sequence[str] = (), left_in: float = 0.75,
           bottom_in: float = 0.5, right_in: float = 0.2, hspace: float | None = None,
           wspace: float | None = None, panel_title_in: float = 0.2) -> None:
    """Place the wrapped ``title`` at the top, the legend (``handles``, ``labels``) in rows beneath it, and the
    axes in what is left (margins in inches; ``panel_title_in`` is the room for the titles of the top panels)."""
    w, h = fig.get_size_inches()
    text = wrap_title(title, w - 0.2)
    n_title = text.count("\n") + 1
    top_in = 0.1 + n_title * STYLE["title"] * _LINE_IN
    fig.suptitle(text, fontsize=STYLE["title"], y=1 - 0.08 / h, va="top")
    if labels:
        rows = _legend_rows(labels, w - 0.3)
        ncol = math.ceil(len(labels) / rows)
        fig.legend(handles, labels, loc="upper center", bbox_to_anchor=(0.5, 1 - (top_in + 0.02) / h), ncol=ncol,
                   frameon=False, fontsize=STYLE["legend"], handlelength=2.0, columnspacing=1.2, borderaxespad=0.0)
        top_in += 0.08 + rows * STYLE["legend"] * 1.45 / 72
    top_in += panel_title_in
    fig.subplots_adjust(left=left_in / w, bottom=bottom_in / h, right=1 - right_in / w, top=1 - top_in / h,
                        hspace=hspace, wspace=wspace)


def envelope(t: np.ndarray, y: np.ndarray, max_points: int = 4000) -> tuple[np.ndarray, np.ndarray]:
    """A long time series thinned for drawing, keeping its shape: min-max decimation (common practice).

    The ticks are cut into ``max_points // 2`` consecutive buckets of equal
    length and each keeps its smallest and its largest sample, in time order,
    so every peak and trough stays in the line while a 60 s run at 1 kHz draws
    4000 points instead of 60,000 (a figure is about 900 pixels wide).  A
    series of ``max_points`` samples or fewer is returned as it is.
    """
    t, y = np.asarray(t), np.asarray(y)
    n = len(y)
    if n <= max_points:
        return t, y
    buckets = max_points // 2
    size = -(-n // buckets)
    padded = np.concatenate([y, np.full(buckets * size - n, y[-1])]).reshape(buckets, size)
    base = np.arange(buckets) * size
    idx = np.unique(np.minimum(np.concatenate([base + padded.argmin(axis=1), base + padded.argmax(axis=1)]), n - 1))
    return t[idx], y[idx]


def _save(fig, path: Path) -> Path:
    """Write ``fig`` as a PNG (the layout is set beforehand: :func:`_frame`) and close it."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fig.savefig(path, dpi=STYLE["dpi"])
    _plt().close(fig)
    return path


def _handles(axes) -> tuple[list, list[str]]:
    """The legend entries of every axes of a figure, each label once."""
    seen: dict[str, object] = {}
    for ax in np.ravel(axes):
        for h, lab in zip(*ax.get_legend_handles_labels()):
            if not lab.startswith("_"):
                seen.setdefault(lab, h)
    return list(seen.values()), list(seen)


def _shade(ax, spans: Sequence[tuple[float, float]], label: str | None, role: str = "contact") -> None:
    for i, (a, b) in enumerate(spans):
        ax.axvspan(a, b, color=ROLE_COLOURS[role], lw=0, zorder=0, label=label if i == 0 else None)


@_styled
def force_over_time(series: Mapping[str, tuple[np.ndarray, np.ndarray]], path: Path, *,
                    title: str = "interaction force", shaded: Sequence[tuple[float, float]] = (),
                    shade_label: str = "hand past the wall", faulted: Sequence[tuple[float, float]] = ()) -> Path:
    """One line per label: (t [s], F [N]), e.g. the overall interaction force of each variant or each cuff.

    ``shaded``: time spans [s] drawn as a light band behind the lines (e.g. the periods of wall contact),
    named ``shade_label`` in the legend; ``faulted``: the spans with a fault active, in a band of their own.
    """
    plt = _plt()
    fig, ax = plt.subplots(figsize=(8, 3.8))
    _shade(ax, faulted, "a fault active", "fault")
    _shade(ax, shaded, shade_label)
    for i, (label, (t, f)) in enumerate(series.items()):
        ax.plot(*envelope(t, f), lw=1.4 if i == 0 else 1.0, label=label, color=PALETTE[i % len(PALETTE)])
    ax.set_xlabel("time [s]")
    ax.set_ylabel("force magnitude [N]")
    ax.set_ylim(bottom=0.0)
    ax.grid(True)
    _frame(fig, title, handles=_handles(ax)[0], labels=_handles(ax)[1])
    return _save(fig, path)


@_styled
def force_against_penetration(series: Mapping[str, tuple[np.ndarray, np.ndarray]], path: Path, *,
                              commanded_N_per_m: float | None = None,
                              title: str = "wall-normal force against penetration") -> Path:
    """Wall-normal force [N] against penetration [mm] per label, with the commanded spring as a dashed line."""
    plt = _plt()
    fig, ax = plt.subplots(figsize=(6, 4.4))
    pmax = 0.0
    for i, (label, (p, f)) in enumerate(series.items()):
        sel = p > -0.005
        ax.plot(1e3 * p[sel], f[sel], ".", ms=1.5, label=label, color=PALETTE[i % len(PALETTE)])
        if np.any(sel):
            pmax = max(pmax, float(p[sel].max()))
    if commanded_N_per_m:
        x = np.linspace(0.0, max(pmax, 1e-3), 2)
        ax.plot(1e3 * x, commanded_N_per_m * x, "--", color="k", lw=1, label=f"commanded {commanded_N_per_m:g} N/m")
    ax.axvline(0.0, color=ROLE_COLOURS["limit"], lw=0.8, label="wall plane")
    ax.set_xlabel("penetration of the hand [mm]")
    ax.set_ylabel("wall-normal force felt [N]")
    ax.grid(True)
    handles, labels = _handles(ax)
    _frame(fig, title, handles=handles, labels=labels, left_in=0.7)
    for h in fig.legends[0].legend_handles if fig.legends else ():
        if hasattr(h, "set_markersize"):
            h.set_markersize(6)
    return _save(fig, path)


@_styled
def bars(values: Mapping[str, float | None], path: Path, *, ylabel: str, title: str) -> Path:
    """One bar per label (a missing value is shown as 'n/a')."""
    plt = _plt()
    fig, ax = plt.subplots(figsize=(max(4.0, 1.2 * len(values) + 2), 3.8))
    labels = list(values)
    y = [np.nan if values[k] is None else float(values[k]) for k in labels]
    ax.bar(range(len(labels)), np.nan_to_num(y), color=PALETTE[0])
    for i, v in enumerate(y):
        ax.annotate("n/a" if np.isnan(v) else f"{v:.3g}", (i, 0 if np.isnan(v) else v), ha="center",
                    va="bottom", fontsize=STYLE["tick"])
    ax.set_xticks(range(len(labels)), labels, rotation=20, ha="right")
    ax.axhline(0.0, color="k", lw=0.8)
    ax.set_ylabel(ylabel)
    ax.grid(axis="y")
    longest = max((len(s) for s in labels), default=0)
    _frame(fig, title, bottom_in=0.35 + 0.34 * longest * 0.6 * STYLE["tick"] / 72 + 0.1)
    return _save(fig, path)


@_styled
def solve_time_histograms(times_s: Mapping[str, np.ndarray], path: Path, *,
                          title: str = "hierarchical QP solve time") -> Path:
    """Histogram of the per-tick QP solve time [us] per label, logarithmic bins."""
    plt = _plt()
    fig, ax = plt.subplots(figsize=(7, 3.8))
    data = {k: 1e6 * np.asarray(v)[np.isfinite(v)] for k, v in times_s.items()}
    data = {k: v[v > 0] for k, v in data.items() if np.any(v > 0)}
    if data:
        lo = min(v.min() for v in data.values())
        hi = max(v.max() for v in data.values())
        edges = np.geomspace(max(lo, 1e-3), max(hi, lo * 1.01), 60)
        for i, (label, v) in enumerate(data.items()):
            ax.hist(v, bins=edges, histtype="step", lw=1.2, color=PALETTE[i % len(PALETTE)],
                    label=f"{label} (median {np.median(v):.0f} us)")
        ax.set_xscale("log")
        from matplotlib.ticker import LogLocator, NullFormatter, StrMethodFormatter

        ax.xaxis.set_major_locator(LogLocator(subs=(1.0, 2.0, 5.0)))  # 100, 200, 500, 1000 ... in plain numbers
        ax.xaxis.set_major_formatter(StrMethodFormatter("{x:g}"))
        ax.xaxis.set_minor_formatter(NullFormatter())
    else:
        ax.text(0.5, 0.5, "no QP in these controllers", ha="center", va="center", transform=ax.transAxes)
    ax.set_xlabel("solve time per tick [us]")
    ax.set_ylabel("ticks")
    ax.grid(True)
    handles, labels = _handles(ax)
    _frame(fig, title, handles=handles, labels=labels)
    return _save(fig, path)


@_styled
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
               capsize=3, label=c, color=PALETTE[j % len(PALETTE)])
    ax.set_xticks(range(len(subjects)), subjects)
    ax.axhline(0.0, color="k", lw=0.8)
    ax.set_ylabel(ylabel)
    ax.ticklabel_format(axis="y", style="sci", scilimits=(-3, 4))  # short tick labels: they fit the fixed margin
    ax.grid(axis="y")
    handles, labels = _handles(ax)
    _frame(fig, title, handles=handles, labels=labels, left_in=0.95, bottom_in=0.4, right_in=0.15)
    return _save(fig, path)


def _panels(plt, n: int, *, ncols: int = 2, panel_in: tuple[float, float] = (3.9, 1.35), extra_h_in: float = 1.3):
    """A grid of ``n`` small panels sharing the x axis, ``ncols`` across; the unused ones hidden."""
    nrows = math.ceil(n / ncols)
    fig, axes = plt.subplots(nrows, ncols, sharex=True, squeeze=False,
                             figsize=(ncols * panel_in[0] + 0.6, nrows * panel_in[1] + extra_h_in))
    flat = list(axes.ravel())
    for ax in flat[n:]:
        ax.set_visible(False)
    for k, ax in enumerate(flat[:n]):
        below = k + ncols
        if below >= n:  # lowest panel of its column: it carries the x tick labels
            ax.xaxis.set_tick_params(labelbottom=True)
    return fig, flat[:n]


@_styled
def joint_angles(series: Mapping[str, tuple[np.ndarray, np.ndarray]], joint_names: Sequence[str], path: Path, *,
                 title: str, colours: Mapping[str, str] | None = None, dashed: Sequence[str] = (),
                 note: str | None = None, min_span_deg: float = 10.0, underlay: Sequence[str] = ()) -> Path:
    """Joint angles over time, one small panel per joint: per label ``(t [s], q [deg] of shape (ticks, joints))``.

    Each panel's y range spans at least ``min_span_deg``, so that a joint
    that hardly moves shows as the flat line it is.
    ``colours`` fixes a label's colour (default: :data:`PALETTE` in order), ``dashed`` the labels drawn dashed
    (e.g. the intent), ``underlay`` the labels drawn wide and pale beneath the others (e.g. a baseline that
    follows the intent closely, which then still shows through); ``note`` is a line of text under the panels
    (e.g. why a line is missing).
    """
    plt = _plt()
    fig, axes = _panels(plt, len(joint_names), extra_h_in=1.45 if note else 1.3)
    for ax, j, name in zip(axes, range(len(joint_names)), joint_names):
        for i, (label, (t, q)) in enumerate(series.items()):
            c = (colours or {}).get(label, PALETTE[i % len(PALETTE)])
            wide = label in underlay
            ax.plot(*envelope(t, q[:, j]), lw=1.2 if label in dashed else 3.2 if wide else 1.5,
                    ls=(0, (4, 2)) if label in dashed else "-", alpha=0.55 if wide else 1.0,
                    color=c, label=label, zorder=3 if label in dashed else 1 if wide else 2)
        lo, hi = ax.get_ylim()
        if hi - lo < min_span_deg:  # a joint that hardly moves: a few tenths of a degree must not look like a swing
            mid = 0.5 * (lo + hi)
            ax.set_ylim(mid - 0.5 * min_span_deg, mid + 0.5 * min_span_deg)
        ax.set_title(name, loc="left")
        ax.set_ylabel("angle [deg]")
        ax.grid(True)
    for ax in axes[-2:]:
        ax.set_xlabel("time [s]")
    handles, labels = _handles(axes)
    _frame(fig, title, handles=handles, labels=labels, bottom_in=0.75 if note else 0.5, hspace=0.55, wspace=0.28)
    if note:
        fig.text(0.01, 0.01, wrap_title(note, fig.get_size_inches()[0] - 0.2, STYLE["tick"]), fontsize=STYLE["tick"],
                 va="bottom", ha="left", color="0.3")
    return _save(fig, path)


@_styled
def hand_path(paths: Mapping[str, np.ndarray], views: Sequence[tuple[int, int]], path: Path, *, title: str,
              walls: Sequence[tuple[Sequence[float], Sequence[float]]] = (), colours: Mapping[str, str] | None = None,
              axis_names: Sequence[str] = ("x", "y", "z"), view_names: Sequence[str] | None = None) -> Path:
    """Hand paths [m] in orthogonal views: one panel per ``views`` entry (pair of world axes: horizontal, vertical).

    ``paths``: label -> (ticks, 3) positions; the start of each is marked
    with a circle, its end with a square.  ``walls``: planes ``(point_m,
    normal)`` drawn as a line in each view where the plane is seen edge on
    (its normal lies in the view), i.e. the points with
    :math:`n_i (x_i - p_i) + n_j (x_j - p_j) = 0`; the side past the wall
    (the side the normal points to, where the penetration
    :math:`(x - p) \\cdot n` is positive) is shaded.
    """
    from matplotlib.lines import Line2D
    from matplotlib.patches import Patch, Polygon

    plt = _plt()
    fig, axes = plt.subplots(1, len(views), figsize=(4.3 * len(views) + 0.5, 5.0), squeeze=False)
    axes = list(axes.ravel())
    walled = False
    for k, (ax, (i, j)) in enumerate(zip(axes, views)):
        for n_lab, (label, p) in enumerate(paths.items()):
            c = (colours or {}).get(label, PALETTE[n_lab % len(PALETTE)])
            ax.plot(p[:, i], p[:, j], lw=1.3, color=c, label=label)
            ax.plot(p[0, i], p[0, j], "o", ms=6, color=c, mfc="white", zorder=4)
            ax.plot(p[-1, i], p[-1, j], "s", ms=4.5, color=c, zorder=4)
        ax.set_aspect("equal", adjustable="datalim")  # metres alike on both axes: the path's true shape
        lo, hi = ax.dataLim.min, ax.dataLim.max
        for point, normal in walls:
            p0, n = np.asarray(point, float), np.asarray(normal, float)
            n2 = n[[i, j]]
            if np.linalg.norm(n2) < 0.99 * np.linalg.norm(n):  # the plane is not seen edge on in this view
                continue
            walled = True
            d = np.array([-n2[1], n2[0]]) / np.linalg.norm(n2)
            c0 = p0[[i, j]]
            mid = 0.5 * (lo + hi)
            ax.update_datalim([c0 + d * float((mid - c0) @ d)])  # the wall in view even where the hand keeps clear
            span = 4.0 * (np.linalg.norm(hi - lo) + np.linalg.norm(c0 - 0.5 * (lo + hi))) + 1.0
            a, b = c0 - span * d, c0 + span * d
            out = span * n2 / np.linalg.norm(n2)  # the normal points into the wall: penetration (p - p0).n > 0
            # added as plain artists, so that the long line and band do not widen the axes' limits
            ax.add_artist(Line2D([a[0], b[0]], [a[1], b[1]], color=ROLE_COLOURS["limit"], lw=1.6))
            ax.add_artist(Polygon(np.array([a, b, b + out, a + out]), closed=True, color=ROLE_COLOURS["limit fill"],
                                  alpha=0.6, lw=0, zorder=0))
        ax.autoscale_view()
        ax.margins(0.08)
        ax.set_xlabel(f"{axis_names[i]} [m]")
        ax.set_ylabel(f"{axis_names[j]} [m]")
        if view_names:
            ax.set_title(view_names[k], loc="left")
        ax.grid(True)
    handles, labels = _handles(axes)
    if walled:
        handles += [Line2D([], [], color=ROLE_COLOURS["limit"], lw=1.6),
                    Patch(color=ROLE_COLOURS["limit fill"], alpha=0.6, lw=0)]
        labels += ["wall plane", "past the wall"]
    handles += [Line2D([], [], ls="", marker="o", mfc="white", color="0.2", ms=6),
                Line2D([], [], ls="", marker="s", color="0.2", ms=4.5)]
    labels += ["start", "end"]
    _frame(fig, title, handles=handles, labels=labels, left_in=0.8, bottom_in=0.55, wspace=0.35)
    return _save(fig, path)


@_styled
def torque_against_limits(t: np.ndarray, torques: Mapping[str, np.ndarray], limits_Nm: np.ndarray,
                          joint_names: Sequence[str], path: Path, *, title: str,
                          saturated: np.ndarray | None = None) -> Path:
    """Torque per joint over time [N m], one small panel per joint, the limits ``±limits_Nm`` drawn as bands.

    ``torques``: label -> (ticks, joints), e.g. the commanded and the applied
    torque (the first drawn thin on top of the others, which are wide and
    pale, so that where they agree both show); ``saturated`` (ticks, joints) bool marks the ticks whose command
    the drive clipped.  Each panel's title gives the peak of the first label
    as a share of the joint's limit; the y range always holds the limit, so
    that the distance to it reads at a glance.
    """
    plt = _plt()
    fig, axes = _panels(plt, len(joint_names))
    first = next(iter(torques.values()))
    for j, (ax, name) in enumerate(zip(axes, joint_names)):
        lim = float(limits_Nm[j])
        peak = float(np.max(np.abs(first[:, j]))) if len(first) else 0.0
        top = 1.25 * max(lim, peak, 1e-9)
        ax.axhspan(lim, top, color=ROLE_COLOURS["limit fill"], lw=0, zorder=0, label="beyond the torque limit")
        ax.axhspan(-top, -lim, color=ROLE_COLOURS["limit fill"], lw=0, zorder=0)
        ax.axhline(lim, color=ROLE_COLOURS["limit"], lw=0.9, label="torque limit")
        ax.axhline(-lim, color=ROLE_COLOURS["limit"], lw=0.9)
        for i, (label, tau) in enumerate(torques.items()):  # the first thin on top, the others wide and pale beneath
            ax.plot(*envelope(t, tau[:, j]), lw=0.9 if i == 0 else 2.8, alpha=1.0 if i == 0 else 0.45,
                    zorder=3 if i == 0 else 2, color=PALETTE[i % len(PALETTE)], label=label)
        if saturated is not None and np.any(saturated[:, j]):
            k = np.flatnonzero(saturated[:, j])
            ax.plot(t[k], first[k, j], "|", ms=5, color=ROLE_COLOURS["limit"], label="clipped by the drive")
        ax.set_ylim(-top, top)
        ax.set_title(f"{name}: peak {peak:.3g} N m = {100 * peak / lim:.0f} % of {lim:g} N m" if lim > 0 else name,
                     loc="left")
        ax.set_ylabel("torque [N m]")
        ax.grid(True)
    for ax in axes[-2:]:
        ax.set_xlabel("time [s]")
    handles, labels = _handles(axes)
    _frame(fig, title, handles=handles, labels=labels, hspace=0.55, wspace=0.28)
    return _save(fig, path)


@_styled
def mass_scatter(fits: Mapping[str, object], path: Path, *, title: str, max_points: int = 4000) -> Path:
    """Force against acceleration along the movement, with the fitted line, one panel per label.

    Each fit is a :class:`sim.analysis.metrics.MassFit` (or any object with
    its fields ``acc_m_s2``, ``force_N``, ``fitted_kg``, ``intercept_N``,
    ``r2``, ``ci95_kg``, ``mass_kg``, ``reason``): the points are
    ``(acc_m_s2, force_N)``, the line ``force = fitted_kg * acc + intercept_N``,
    its slope the felt mass.  A rejected fit (``mass_kg`` None) keeps its line,
    drawn dashed, with the reason in the panel.  At most ``max_points`` points
    per panel are drawn (evenly spaced), so that the file stays small.
    """
    plt = _plt()
    n = max(1, len(fits))
    ncols = min(n, 3)
    nrows = math.ceil(n / ncols)
    width = max(6.0, 3.9 * ncols + 0.5)
    fig, axes = plt.subplots(nrows, ncols, squeeze=False, figsize=(width, 3.3 * nrows + 1.8))
    axes = list(axes.ravel())
    for ax in axes[len(fits):]:
        ax.set_visible(False)
    n_lines = 1
    for i, (ax, (label, fit)) in enumerate(zip(axes, fits.items())):
        a = np.asarray(getattr(fit, "acc_m_s2", np.zeros(0)), float)
        f = np.asarray(getattr(fit, "force_N", np.zeros(0)), float)
        step = max(1, math.ceil(len(a) / max_points))
        ax.plot(a[::step], f[::step], ".", ms=2.0, alpha=0.5, color=PALETTE[i % len(PALETTE)], label="samples")
        slope, icpt = getattr(fit, "fitted_kg", None), getattr(fit, "intercept_N", None)
        accepted = getattr(fit, "mass_kg", None) is not None
        lines = []
        if slope is not None and len(a):
            x = np.array([a.min(), a.max()])
            ax.plot(x, slope * x + (icpt or 0.0), "-" if accepted else "--", color="k", lw=1.3,
                    label="fitted line" if accepted else "fitted line (rejected)")
            ci = getattr(fit, "ci95_kg", None)
            r2 = getattr(fit, "r2", None)
            lines.append(f"slope {slope:.3g}" + (f" ± {ci:.2g}" if ci is not None else "") + " kg"
                         + (f", R² {r2:.2f}" if r2 is not None else "") + f", {len(a)} samples")
        reason = getattr(fit, "reason", None)
        if not accepted:
            lines.append("no felt mass: " + (reason or "not fitted"))
        if not len(a):
            ax.text(0.5, 0.5, "no samples", ha="center", va="center", transform=ax.transAxes, color="0.4")
        # the fit's figures go in the panel's title, above the data, never over it
        text = "\n".join([label, *(wrap_title(x, width / ncols - 0.5, STYLE["panel"]) for x in lines)])
        n_lines = max(n_lines, text.count("\n") + 1)
        ax.set_title(text, loc="left")
        ax.set_xlabel("hand acceleration along the movement [m/s²]")
        ax.set_ylabel("force against the movement [N]")
        ax.grid(True)
    handles, labels = _handles(axes)
    title_in = 0.08 + n_lines * STYLE["panel"] * _LINE_IN
    _frame(fig, title, handles=handles, labels=labels, hspace=0.35 + title_in / 3.3, wspace=0.35,
           panel_title_in=title_in)
    return _save(fig, path)


@_styled
def limit_phase(panels: Sequence[Mapping], path: Path, *, title: str, note: str | None = None) -> Path:
    """Phase plots of joints near a stop: velocity [deg/s] against angle [deg], one panel per joint.

    Each panel is a mapping with ``joint`` (its name), ``series`` (label ->
    ``(q [rad], dq [rad/s])``), ``stop_rad``, ``upper`` (True for an upper
    stop) and optionally ``margin_rad`` (the limit task's margin: a dotted
    line that far inside the stop), ``braking`` ``(q [rad], dq [rad/s])`` (the
    largest velocity from which the limit task can still stop short of the
    stop; its law is the caller's, e.g. :func:`sim.output.figures.braking_curve`),
    ``braking_label`` and ``velocity_limit_rad_s`` (dotted lines at plus and
    minus it).  The far side of the stop is shaded.  ``note``: a line of text
    under the panels (e.g. where the braking curve's parameters come from).
    """
    plt = _plt()
    n = max(1, len(panels))
    ncols = min(n, 2)
    nrows = math.ceil(n / ncols)
    fig, axes = plt.subplots(nrows, ncols, squeeze=False,
                             figsize=(6.4 if ncols == 1 else 5.0 * ncols + 0.4, 3.6 * nrows + (1.5 if note else 1.3)))
    axes = list(axes.ravel())
    for ax in axes[len(panels):]:
        ax.set_visible(False)
    for ax, panel in zip(axes, panels):
        for i, (label, (q, dq)) in enumerate(panel["series"].items()):
            ax.plot(np.degrees(q), np.degrees(dq), lw=1.2, color=PALETTE[i % len(PALETTE)], label=label)
        braking = panel.get("braking")
        if braking is not None:
            ax.plot(np.degrees(braking[0]), np.degrees(braking[1]), "--", color="k", lw=1.2,
                    label=panel.get("braking_label", "braking curve"))
        ax.autoscale_view()
        x0, x1 = ax.get_xlim()
        stop, upper = math.degrees(panel["stop_rad"]), bool(panel["upper"])
        pad = 0.06 * (max(x1, stop) - min(x0, stop))
        x0, x1 = min(x0, stop - pad), max(x1, stop + pad)
        ax.axvline(stop, color=ROLE_COLOURS["limit"], lw=1.6, label="joint stop")
        ax.axvspan(*((stop, x1) if upper else (x0, stop)), color=ROLE_COLOURS["limit fill"], lw=0, zorder=0)
        margin = panel.get("margin_rad")
        if margin:
            edge = stop - math.degrees(margin) if upper else stop + math.degrees(margin)
            ax.axvline(edge, color=ROLE_COLOURS["limit"], lw=0.9, ls=":", label="stop less the task's margin")
        ax.axhline(0.0, color="0.5", lw=0.7)
        vlim = panel.get("velocity_limit_rad_s")
        if vlim:
            v = math.degrees(vlim)
            ax.axhline(v, color="0.35", lw=0.9, ls=(0, (1, 2)), label="velocity limit of the joint")
            ax.axhline(-v, color="0.35", lw=0.9, ls=(0, (1, 2)))
        ax.set_xlim(x0, x1)
        ax.set_title(f"{panel['joint']} ({'upper' if upper else 'lower'} stop {stop:.4g} deg)", loc="left")
        ax.set_xlabel("angle [deg]")
        ax.set_ylabel("velocity [deg/s]")
        ax.grid(True)
    handles, labels = _handles(axes)
    _frame(fig, title, handles=handles, labels=labels, left_in=0.85, bottom_in=0.8 if note else 0.5, hspace=0.45,
           wspace=0.3)
    if note:
        fig.text(0.01, 0.01, wrap_title(note, fig.get_size_inches()[0] - 0.2, STYLE["tick"]), fontsize=STYLE["tick"],
                 va="bottom", ha="left", color="0.3")
    return _save(fig, path)


def _segments(mask: np.ndarray, t: np.ndarray, dt: float) -> list[tuple[float, float]]:
    """(start [s], width [s]) of each run of True in ``mask`` over the ticks at times ``t``, each tick ``dt`` long."""
    m = np.asarray(mask, dtype=bool)
    if not m.any():
        return []
    edges = np.flatnonzero(np.diff(np.concatenate([[0], m.astype(np.int8), [0]])))
    return [(float(t[a]), float((b - a) * dt)) for a, b in zip(edges[::2], edges[1::2])]


@_styled
def level_timeline(t: np.ndarray, lanes: Sequence[tuple[str, np.ndarray, np.ndarray, np.ndarray]], path: Path, *,
                   title: str = "priority levels over time") -> Path:
    """One lane per priority level (the highest on top) over time [s]: a pale band where the level had rows, a
    dark band inside it where it was binding, and a short bar above the band where the QP backend solved it.

    ``lanes``: ``(label, active, binding, qp)`` per level, the last three boolean arrays over the ticks ``t``.
    """
    from matplotlib.patches import Patch

    plt = _plt()
    t = np.asarray(t, dtype=float)
    dt = float(np.median(np.diff(t))) if t.size > 1 else 1e-3
    n = max(len(lanes), 1)
    fig, ax = plt.subplots(figsize=(8, 1.5 + 0.55 * n))
    colours = {"active": "#c9d9ec", "binding": PALETTE[0], "qp": PALETTE[1]}
    for row, (_, active, binding, qp) in enumerate(lanes):
        y = n - 1 - row
        ax.broken_barh(_segments(active, t, dt), (y - 0.35, 0.7), facecolors=colours["active"], lw=0)
        ax.broken_barh(_segments(binding, t, dt), (y - 0.2, 0.4), facecolors=colours["binding"], lw=0)
        ax.broken_barh(_segments(qp, t, dt), (y + 0.22, 0.13), facecolors=colours["qp"], lw=0)
    ax.set_yticks(range(n))
    ax.set_yticklabels([lanes[n - 1 - y][0] for y in range(n)] if lanes else [""])
    ax.set_ylim(-0.6, n - 0.4)
    if t.size:
        ax.set_xlim(float(t[0]), float(t[-1]) + dt)
    ax.set_xlabel("time [s]")
    ax.set_ylabel("level (highest priority on top)")
    ax.grid(axis="x")
    handles = [Patch(color=colours["active"]), Patch(color=colours["binding"]), Patch(color=colours["qp"])]
    labels = ["has rows (active)", "binding", "solved by the QP backend"]
    label_in = max((len(lab) for lab, *_ in lanes), default=8) * STYLE["tick"] * 0.55 / 72 + 0.55
    _frame(fig, title, handles=handles, labels=labels, left_in=label_in, bottom_in=0.5)
    return _save(fig, path)
