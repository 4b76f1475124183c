"""Drawing of a sweep's sensitivity to its varied scenario parameters (matplotlib, a PNG file, no display needed).

Only draws: the relative changes are computed by
:func:`sim.experiments.vary.sensitivity_rows`.  Style of
:mod:`sim.output.plots` (its :data:`~sim.output.plots.PALETTE` and
:data:`~sim.output.plots.STYLE`).  Our own visual language: one panel per
metric; each (parameter, controller) is a row, sorted by effect (largest on
top), drawn as a thin span from the change at the parameter's first listed
value (a hollow square) to the change at its last (a filled triangle pointing
the way of the change), in the controller's colour, over a zero line.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from pathlib import Path

from sim.output.plots import PALETTE, STYLE, wrap_title

__all__ = ["plot_sensitivity"]


def plot_sensitivity(rows: Sequence[Mapping], metrics: Sequence[str], path: str | Path, *, title: str,
                     labels: Mapping[str, str] | None = None) -> Path:
    """One panel per metric: relative change [%] at the low and high values of each parameter.

    ``rows``: :func:`sim.experiments.vary.sensitivity_rows` (keys ``parameter``, ``controller``, ``metric``,
    ``low``, ``high``, ``change_low_pct``, ``change_high_pct``, ``effect_pct``); ``labels``: a panel title per
    metric (default: the key).
    """
    import matplotlib

    matplotlib.use("Agg", force=True)
    import matplotlib.pyplot as plt
    from matplotlib.ticker import MaxNLocator

    metrics = [m for m in metrics if any(r["metric"] == m for r in rows)]
    controllers = list(dict.fromkeys(r["controller"] for r in rows))
    colour = {c: PALETTE[i % len(PALETTE)] for i, c in enumerate(controllers)}
    n_rows = max([sum(r["metric"] == m for r in rows) for m in metrics] or [1])
    ncols = 1 if len(metrics) <= 1 else 2
    nrows = max(1, math.ceil(len(metrics) / ncols))
    panel_h = 0.8 + 0.28 * n_rows
    width = 4.4 * ncols + 0.8
    height = nrows * (panel_h + 0.55) + 1.4
    fig, axes = plt.subplots(nrows, ncols, figsize=(width, height), squeeze=False)
    for ax in axes.ravel()[len(metrics):]:
        ax.set_visible(False)
    for ax, m in zip(axes.ravel(), metrics):
        mine = sorted((r for r in rows if r["metric"] == m), key=lambda r: -(r["effect_pct"] or 0.0))[::-1]
        for y, r in enumerate(mine):
            lo, hi = r["change_low_pct"], r["change_high_pct"]
            c = colour[r["controller"]]
            if lo is not None and hi is not None:
                ax.plot([lo, hi], [y, y], color=c, lw=2.2, alpha=0.55, solid_capstyle="butt")
            if lo is not None:
                ax.plot(lo, y, "s", ms=6, mfc="white", mec=c, mew=1.4)
            if hi is not None:
                ax.plot(hi, y, ">" if (lo is None or hi >= lo) else "<", ms=7, color=c)
        ax.axvline(0.0, color="#333333", lw=0.8)
        ax.set_yticks(range(len(mine)), [f"{r['parameter']} {r['low']}→{r['high']}\n{r['controller']}"
                                         for r in mine], fontsize=STYLE["tick"] - 1)
        ax.set_ylim(-0.7, len(mine) - 0.3)
        ax.set_xlabel("relative change [%]")
        ax.set_title(wrap_title((labels or {}).get(m, m), 3.6, STYLE["panel"]), fontsize=STYLE["panel"], loc="left")
        ax.grid(axis="x", alpha=0.3)
        for side in ("top", "right"):
            ax.spines[side].set_visible(False)
        ax.tick_params(axis="x", labelsize=STYLE["tick"])
        ax.xaxis.set_major_locator(MaxNLocator(5))
    handles = [plt.Line2D([], [], color=colour[c], lw=2.2, alpha=0.55) for c in controllers]
    handles += [plt.Line2D([], [], ls="", marker="s", mfc="white", mec="#333333"),
                plt.Line2D([], [], ls="", marker=">", color="#333333")]
    names = [*controllers, "first listed value", "last listed value"]
    fig.suptitle(wrap_title(title, width - 0.2), fontsize=STYLE["title"], y=1 - 0.08 / height, va="top")
    fig.legend(handles, names, loc="upper center", bbox_to_anchor=(0.5, 1 - 0.45 / height), ncol=len(names),
               frameon=False, fontsize=STYLE["legend"])
    fig.subplots_adjust(left=2.3 / width, right=1 - 0.2 / width, bottom=0.55 / height, top=1 - 1.25 / height,
                        hspace=0.9, wspace=0.75 if ncols > 1 else None)
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fig.savefig(path, dpi=STYLE["dpi"])
    plt.close(fig)
    return path
