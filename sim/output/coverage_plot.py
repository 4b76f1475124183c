"""Drawing of a range-of-motion coverage map (matplotlib, PNG files, no display needed).

Only draws what :mod:`sim.analysis.coverage` computed.  Style of
:mod:`sim.output.plots` (its :data:`~sim.output.plots.PALETTE` and
:data:`~sim.output.plots.STYLE`).  Our own visual language: the available
axial-rotation span of each cell as a tile shaded from pale (none) to deep
blue (the whole sampled span), the daily-living region as a dashed ochre
frame, singular cells crossed in red, cells the robot cannot follow at all
left hatched grey; the distal joints as horizontal bars, the robot's range
as a thick slate bar and the daily-living need as a thin ochre bar over it.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from pathlib import Path

import numpy as np

from sim.output.plots import PALETTE, ROLE_COLOURS, STYLE, wrap_title

__all__ = ["plot_axial_coverage", "plot_joint_ranges"]


def _shoulder_panel(fig, ax, im, extent, need_box_deg, box_colour, colour_label: str, title: str) -> None:
    """What both shoulder panels share: the daily-living region outlined, the axes [deg], the colour bar, the
    legend and the panel title."""
    from matplotlib.patches import Rectangle

    p0, p1, e0, e1 = need_box_deg
    ax.add_patch(Rectangle((p0, e0), p1 - p0, e1 - e0, fill=False, edgecolor=box_colour, lw=2.0, ls="--",
                           label="daily-living region"))
    ax.set_xlim(extent[0], extent[1])
    ax.set_ylim(extent[2], extent[3])
    ax.set_xlabel("plane of elevation [deg] (0 abduction, 90 flexion)")
    ax.set_ylabel("elevation [deg]")
    fig.colorbar(im, ax=ax, pad=0.02).set_label(colour_label, fontsize=STYLE["label"])
    ax.legend(loc="upper right", fontsize=STYLE["legend"], frameon=True, framealpha=0.85)
    ax.set_title(title, fontsize=STYLE["panel"])


def _plt():
    import matplotlib

    matplotlib.use("Agg", force=True)
    import matplotlib.pyplot as plt

    return plt


def plot_axial_coverage(plane_deg: Sequence[float], elevation_deg: Sequence[float], span_deg: np.ndarray,
                        singular: np.ndarray, path: str | Path, *, need_box_deg: tuple[float, float, float, float],
                        span_max_deg: float, cuff_offset_mm: np.ndarray | None = None,
                        cuff_limit_mm: float | None = None, title: str = "") -> Path:
    """Heat map of the followed axial-rotation span [deg] over plane of elevation [deg] x elevation [deg].

    ``span_deg`` (n_elevation, n_plane): reachable axial span per cell (0: none); ``singular`` same shape,
    bool; ``need_box_deg`` (plane lo, plane hi, elevation lo, elevation hi) outlined.  With
    ``cuff_offset_mm`` (same shape, NaN where nothing is followed) a second panel shows the largest cuff
    offset [mm] over each cell's followed range, cells above ``cuff_limit_mm`` ringed.
    """
    plt = _plt()
    from matplotlib.colors import LinearSegmentedColormap
    from matplotlib.patches import Rectangle

    plane = np.asarray(plane_deg, float)
    elev = np.asarray(elevation_deg, float)
    dp = float(plane[1] - plane[0]) if plane.size > 1 else 15.0
    de = float(elev[1] - elev[0]) if elev.size > 1 else 15.0
    cmap = LinearSegmentedColormap.from_list("span", ["#f3f1ea", PALETTE[6], PALETTE[0]])
    two = cuff_offset_mm is not None
    fig, axes = plt.subplots(1, 2 if two else 1, figsize=(13.0 if two else 7.2, 4.8), dpi=STYLE["dpi"],
                             squeeze=False)
    ax = axes[0, 0]
    extent = (plane[0] - dp / 2, plane[-1] + dp / 2, elev[0] - de / 2, elev[-1] + de / 2)
    data = np.ma.masked_where(np.asarray(span_deg) <= 0.0, span_deg)
    im = ax.imshow(data, origin="lower", extent=extent, aspect="auto", cmap=cmap, vmin=0.0, vmax=span_max_deg,
                   interpolation="nearest")
    for i, e in enumerate(elev):
        for j, p in enumerate(plane):
            if span_deg[i, j] <= 0.0:
                ax.add_patch(Rectangle((p - dp / 2, e - de / 2), dp, de, facecolor="none", edgecolor="#b9bcc0",
                                       hatch="///", lw=0.0))
            if singular[i, j]:
                ax.plot(p, e, marker="x", color=ROLE_COLOURS["limit"], ms=6, mew=1.6, ls="none",
                        label="near-singular shoulder" if (i, j) == tuple(np.argwhere(singular)[0]) else None)
    _shoulder_panel(fig, ax, im, extent, need_box_deg, PALETTE[1], "axial rotation the robot follows [deg]",
                    "axial-rotation span followed within the joint limits")
    if two:
        bx = axes[0, 1]
        off = np.ma.masked_invalid(np.asarray(cuff_offset_mm, float))
        warm = LinearSegmentedColormap.from_list("offset", ["#f3f1ea", PALETTE[1], PALETTE[3]])
        top = max(float(np.nanmax(cuff_offset_mm)) if np.isfinite(cuff_offset_mm).any() else 1.0, 1.0)
        im2 = bx.imshow(off, origin="lower", extent=extent, aspect="auto", cmap=warm, vmin=0.0, vmax=top,
                        interpolation="nearest")
        if cuff_limit_mm is not None:
            ii, jj = np.nonzero(np.nan_to_num(np.asarray(cuff_offset_mm, float), nan=0.0) > cuff_limit_mm)
            bx.plot(plane[jj], elev[ii], ls="none", marker="o", mfc="none", mec="#333333", ms=5, mew=0.9,
                    label=f"cuff pulled more than {cuff_limit_mm:g} mm")
        _shoulder_panel(fig, bx, im2, extent, need_box_deg, PALETTE[0], "largest cuff offset from its strapping [mm]",
                        "cuff offset over the followed range (joint-centre offsets)")
    fig.suptitle(wrap_title(title, 12.0 if two else 6.5), fontsize=STYLE["title"])
    fig.tight_layout()
    path = Path(path)
    fig.savefig(path)
    plt.close(fig)
    return path


def plot_joint_ranges(robot_deg: Mapping[str, tuple[float, float]], need_deg: Mapping[str, tuple[float, float]],
                      path: str | Path, *, title: str = "") -> Path:
    """Range bars [deg]: per joint, the robot's limits (thick) and the daily-living need (thin, on top);
    a need that sticks out of the robot's range is drawn in red."""
    plt = _plt()
    names = list(robot_deg)
    fig, ax = plt.subplots(figsize=(7.2, 0.7 * len(names) + 1.3), dpi=STYLE["dpi"])
    for i, name in enumerate(names):
        lo, hi = robot_deg[name]
        ax.barh(i, hi - lo, left=lo, height=0.55, color=PALETTE[4], alpha=0.55,
                label="robot joint range" if i == 0 else None)
        if name in need_deg:
            nlo, nhi = need_deg[name]
            short = nlo < lo - 1e-9 or nhi > hi + 1e-9
            ax.barh(i, nhi - nlo, left=nlo, height=0.18, color=ROLE_COLOURS["limit"] if short else PALETTE[1],
                    label=("daily-living need (not covered)" if short else "daily-living need"))
    ax.axvline(0.0, color="k", lw=0.6)
    ax.set_yticks(range(len(names)), [n.replace("_", " ") for n in names])
    ax.set_xlabel("joint angle [deg] (+: flexion, pronation, wrist flexion, radial deviation)")
    ax.grid(axis="x")
    handles, labels = ax.get_legend_handles_labels()
    seen = dict(zip(labels, handles))
    ax.legend(seen.values(), seen.keys(), loc="upper left", fontsize=STYLE["legend"], framealpha=0.9)
    ax.set_title(wrap_title(title, 6.5), fontsize=STYLE["title"])
    lim = max(math.fabs(v) for r in (*robot_deg.values(), *need_deg.values()) for v in r)
    ax.set_xlim(-lim - 10.0, lim + 10.0)
    fig.tight_layout()
    path = Path(path)
    fig.savefig(path)
    plt.close(fig)
    return path
