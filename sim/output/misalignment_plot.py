"""The misalignment map's figure: one panel per cuff, the parasitic force over the wearer's shoulder postures.

Each panel shades the grid of gh flexion [deg] x gh abduction [deg] by the
parasitic force [N] (one colour scale shared by the panels, so the cuffs
compare at a glance), writes the value in each cell, and frames the worst
cell of the panel.  Colours and sizes come from
:data:`~sim.output.plots.PALETTE` and :data:`~sim.output.plots.STYLE`.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from pathlib import Path

import numpy as np

from sim.output.plots import PALETTE, STYLE, wrap_title

__all__ = ["plot_misalignment"]


def plot_misalignment(cells: Sequence, path: str | Path, *, title: str = "") -> Path:
    """Draw the parasitic force per cuff over flexion x abduction; return ``path``.

    ``cells``: objects with ``flexion_rad``, ``abduction_rad``, ``cuff``, ``parasitic_force_N`` and ``steady``;
    the cells that did not settle are hatched and left out of the worst cell.
    """
    import matplotlib

    matplotlib.use("Agg", force=True)
    import matplotlib.pyplot as plt
    from matplotlib.colors import LinearSegmentedColormap

    cuffs = list(dict.fromkeys(c.cuff for c in cells))
    fl = sorted({c.flexion_rad for c in cells})
    ab = sorted({c.abduction_rad for c in cells})
    grids, unsteady = {}, {}
    for name in cuffs:
        g = np.full((len(ab), len(fl)), np.nan)
        u = np.zeros(g.shape, dtype=bool)
        for c in cells:
            if c.cuff == name:
                g[ab.index(c.abduction_rad), fl.index(c.flexion_rad)] = c.parasitic_force_N
                u[ab.index(c.abduction_rad), fl.index(c.flexion_rad)] = not getattr(c, "steady", True)
        grids[name], unsteady[name] = g, u
    # the colour scale spans the steady cells (all cells when none is steady): a wandering cell does not wash it out
    scale = [np.where(unsteady[k], np.nan, g) if not unsteady[k].all() else g for k, g in grids.items()]
    top = max([float(np.nanmax(g)) for g in scale if np.isfinite(g).any()] + [1e-9])
    label_cells = len(fl) <= 6 and len(ab) <= 8  # the values written in the cells only when they fit
    cmap = LinearSegmentedColormap.from_list("parasitic", ["#f4f1ea", PALETTE[1], PALETTE[3]])
    fx, fy = np.degrees(fl), np.degrees(ab)

    def edges(v: np.ndarray) -> np.ndarray:
        if len(v) == 1:
            return np.array([v[0] - 5.0, v[0] + 5.0])
        mid = (v[1:] + v[:-1]) / 2
        return np.concatenate(([2 * v[0] - mid[0]], mid, [2 * v[-1] - mid[-1]]))

    n = max(1, len(cuffs))
    with plt.rc_context({"axes.titlesize": STYLE["panel"], "axes.labelsize": STYLE["label"],
                         "xtick.labelsize": STYLE["tick"], "ytick.labelsize": STYLE["tick"],
                         "legend.fontsize": STYLE["legend"], "axes.spines.top": False,
                         "axes.spines.right": False}):
        fig, axes = plt.subplots(1, n, figsize=(max(6.4, 4.6 * n), 4.4), squeeze=False)
        mesh = None
        for ax, name in zip(axes.flat, cuffs):
            g = grids[name]
            mesh = ax.pcolormesh(edges(fx), edges(fy), g, cmap=cmap, vmin=0.0, vmax=top, shading="flat")
            for i in range(len(ab)):
                for j in range(len(fl)):
                    if label_cells and math.isfinite(g[i, j]):
                        ax.text(fx[j], fy[i], f"{g[i, j]:.1f}", ha="center", va="center", fontsize=STYLE["tick"],
                                color="#222222" if g[i, j] < 0.6 * top else "white")
            ex, ey = edges(fx), edges(fy)
            for i, j in zip(*np.nonzero(unsteady[name])):
                ax.add_patch(plt.Rectangle((ex[j], ey[i]), ex[j + 1] - ex[j], ey[i + 1] - ey[i], fill=False,
                                           hatch="////", edgecolor=PALETTE[4], linewidth=0.0, zorder=2))
            steady = np.where(unsteady[name], np.nan, g)
            if np.isfinite(steady).any():
                i, j = np.unravel_index(int(np.nanargmax(steady)), g.shape)
                ax.add_patch(plt.Rectangle((ex[j], ey[i]), ex[j + 1] - ex[j], ey[i + 1] - ey[i], fill=False,
                                           edgecolor=PALETTE[0], linewidth=2.2, zorder=3))
                ax.set_title(f"{name}: worst {g[i, j]:.1f} N at ({fx[j]:g}, {fy[i]:g}) deg")
            else:
                ax.set_title(f"{name} cuff: no steady cell")
            ax.set_xlabel("gh flexion [deg]")
            if ax is axes.flat[0]:
                ax.set_ylabel("gh abduction [deg]")
        fig.subplots_adjust(top=0.8, right=0.88, wspace=0.22)
        if mesh is not None:
            bar = fig.colorbar(mesh, cax=fig.add_axes((0.9, 0.11, 0.012, 0.69)))
            bar.set_label("parasitic force [N]", fontsize=STYLE["label"])
        if any(u.any() for u in unsteady.values()):
            title = (title + "; " if title else "") + "hatched: did not settle, framed: worst steady cell"
        if title:
            fig.suptitle(wrap_title(title, 0.8 * fig.get_figwidth()), fontsize=STYLE["title"], y=0.99)
        out = Path(path)
        fig.savefig(out, dpi=STYLE["dpi"], bbox_inches="tight")
        plt.close(fig)
    return out
