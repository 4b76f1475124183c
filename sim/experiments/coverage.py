"""Range-of-motion coverage of an exoskeleton for one wearer: build the pair, map, write the results.

:func:`run_coverage` builds the wearer's arm (with or without the shoulder
girdle, placed with a joint-centre misalignment) and the exoskeleton (the
default one fitted to the wearer, or a user's URDF with its site mapping),
then computes :func:`sim.analysis.coverage.coverage_map`.
:func:`write_coverage` writes ``coverage.csv`` (one row per grid sample),
``coverage.png`` (axial-rotation span per cell), ``ranges.png`` (distal joints
against daily-living needs) and ``report.md``.

References
----------
.. [Wu2005] Wu G. et al. (2005), "ISB recommendation on definitions of joint coordinate systems of various
   joints for the reporting of human joint motion - Part II: shoulder, elbow, wrist and hand", Journal of
   Biomechanics 38(5):981-992.
.. [Yoshikawa1985] Yoshikawa T. (1985), "Manipulability of robotic mechanisms", International Journal of
   Robotics Research 4(2):3-9 (pages from memory).
.. [Gates2016] Gates D.H., Walters L.S., Cowley J., Wilken J.M., Resnik L. (2016), "Range of motion
   requirements for upper-limb activities of daily living", American Journal of Occupational Therapy
   70(1):7001350010.
"""

from __future__ import annotations

import csv
import math
from collections.abc import Mapping, Sequence
from dataclasses import replace
from pathlib import Path

import numpy as np

from models.arm import ArmModel
from models.coupling import Registration, fit_exo
from models.errors import ParameterError
from models.exo import build_exo, load_exo
from models.human import HumanParams, build_human
from sim.analysis.coverage import ADL_NEEDS_DEG, CoverageMap, CoverageParams, coverage_map, required_share
from sim.output.coverage_plot import plot_axial_coverage, plot_joint_ranges
from sim.output.report import CAUTION, markdown_table

__all__ = ["run_coverage", "write_coverage", "DISTAL_NEEDS"]

#: Distal robot joints (joints 4 to 7, same axes and signs as the human's) and their daily-living need.
DISTAL_NEEDS = (("elbow_flexion", 3), ("forearm_rotation", 4), ("wrist_flexion", 5), ("wrist_deviation", 6))


def run_coverage(subject: str | HumanParams = "m50", *, girdle: bool = False,
                 misalignment_m: Sequence[float] = (0.0, 0.0, 0.0), exo_urdf: str | Path | None = None,
                 sites: Mapping[str, str] | None = None, hand_frame: str | None = None,
                 params: CoverageParams | None = None, progress=None) -> tuple[CoverageMap, ArmModel]:
    """Coverage map of an exoskeleton for a wearer; returns the map and the robot model.

    ``exo_urdf=None``: the default exoskeleton fitted to the wearer (:func:`models.coupling.fit_exo`);
    else a user's URDF loaded with ``sites`` and ``hand_frame`` (:func:`models.exo.load_exo`).
    ``misalignment_m`` (3,) [m]: the wearer's joint centres shifted from the robot's
    (:class:`models.coupling.Registration`).
    """
    hp = HumanParams(subject) if isinstance(subject, str) else subject
    if hp.girdle != girdle:
        hp = replace(hp, girdle=bool(girdle))
    reg = Registration(misalignment_m=tuple(misalignment_m))
    if exo_urdf is None:
        if sites or hand_frame:
            raise ParameterError("run_coverage: sites and hand_frame go with exo_urdf, not with the default robot")
        exo = build_exo(fit_exo(hp))
    else:
        if not hand_frame:
            raise ParameterError("run_coverage: a user's exo_urdf needs hand_frame (the frame of the hand point)")
        exo = load_exo(exo_urdf, sites=dict(sites or {}), hand_frame=hand_frame)
    if exo.nq != 7:
        raise ParameterError(f"run_coverage: the exoskeleton must have 7 joints (3 shoulder, elbow, forearm, "
                             f"2 wrist), {exo.name!r} has {exo.nq}")
    human = build_human(hp, base_xyz_m=reg.human_base_xyz_m())
    p = CoverageParams.grid_deg() if params is None else params
    return coverage_map(exo, human, hp, p, misalignment_m=reg.misalignment_m, progress=progress), exo


def _grid(cmap: CoverageMap):
    p = cmap.params
    ne, npl = len(p.elevation_rad), len(p.plane_rad)
    axial_deg = np.degrees(p.axial_rad)
    span = np.zeros((ne, npl))
    offset = np.full((ne, npl), np.nan)
    singular = np.zeros((ne, npl), dtype=bool)
    for k, c in enumerate(cmap.cells):
        i, j = divmod(k, npl)
        r = c.axial_range_rad(p.axial_rad)
        span[i, j] = 0.0 if r is None else math.degrees(r[1] - r[0]) + (axial_deg[1] - axial_deg[0]
                                                                         if len(axial_deg) > 1 else 0.0)
        singular[i, j] = bool(np.any(c.sigma_min[c.reachable] < p.singular_sigma))
        if c.reachable.any() and np.isfinite(c.cuff_offset_m[c.reachable]).any():
            offset[i, j] = float(np.nanmax(c.cuff_offset_m[c.reachable]))
    return span, singular, offset


def write_coverage(cmap: CoverageMap, exo: ArmModel, folder: str | Path, *, label: str = "",
                   run_time_s: float | None = None) -> dict[str, Path]:
    """Write ``coverage.csv``, ``coverage.png``, ``ranges.png`` and ``report.md`` into ``folder``."""
    out = Path(folder)
    out.mkdir(parents=True, exist_ok=True)
    p = cmap.params
    paths = {"csv": out / "coverage.csv", "png": out / "coverage.png", "ranges": out / "ranges.png",
             "report": out / "report.md"}
    with paths["csv"].open("w", newline="") as f:
        wr = csv.writer(f)
        wr.writerow(["plane_of_elevation_deg", "elevation_deg", "axial_rotation_deg", "followed",
                     "manipulability_hand", "shoulder_sigma_min", "cuff_offset_m"])
        for c in cmap.cells:
            for k, a in enumerate(p.axial_rad):
                wr.writerow([f"{math.degrees(c.plane_rad):.6g}", f"{math.degrees(c.elevation_rad):.6g}",
                             f"{math.degrees(a):.6g}", int(c.reachable[k]), f"{c.w[k]:.6g}",
                             f"{c.sigma_min[k]:.6g}", f"{c.cuff_offset_m[k]:.6g}"])
    span, singular, offset = _grid(cmap)
    need = ADL_NEEDS_DEG
    setting = (f"{label or cmap.exo_name}, girdle {'on' if cmap.girdle else 'off'}, misalignment "
               f"{tuple(round(x * 1000, 1) for x in cmap.misalignment_m)} mm")
    axial_deg = np.degrees(p.axial_rad)
    plot_axial_coverage(np.degrees(p.plane_rad), np.degrees(p.elevation_rad), span, singular, paths["png"],
                        cuff_offset_mm=offset * 1000.0, cuff_limit_mm=p.max_cuff_offset_m * 1000.0,
                        need_box_deg=(*need["plane_of_elevation"], *need["elevation"]),
                        span_max_deg=float(axial_deg[-1] - axial_deg[0] + (axial_deg[1] - axial_deg[0]
                                                                           if len(axial_deg) > 1 else 0.0)),
                        title=f"Axial rotation the robot follows per shoulder posture ({setting})")
    lo, hi = exo.position_limits()
    robot = {name: (math.degrees(lo[i]), math.degrees(hi[i])) for name, i in DISTAL_NEEDS}
    plot_joint_ranges(robot, {name: need[name] for name, _ in DISTAL_NEEDS}, paths["ranges"],
                      title=f"Distal joint ranges against daily-living needs ({setting})")
    share, n = required_share(cmap)
    share_cuff, _ = required_share(cmap, max_cuff_offset_m=p.max_cuff_offset_m)
    reach = [c for c in cmap.cells if c.reachable.any()]
    worst = sorted(reach, key=lambda c: float(np.nanmin(c.sigma_min)))[:5]
    worst_rows = [[f"{math.degrees(c.plane_rad):.1f}", f"{math.degrees(c.elevation_rad):.1f}",
                   f"{np.nanmin(c.sigma_min):.3g}", f"{np.nanmin(c.w):.3g}",
                   f"{axial_deg[np.nanargmin(c.w)]:.0f}"] for c in worst]
    table_rows = []
    for c in cmap.cells:
        r = c.axial_range_rad(p.axial_rad)
        table_rows.append([f"{math.degrees(c.plane_rad):.1f}", f"{math.degrees(c.elevation_rad):.1f}",
                           "none" if r is None else f"{math.degrees(r[0]):.0f} .. {math.degrees(r[1]):.0f}",
                           f"{int(c.reachable.sum())}/{len(p.axial_rad)}",
                           "n/a" if not c.reachable.any() else f"{np.nanmin(c.sigma_min):.3g}",
                           "n/a" if not c.reachable.any() else f"{np.nanmin(c.w):.3g}",
                           "n/a" if not c.reachable.any() else f"{np.nanmax(c.cuff_offset_m) * 1000:.1f}"])
    distal_rows = [[name.replace("_", " "), f"{robot[name][0]:.0f} .. {robot[name][1]:.0f}",
                    f"{need[name][0]:.0f} .. {need[name][1]:.0f}",
                    "yes" if robot[name][0] <= need[name][0] + 1e-9 and robot[name][1] >= need[name][1] - 1e-9
                    else "no"] for name, _ in DISTAL_NEEDS]
    d = np.degrees(p.distal_rad)
    lines = [
        f"# Range-of-motion coverage: {setting}", "",
        f"Share of the daily-living region the robot follows within its joint limits: **{share * 100:.1f} %** "
        f"({n} grid samples of plane of elevation {need['plane_of_elevation'][0]:.0f} .. "
        f"{need['plane_of_elevation'][1]:.0f} deg x elevation {need['elevation'][0]:.0f} .. "
        f"{need['elevation'][1]:.0f} deg x axial rotation {need['axial_rotation'][0]:.0f} .. "
        f"{need['axial_rotation'][1]:.0f} deg, Gates et al. 2016).",
        f"Also with every cuff within {p.max_cuff_offset_m * 1000:.0f} mm of its strapping position "
        f"(common practice): **{share_cuff * 100:.1f} %**.", "",
        "Angles: the ISB shoulder angles of the humerus relative to the thorax (Wu et al. 2005, Y-X-Y'): plane of "
        "elevation 0 = abduction, 90 deg = flexion; elevation positive up; axial rotation positive internal. "
        f"Elbow, forearm and wrist held at {d[0]:.0f}, {d[1]:.0f}, {d[2]:.0f}, {d[3]:.0f} deg (flexion, pronation, "
        "flexion, radial deviation). The robot posture lines its upper arm up with the wearer's humerus in "
        "orientation; joint-centre offsets (misalignment, the girdle moving the shoulder centre) do not change "
        "it and show as cuff offsets.",
        f"A cell is marked near-singular when the smallest singular value of the robot shoulder's angular "
        f"Jacobian falls below {p.singular_sigma:g} along its followed range; w is the manipulability of the "
        "hand Jacobian (Yoshikawa 1985, sqrt(det(J J^T)), 6 x 7, mixed units). With the robot's last shoulder "
        "axis along the upper arm (the built-in robot), an axial rotation turns that joint alone, so the "
        "shoulder's singular values stay the same along a cell's axial range.", "",
        "![axial coverage](coverage.png)", "", "## Elbow, forearm and wrist", "",
        markdown_table(["joint", "robot [deg]", "daily-living need [deg]", "covered"], distal_rows), "",
        "Signs as in the model: flexion, pronation, wrist flexion and radial deviation positive. The forearm and "
        "wrist needs are the paper's read with ISB signs (from memory), see `sim.analysis.coverage`.", "",
        "![distal ranges](ranges.png)", "", "## Cells nearest to a shoulder singularity", "",
        markdown_table(["plane [deg]", "elevation [deg]", "min sigma", "min w", "w lowest at axial [deg]"], worst_rows)
        if worst_rows else "No cell is followed at all.", "",
        "## Every cell", "",
        markdown_table(["plane [deg]", "elevation [deg]", "axial range [deg]", "samples followed", "min sigma",
                        "min w", "max cuff offset [mm]"], table_rows), "",
    ]
    if run_time_s is not None:
        lines += [f"Computed in {run_time_s:.1f} s.", ""]
    lines += [CAUTION, ""]
    paths["report"].write_text("\n".join(lines))
    return paths
