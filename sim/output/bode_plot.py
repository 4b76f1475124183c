"""The Bode plot of felt impedances: magnitude [N s/m] and phase [deg] over frequency, one colour per variant.

Drawing only: the estimates and fits come computed (:mod:`sim.analysis.impedance`,
:mod:`sim.experiments.impedance`).  The look is the project's (:data:`sim.output.plots.PALETTE`,
:data:`~sim.output.plots.STYLE`): each variant's estimate is a solid line with small round markers where the
coherence reaches the threshold (hollow markers where it does not), its fitted :math:`m s + b + k / s` model
the same colour dashed, the transparency threshold a thin grey dotted line.
"""

from __future__ import annotations

from collections.abc import Mapping
from pathlib import Path
from types import MappingProxyType

import numpy as np

from sim.output.plots import PALETTE, STYLE, wrap_title

__all__ = ["bode"]

_RC = MappingProxyType({
    "axes.titlesize": STYLE["panel"], "axes.labelsize": STYLE["label"], "xtick.labelsize": STYLE["tick"],
    "ytick.labelsize": STYLE["tick"], "legend.fontsize": STYLE["legend"], "axes.spines.top": False,
    "axes.spines.right": False, "grid.alpha": 0.3})


def bode(curves: Mapping[str, tuple], path: str | Path, *, title: str, min_coherence: float = 0.9,
         threshold_N_s_per_m: float | None = None) -> Path:
    """Draw the magnitude and phase of each variant's impedance on one figure; return ``path``.

    Parameters
    ----------
    curves : mapping variant -> (freq_Hz, Z, coherence, Z_fit or None)
        ``freq_Hz`` (n,) [Hz], ``Z`` and ``Z_fit`` (n,) complex [N s/m], ``coherence`` (n,).
    path : path of the PNG
    title : str
    min_coherence : float
        Points below it are drawn hollow (not used by the fit).
    threshold_N_s_per_m : float, optional
        The transparency threshold, drawn on the magnitude axes.
    """
    import matplotlib

    matplotlib.use("Agg", force=True)
    import matplotlib.pyplot as plt

    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    with plt.rc_context(dict(_RC)):
        fig, (ax_m, ax_p) = plt.subplots(2, 1, figsize=(7.2, 5.6), sharex=True,
                                         gridspec_kw={"height_ratios": (3, 2)})
        for i, (name, (f, Z, coh, Zfit)) in enumerate(curves.items()):
            colour = PALETTE[i % len(PALETTE)]
            f, Z, coh = np.asarray(f), np.asarray(Z), np.asarray(coh)
            good = coh >= min_coherence
            mag, ph = np.abs(Z), np.degrees(np.angle(Z))
            ax_m.plot(f, mag, color=colour, lw=1.3, label=f"{name} (estimate)")
            ax_p.plot(f, ph, color=colour, lw=1.3)
            ax_m.plot(f[good], mag[good], "o", color=colour, ms=2.8)
            ax_m.plot(f[~good], mag[~good], "o", mfc="none", color=colour, ms=3.2)
            ax_p.plot(f[good], ph[good], "o", color=colour, ms=2.8)
            if Zfit is not None:
                Zfit = np.asarray(Zfit)
                ax_m.plot(f, np.abs(Zfit), "--", color=colour, lw=1.0, label=f"{name} (m s + b + k/s fit)")
                ax_p.plot(f, np.degrees(np.angle(Zfit)), "--", color=colour, lw=1.0)
        if threshold_N_s_per_m is not None:
            ax_m.axhline(threshold_N_s_per_m, color="#777777", lw=0.9, ls=":",
                         label=f"transparency threshold {threshold_N_s_per_m:g} N s/m")
        ax_m.set_xscale("log")
        ax_m.set_yscale("log")
        ax_m.set_ylabel("|Z| [N s/m]")
        ax_p.set_ylabel("phase of Z [deg]")
        ax_p.set_xlabel("frequency [Hz]")
        ax_p.set_ylim(-100, 100)
        ax_p.set_yticks((-90, -45, 0, 45, 90))
        for ax in (ax_m, ax_p):
            ax.grid(True, which="both")
        handles, labels = ax_m.get_legend_handles_labels()
        w, h = fig.get_size_inches()
        fig.suptitle(wrap_title(title, w - 0.2), fontsize=STYLE["title"], y=1 - 0.08 / h, va="top")
        ncol = 2
        rows = -(-len(labels) // ncol)
        fig.legend(handles, labels, loc="upper center", bbox_to_anchor=(0.5, 1 - 0.42 / h), ncol=ncol,
                   frameon=False, fontsize=STYLE["legend"])
        top_in = 0.5 + rows * STYLE["legend"] * 1.45 / 72 + 0.1
        fig.subplots_adjust(left=0.85 / w, right=1 - 0.2 / w, bottom=0.55 / h, top=1 - top_in / h, hspace=0.12)
        fig.savefig(path, dpi=STYLE["dpi"])
        plt.close(fig)
    return path
