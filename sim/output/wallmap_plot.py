"""Drawing of a wall stability map (matplotlib, a PNG file, no display needed).

Only draws: the cells (their class, computed by :mod:`sim.experiments.wallmap`)
and the analytic boundaries (computed by the caller with
:mod:`sim.analysis.passivity`).  Style of :mod:`sim.output.plots`: its
:data:`~sim.output.plots.PALETTE` and :data:`~sim.output.plots.STYLE`; each
class has a colour and a marker of its own, so the map also reads in grey print.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from pathlib import Path
from types import MappingProxyType

import numpy as np

from sim.output.plots import PALETTE, ROLE_COLOURS, STYLE, wrap_title

__all__ = ["CLASS_LOOK", "plot_wall_map"]

#: Colour and marker of each cell class (ours: moss green circle, ochre triangle, red cross).
CLASS_LOOK = MappingProxyType({
    "passive": (PALETTE[2], "o"),
    "active": (PALETTE[1], "^"),
    "unstable": (ROLE_COLOURS["limit"], "X"),
})


def plot_wall_map(cells: Sequence, path: str | Path, *, boundaries: Mapping[tuple[float, int], Mapping[str, tuple]],
                  default_law: tuple[float, float] | None = None, title: str = "") -> Path:
    """One panel per (period [s], total delay [ticks]): stiffness [N/m] over damping [N s/m], a marker per cell.

    ``cells``: objects with ``stiffness_N_per_m``, ``damping_N_s_per_m``, ``period_s``, ``delay_ticks``
    and ``cls``.  ``boundaries[(T, d)]``: label -> ``(damping (n,), stiffness (n,), style)`` curves to draw
    over the cells (style ``"exact"``, ``"no delay"`` or ``"no damping"``).  ``default_law`` (K, B): ringed.
    """
    import matplotlib

    matplotlib.use("Agg", force=True)
    import matplotlib.pyplot as plt

    keys = list(dict.fromkeys((c.period_s, c.delay_ticks) for c in cells))
    n = max(1, len(keys))
    cols = min(n, 3)
    rows = (n + cols - 1) // cols
    line = {"exact": ("-", PALETTE[0], 1.8), "no delay": (":", PALETTE[4], 1.3), "no damping": ("-.", PALETTE[7], 1.3)}
    with plt.rc_context({"axes.titlesize": STYLE["panel"], "axes.labelsize": STYLE["label"],
                         "xtick.labelsize": STYLE["tick"], "ytick.labelsize": STYLE["tick"],
                         "legend.fontsize": STYLE["legend"], "axes.spines.top": False,
                         "axes.spines.right": False, "grid.alpha": 0.3}):
        fig, axes = plt.subplots(rows, cols, figsize=(max(6.4, 4.6 * cols), 3.9 * rows + 1.2), squeeze=False)
        handles = {}
        for ax, key in zip(axes.flat, keys):
            mine = [c for c in cells if (c.period_s, c.delay_ticks) == key]
            K = np.array([c.stiffness_N_per_m for c in mine])
            for cls, (colour, marker) in CLASS_LOOK.items():
                sel = [i for i, c in enumerate(mine) if c.cls == cls]
                if sel:
                    h = ax.scatter([mine[i].damping_N_s_per_m for i in sel], K[sel], s=70, c=colour,
                                   marker=marker, edgecolors="white", linewidths=0.6, zorder=3, label=cls)
                    handles[cls] = h
            for label, (bx, ky, style) in boundaries.get(key, {}).items():
                ls, colour, lw = line[style]
                ky = np.asarray(ky, dtype=float)
                (h,) = ax.plot(bx, np.where(ky > 0, ky, np.nan), ls=ls, color=colour, lw=lw, zorder=2, label=label)
                handles[label] = h
            if default_law is not None:
                h = ax.scatter([default_law[1]], [default_law[0]], s=230, facecolors="none",
                               edgecolors="#222222", linewidths=1.2, zorder=4, label="scenario's wall")
                handles["scenario's wall"] = h
            if K.size and K.max() / max(K.min(), 1e-12) > 20:
                ax.set_yscale("log")
                ax.set_ylim(0.7 * K.min(), 1.4 * K.max())
            elif K.size:
                ax.set_ylim(0.0, 1.1 * K.max())
            ax.set_xlabel("virtual damping B [N s/m]")
            ax.set_ylabel("virtual stiffness K [N/m]")
            ax.set_title(f"T = {1e3 * key[0]:g} ms, delay d = {key[1]} tick(s)")
            ax.grid(True)
        for ax in list(axes.flat)[len(keys):]:
            ax.set_visible(False)
        ncol = min(3, len(handles))
        legend_rows = -(-len(handles) // max(ncol, 1))
        title_text = wrap_title(title, fig.get_figwidth()) if title else ""
        top_in = 0.15 + 0.2 * (title_text.count("\n") + 1 if title_text else 0) + 0.22 * legend_rows
        height = fig.get_figheight()
        fig.legend(list(handles.values()), list(handles), loc="upper center", ncol=ncol, frameon=False,
                   bbox_to_anchor=(0.5, 1.0 - (0.1 + 0.2 * (title_text.count("\n") + 1 if title_text else 0))
                                   / height))
        if title_text:
            fig.suptitle(title_text, fontsize=STYLE["title"], y=1.0 - 0.05 / height)
        fig.tight_layout(rect=(0, 0, 1, 1.0 - top_in / height))
        out = Path(path)
        fig.savefig(out, dpi=STYLE["dpi"])
        plt.close(fig)
    return out

