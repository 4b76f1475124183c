"""3-D views of runs in a browser: animated replays, offline HTML files and a live viewer.

Everything here is *off* the simulation's hot path: it reads a run folder (or the
models of a run) and sends drawing commands to a meshcat server bound to the
loopback interface.  Nothing in :mod:`controllers` or in the simulation loop
imports this module, apart from the optional :class:`LiveViewer` whose skipped
updates cost one clock read.

What is drawn (the scene tree under ``/meshcat/exosandbox``):

``exo/<geometry>``
    the exoskeleton links from the URDF's visual geometry (boxes, cylinders,
    spheres), in their URDF colours; the URDF's cuff shells (visuals centred
    on a cuff frame) are kept but hidden, so that each cuff is drawn once;
``human/seg_<i>``, ``human/joint_<i>``
    the wearer's arm as capsules (a cylinder and two spheres per segment,
    shoulder -> elbow -> wrist -> hand point) in :data:`SKIN`;
``body/...``
    context of the wearer's size, in a neutral mannequin tone: a seated trunk,
    neck, head, thighs, lower legs and feet sized from the stature
    (:class:`SeatedBody`), a seat with a backrest, a floor with a grid of
    :data:`FLOOR_GRID_M` squares, and a column from the floor to the robot's
    base (:data:`MOUNT`);
``cuffs/<name>``
    one band around the limb at each cuff frame of the robot;
``forces/<name>``
    an arrow for the interaction force *on the human* at each cuff: it starts
    on the cuff's outer surface, on the side the force points to, and points
    along the force (:func:`arrow_base`); cylinder shaft and cone head, of
    length :data:`FORCE_SCALE_M_PER_N` (1 cm per N) times the magnitude,
    capped at :data:`FORCE_ARROW_MAX_M` (see :func:`arrow_lengths`);
``trail``, ``ghost_trail``
    the path of the human hand point (the whole run in replays, the last
    :data:`LIVE_TRAIL_S` seconds in the live viewer), and the baseline's;
``ghost/...``
    optionally, the human-alone baseline arm as a thinner arm in
    :data:`GHOST` violet;
``walls/<i>``
    the virtual walls as outlines with a faint face (a plane as a pane that
    covers the arm's reach across it).

The camera looks along the normal of the hand path's plane, from the side
where no wall and not the trunk stands between it and the arm, at the distance
that frames the arm's joints over the whole run
(:func:`sim.output.framing.frame_view`); the scene is offset so that the
framed point sits at the world origin, where meshcat's orbit camera looks.
The HTML replay adds a caption (:func:`replay_captions`) that shows the
scenario, the controller, the simulated time, the interaction forces and
the names of the faults active at that time, driven by the replay's clock.

Moving parts are meshcat *group* nodes that carry only a transform; their
shapes are child nodes with a fixed offset.  Animations therefore target nodes
whose three.js objects are never replaced, which keeps them working in the
static HTML export regardless of the order in which its commands load.

meshcat is imported lazily-guarded: ``import sim.output.viz`` works without it and
the :class:`ImportError` with the install hint is raised when a viewer is made.

References
----------
.. [Drillis1966] R. Drillis, R. Contini, *Body Segment Parameters*, Report
   1166-03, Office of Vocational Rehabilitation, New York University, 1966;
   the segment lengths as fractions of stature are drawn in D. A. Winter,
   *Biomechanics and Motor Control of Human Movement*, 4th ed., Wiley, 2009,
   Fig. 4.1 (fractions from memory).
.. [Gordon2014] C. C. Gordon et al., *2012 Anthropometric Survey of U.S. Army
   Personnel: Methods and Summary Statistics* (ANSUR II), NATICK/TR-15/007,
   2014 (sitting acromial height about 0.346 of stature in both sexes, from
   memory).
"""

from __future__ import annotations

import contextlib
import io
import json
import logging
import math
import os
import re
import subprocess
import sys
import tempfile
import threading
import time
from collections import deque
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pinocchio as pin

from models.human import HumanParams, Subject
from sim.analysis.derived import cuff_columns
from sim.loop.runlog import load_run
from sim.output import viewer_server
from sim.output.framing import View, frame_view

try:  # guarded: the module must import without meshcat
    import meshcat
    import meshcat.geometry as mg
    from meshcat.animation import Animation
except ImportError:  # pragma: no cover - exercised by reloading with meshcat hidden
    meshcat = None
    mg = None
    Animation = None

__all__ = [
    "start_server",
    "MESHCAT_INSTALL_HINT",
    "FORCE_SCALE_M_PER_N",
    "FORCE_ARROW_MAX_M",
    "SceneModels",
    "Scene",
    "SeatedBody",
    "arrow_lengths",
    "arrow_base",
    "seated_body",
    "replay_view",
    "replay_captions",
    "add_captions",
    "open_visualizer",
    "close_visualizer",
    "build_animation",
    "draw_replay",
    "replay",
    "write_replay_html",
    "LiveViewer",
]

_log = logging.getLogger(__name__)

MESHCAT_INSTALL_HINT = (
    "the 3-D viewer needs the 'meshcat' package; install it with "
    "`python -m pip install meshcat` (it is listed in exosandbox's dependencies)"
)

#: Arrow length per newton of interaction force [m/N] (1 cm per N).
FORCE_SCALE_M_PER_N = 0.01
#: Longest force arrow [m]; larger forces are drawn at this length.
FORCE_ARROW_MAX_M = 0.30
#: Length of the arrow head [m] (shorter for arrows under 2.5 head lengths).
FORCE_HEAD_M = 0.035
#: Radii of the arrow's shaft and of the base of its head [m].
FORCE_SHAFT_RADIUS_M = 0.009
FORCE_HEAD_RADIUS_M = 0.02
#: Radial thickness of a cuff band over the limb's surface [m].
CUFF_BAND_M = 0.012
#: Axial width of a cuff band [m].
CUFF_WIDTH_M = 0.04
#: Seconds of hand path kept by the live viewer's trail.
LIVE_TRAIL_S = 3.0
#: Vertical field of view of the camera [deg].
CAMERA_FOV_DEG = 34.0
#: Fraction of the picture's height (and of a 4:3 picture's width) the arm's joints span over the run.
CAMERA_FILL = 0.55
#: Elevation added to the camera over the hand path's plane normal, so the floor reads in depth [deg].
CAMERA_RAISE_DEG = 15.0
#: Side of the floor grid's squares [m].
FLOOR_GRID_M = 0.1
#: Radius of the ghost arm relative to the wearer's arm.
GHOST_RADIUS_RATIO = 0.6

ROOT = "exosandbox"
"""Name of the scene's root node under ``/meshcat``."""

# Our own palette (RGB in 0..1).  The robot keeps its URDF colours.
SKIN = (0.80, 0.56, 0.42)
BODY = (0.60, 0.63, 0.67)  # the context mannequin (trunk, head, legs): neutral, so the arm stands out
SEAT = (0.47, 0.42, 0.38)
MOUNT = (0.36, 0.38, 0.40)
FLOOR = (0.93, 0.92, 0.89)
GRID_MINOR = (0.74, 0.74, 0.72)
GRID_MAJOR = (0.55, 0.55, 0.53)
GHOST = (0.55, 0.30, 0.90)
CUFF_RING = (0.13, 0.62, 0.50)
FORCE_ARROW = (0.86, 0.12, 0.22)
TRAIL = (0.95, 0.55, 0.10)
WALL = (0.30, 0.58, 0.80)
WALL_EDGE = (0.12, 0.36, 0.58)
_EXO_KEY = (0.22, 0.40, 0.64)  # the frame colour of the shipped exoskeleton URDF, for the key
BACKGROUND_TOP = (0.97, 0.97, 0.95)
BACKGROUND_BOTTOM = (0.86, 0.87, 0.88)

_EPS_SCALE = 1e-6  # three.js dislikes an exactly zero scale
_ROT_Y_TO_Z = np.array([[1.0, 0, 0, 0], [0, 0, -1.0, 0], [0, 1.0, 0, 0], [0, 0, 0, 1.0]])
_ROT_Y_TO_Z.flags.writeable = False
"""+90 deg about x: maps meshcat's y-axis cylinders onto URDF's z-axis ones."""


def _require_meshcat() -> None:
    if meshcat is None:
        raise ImportError(MESHCAT_INSTALL_HINT)


def _hex(rgb: Sequence[float]) -> int:
    r, g, b = (int(round(255 * min(max(float(c), 0.0), 1.0))) for c in rgb[:3])
    return (r << 16) | (g << 8) | b


def _material(rgb: Sequence[float], opacity: float = 1.0) -> Any:
    kw = {"color": _hex(rgb), "reflectivity": 0.3}
    if opacity < 1.0:
        kw.update(transparent=True, opacity=float(opacity))
    return mg.MeshLambertMaterial(**kw)


def _translation(p: Sequence[float]) -> np.ndarray:
    T = np.eye(4)
    T[:3, 3] = p
    return T


def _rotation_y_to(v: np.ndarray) -> np.ndarray:
    """A rotation matrix whose y column is the unit vector ``v``."""
    y = np.asarray(v, dtype=float)
    n = np.linalg.norm(y)
    if n < 1e-12:
        return np.eye(3)
    y = y / n
    a = np.array([1.0, 0.0, 0.0]) if abs(y[0]) < 0.9 else np.array([0.0, 0.0, 1.0])
    x = np.cross(y, a)
    x /= np.linalg.norm(x)
    z = np.cross(x, y)
    return np.column_stack([x, y, z])


def arrow_lengths(force_N: Sequence[float]) -> tuple[float, float, float]:
    """Lengths of the force arrow drawn for one force.

    Parameters
    ----------
    force_N : array_like, shape (3,)
        Force [N] in world axes.

    Returns
    -------
    total, shaft, head : float
        Arrow length from its base to its tip, ``min(FORCE_SCALE_M_PER_N * |F|,
        FORCE_ARROW_MAX_M)`` [m] (1 cm per N, capped at 30 cm), and the lengths
        of its cylinder shaft and cone head, which add up to ``total``.  The head
        is :data:`FORCE_HEAD_M` long, or 40 % of the arrow if that is shorter.
    """
    mag = float(np.linalg.norm(np.asarray(force_N, dtype=float)))
    total = min(FORCE_SCALE_M_PER_N * mag, FORCE_ARROW_MAX_M) if math.isfinite(mag) else 0.0
    head = min(FORCE_HEAD_M, 0.4 * total)
    return total, total - head, head


def arrow_base(point_m: Sequence[float], force_N: Sequence[float], axis: Sequence[float], radius_m: float,
               toward: Sequence[float] = (0.0, -1.0, 0.0)) -> np.ndarray:
    """Start of a force arrow: on the cuff's outer surface, on the side the force points to.

    With the limb axis :math:`a` (unit) and the force :math:`F`, the arrow
    starts at :math:`p + r e`, where :math:`e` is the unit part of :math:`F`
    perpendicular to the limb, :math:`F - (F \\cdot a) a`; it then points along
    :math:`F`, so that it never enters the limb.  When the force runs nearly
    along the limb (its perpendicular part under a quarter of :math:`|F|`),
    :math:`e` is the part of ``toward`` perpendicular to the limb (the scene
    passes the direction across the limb in the picture, toward its top), so
    the arrow runs beside the limb.

    Parameters
    ----------
    point_m : array_like, shape (3,)
        Cuff point on the limb's axis [m].
    force_N : array_like, shape (3,)
        Force [N].
    axis : array_like, shape (3,)
        Direction of the limb at the cuff.
    radius_m : float
        Outer radius of the cuff [m].
    toward : array_like, shape (3,), optional
        Direction used for forces along the limb.

    Returns
    -------
    ndarray, shape (3,)
        Arrow base [m].
    """
    p = np.asarray(point_m, dtype=float)
    f = np.asarray(force_N, dtype=float)
    a = np.asarray(axis, dtype=float)
    a = a / max(float(np.linalg.norm(a)), 1e-12)
    perp = f - (f @ a) * a
    if not np.linalg.norm(perp) >= 0.25 * np.linalg.norm(f) or not np.linalg.norm(perp) > 0:
        t = np.asarray(toward, dtype=float)
        perp = t - (t @ a) * a
        if np.linalg.norm(perp) < 1e-9:
            perp = np.cross(a, [0.0, 0.0, 1.0]) if abs(a[2]) < 0.9 else np.cross(a, [1.0, 0.0, 0.0])
    return p + float(radius_m) * perp / np.linalg.norm(perp)


@dataclass(frozen=True)
class SeatedBody:
    """Sizes of the context drawn around the arm: a seated wearer, a seat and the floor.

    Lengths are fractions of stature :math:`H` ([Drillis1966]_, from
    memory) except the shoulder's height above the seat, the sitting
    acromial height, about :math:`0.346 H` ([Gordon2014]_, from memory), and
    the shoulders' half-breadth, which is the lateral reach of the human
    model's clavicle (:meth:`models.human.HumanParams.clavicle_vector_m`), so
    the trunk meets the arm where the model puts the shoulder.

    Coordinates are in the thorax frame of the human model: origin at the
    glenohumeral centre of the drawn arm, x forward, y to the wearer's left,
    z up.

    Attributes
    ----------
    stature_m : float
        Wearer's stature [m].
    shoulder_half_breadth_m : float
        Mid-sagittal plane to the glenohumeral centre [m].
    side : {"right", "left"}
        The drawn (moving) arm.
    """

    stature_m: float
    shoulder_half_breadth_m: float
    side: str = "right"

    def __post_init__(self) -> None:
        if not (math.isfinite(self.stature_m) and 1.0 <= self.stature_m <= 2.5):
            raise ValueError(f"SeatedBody.stature_m must lie in [1.0, 2.5] m, got {self.stature_m!r}")
        if not (math.isfinite(self.shoulder_half_breadth_m) and 0.05 <= self.shoulder_half_breadth_m <= 0.4):
            raise ValueError("SeatedBody.shoulder_half_breadth_m must lie in [0.05, 0.4] m, got "
                             f"{self.shoulder_half_breadth_m!r}")
        if self.side not in ("right", "left"):
            raise ValueError(f"SeatedBody.side must be 'right' or 'left', got {self.side!r}")

    @property
    def midline_y_m(self) -> float:
        """y of the mid-sagittal plane [m] (to the left of a right arm)."""
        return self.shoulder_half_breadth_m if self.side == "right" else -self.shoulder_half_breadth_m

    @property
    def seat_z_m(self) -> float:
        """Top of the seat, 0.346 H below the shoulder [m]."""
        return -0.346 * self.stature_m

    @property
    def thigh_radius_m(self) -> float:
        return 0.034 * self.stature_m

    @property
    def floor_z_m(self) -> float:
        """Floor: the knee height (0.285 H) below the thighs' axis [m]."""
        return self.seat_z_m + self.thigh_radius_m - 0.285 * self.stature_m

    @property
    def trunk_depth_m(self) -> float:
        return 0.11 * self.stature_m

    @property
    def trunk_x_m(self) -> float:
        """Front-back middle of the trunk (2 cm behind the shoulder centre, as the human URDF's thorax) [m]."""
        return -0.02

    @property
    def centre_m(self) -> np.ndarray:
        """A point inside the trunk, at mid-height [m]."""
        return np.array([self.trunk_x_m, self.midline_y_m, 0.5 * self.seat_z_m])

    def shapes(self) -> list[tuple[str, str, tuple[float, ...], np.ndarray, tuple[float, float, float]]]:
        """The shapes to draw: ``(name, kind, size, pose, rgb)``, poses in the thorax frame.

        ``kind`` is ``"box"`` (size: x, y, z extents), ``"ellipsoid"`` (size:
        semi-axes) or ``"cylinder"`` (size: height, radius along local x,
        radius along local y; axis local z).
        """
        H, ym = self.stature_m, self.midline_y_m
        w = self.shoulder_half_breadth_m
        zs, zf = self.seat_z_m, self.floor_z_m
        rt = self.thigh_radius_m
        xt, dt = self.trunk_x_m, self.trunk_depth_m
        half_w = 0.9 * w  # the trunk's side stays inside the shoulder's centre
        top = -0.02 * H
        out = []

        def T(p, R=None):
            M = np.eye(4)
            if R is not None:
                M[:3, :3] = R
            M[:3, 3] = p
            return M

        out.append(("trunk", "cylinder", (top - zs, half_w, 0.5 * dt), T([xt, ym, 0.5 * (top + zs)]), BODY))
        out.append(("shoulders", "ellipsoid", (0.5 * dt, half_w, 0.045 * H), T([xt, ym, top]), BODY))
        out.append(("neck", "cylinder", (0.07 * H, 0.028 * H, 0.028 * H), T([xt, ym, 0.03 * H]), BODY))
        head_z = (1.0 - 0.065 - 0.818) * H  # head's middle: vertex 0.182 H above the shoulder, 0.130 H tall
        out.append(("head", "ellipsoid", (0.056 * H, 0.045 * H, 0.065 * H), T([xt + 0.01, ym, head_z]), BODY))
        thigh = 0.245 * H
        shank = 0.285 * H
        knee_x = xt + thigh
        along_x = np.array([[0.0, 0.0, 1.0], [0.0, 1.0, 0.0], [-1.0, 0.0, 0.0]])  # local z -> world x
        for k, dy in (("right", -0.05 * H), ("left", 0.05 * H)):
            y = ym + dy
            out.append((f"thigh_{k}", "cylinder", (thigh, rt, rt), T([xt + 0.5 * thigh, y, zs + rt], along_x), BODY))
            out.append((f"shank_{k}", "cylinder", (shank - 0.04 * H, 0.8 * rt, 0.8 * rt),
                        T([knee_x, y, zf + 0.5 * (shank + 0.04 * H)]), BODY))
            out.append((f"foot_{k}", "box", (0.152 * H, 0.055 * H, 0.04 * H), T([knee_x + 0.05 * H, y, zf + 0.02 * H]),
                        BODY))
        seat_w = 0.27 * H
        back_x = xt - 0.5 * dt - 0.025
        front_x = xt + 0.6 * thigh
        seat_x = 0.5 * (front_x + back_x)
        out.append(("seat", "box", (front_x - back_x, seat_w, 0.04), T([seat_x, ym, zs - 0.02]), SEAT))
        out.append(("backrest", "box", (0.03, seat_w, 0.22 * H), T([back_x - 0.015, ym, zs + 0.02 + 0.11 * H]), SEAT))
        out.append(("seat_post", "cylinder", (zs - 0.04 - zf, 0.025, 0.025),
                    T([0.5 * (front_x + back_x), ym, 0.5 * (zs - 0.04 + zf)]), SEAT))
        out.append(("seat_foot", "cylinder", (0.02, 0.2, 0.2), T([0.5 * (front_x + back_x), ym, zf + 0.01]), SEAT))
        return out


# ----------------------------------------------------------------------------------------------
# models of a run
# ----------------------------------------------------------------------------------------------


def seated_body(meta: Mapping[str, Any]) -> SeatedBody | None:
    """The wearer's :class:`SeatedBody` from a run's ``meta.json`` (None when it names no subject).

    The stature and sex come from ``parameters.subject.subject``, the clavicle
    and the side from the same entry, through :class:`models.human.HumanParams`.
    """
    try:
        sp = meta["parameters"]["subject"]
        hp = HumanParams(Subject(**sp["subject"]), clavicle_length_m=sp.get("clavicle_length_m"),
                         side=sp.get("side", "right"))
    except (KeyError, TypeError, ValueError) as e:
        _log.info("no wearer context drawn: %s", e)
        return None
    return SeatedBody(hp.subject.stature_m, float(abs(hp.clavicle_vector_m()[1])), hp.side)



@dataclass
class SceneModels:
    """The pinocchio models, frames and walls a scene is drawn from.

    Build it with :meth:`from_run_dir` or :meth:`from_urdf`.

    Attributes
    ----------
    exo_model, exo_data, exo_geom, exo_geom_data
        Exoskeleton kinematics and its visual geometry.
    human_model, human_data, human_geom
        The wearer's arm (its URDF includes its placement in the world).
    chain_joints : list of int
        Human joints whose origins are the capsule end points (shoulder,
        elbow, wrist), coincident joints merged.
    human_hand_frame : int
        Frame id of the human hand point, the chain's last point.
    cuffs : list of str
        Cuff names, in the order of the logged force columns.
    cuff_exo_frames, cuff_human_frames : list of int
        Frame ids of each cuff on the robot and on the human.
    walls : list
        Wall specifications as stored in ``meta.json``.
    segment_radii : list of float
        Capsule radius per segment [m].
    body : SeatedBody or None
        Sizes of the drawn wearer, seat and floor (None: not drawn).
    thorax : ndarray, shape (4, 4)
        World placement of the human model's thorax frame (the body's frame).
    """

    exo_model: Any
    exo_data: Any
    exo_geom: Any
    exo_geom_data: Any
    human_model: Any
    human_data: Any
    human_geom: Any
    chain_joints: list[int]
    human_hand_frame: int
    cuffs: list[str]
    cuff_exo_frames: list[int]
    cuff_human_frames: list[int]
    walls: list = field(default_factory=list)
    segment_radii: list[float] = field(default_factory=list)
    body: SeatedBody | None = None
    thorax: np.ndarray = field(default_factory=lambda: np.eye(4))

    @classmethod
    def from_urdf(cls, exo_urdf: str, human_urdf: str, cuff_frames: Mapping[str, Sequence[str]],
                  human_hand_frame: str = "human_hand_point", walls: Sequence = (),
                  body: SeatedBody | None = None) -> SceneModels:
        """Models from URDF texts.

        Parameters
        ----------
        exo_urdf, human_urdf : str
            URDF documents of the robot and of the placed human arm.
        cuff_frames : mapping of str to (str, str)
            Cuff name -> (robot frame, human frame), in logged column order.
        human_hand_frame : str, optional
            Name of the human hand point frame.
        walls : sequence, optional
            Wall specifications ``(kind, params)`` as in ``meta["walls"]``.
        body : SeatedBody, optional
            The wearer's context to draw (none when omitted).

        Returns
        -------
        SceneModels
        """
        em = pin.buildModelFromXML(exo_urdf)
        eg = pin.buildGeomFromUrdfString(em, exo_urdf, pin.GeometryType.VISUAL)
        hm = pin.buildModelFromXML(human_urdf)
        hg = pin.buildGeomFromUrdfString(hm, human_urdf, pin.GeometryType.VISUAL)
        chain = [j for j in range(1, hm.njoints)
                 if j == 1 or np.linalg.norm(hm.jointPlacements[j].translation) > 1e-6]
        radii = [float(go.geometry.radius) for go in sorted(hg.geometryObjects, key=lambda g: g.parentJoint)
                 if type(go.geometry).__name__ == "Cylinder" and go.parentJoint > 0]
        n_seg = len(chain)
        default = [0.045, 0.037, 0.03]
        if len(radii) != n_seg:
            radii = [default[min(i, 2)] for i in range(n_seg)]

        def frame(model, name):
            if not model.existFrame(name):
                raise ValueError(f"frame {name!r} is not in the model {model.name!r}")
            return model.getFrameId(name)

        names = list(cuff_frames)
        hd = hm.createData()
        thorax = np.eye(4)
        if hm.existFrame("human_thorax"):
            pin.forwardKinematics(hm, hd, pin.neutral(hm))
            thorax = pin.updateFramePlacement(hm, hd, hm.getFrameId("human_thorax")).homogeneous.copy()
        return cls(exo_model=em, exo_data=em.createData(), exo_geom=eg, exo_geom_data=pin.GeometryData(eg),
                   human_model=hm, human_data=hd, human_geom=hg, chain_joints=chain,
                   human_hand_frame=frame(hm, human_hand_frame), cuffs=names,
                   cuff_exo_frames=[frame(em, cuff_frames[c][0]) for c in names],
                   cuff_human_frames=[frame(hm, cuff_frames[c][1]) for c in names],
                   walls=[list(w) for w in walls], segment_radii=radii, body=body, thorax=thorax)

    @classmethod
    def from_run_dir(cls, run_dir: str | Path) -> SceneModels:
        """Models of a run folder (its ``exo.urdf``, ``human.urdf`` and ``meta.json``).

        Works while the run is still being written: only the URDF files and
        ``meta.json`` are read.

        Parameters
        ----------
        run_dir : str or Path
            Folder written by ``exosandbox run``.

        Returns
        -------
        SceneModels
        """
        folder = Path(run_dir)
        meta = json.loads((folder / "meta.json").read_text(encoding="utf-8"))
        mm = meta["models"]
        cuff_frames = mm["cuff_frames"]
        order = meta.get("cuffs", list(cuff_frames))
        return cls.from_urdf((folder / mm["exo_urdf"]).read_text(encoding="utf-8"),
                             (folder / mm["human_urdf"]).read_text(encoding="utf-8"),
                             {c: cuff_frames[c] for c in order},
                             human_hand_frame=mm.get("human_hand_frame", "human_hand_point"),
                             walls=meta.get("walls", []), body=seated_body(meta))

    def human_points(self, q_human: np.ndarray) -> np.ndarray:
        """World positions of the arm chain (shoulder, elbow, wrist, hand point), shape (k, 3)."""
        m, d = self.human_model, self.human_data
        pin.forwardKinematics(m, d, np.asarray(q_human, dtype=float))
        pts = [d.oMi[j].translation.copy() for j in self.chain_joints]
        pts.append(pin.updateFramePlacement(m, d, self.human_hand_frame).translation.copy())
        return np.array(pts)


# ----------------------------------------------------------------------------------------------
# the scene: static objects once, then poses per frame
# ----------------------------------------------------------------------------------------------


class Scene:
    """The drawn objects of one run, and the poses of its moving parts.

    Parameters
    ----------
    models : SceneModels
        What to draw.
    centre : array_like, shape (3,)
        World point put at the viewer's origin (where the camera looks);
        ignored when ``view`` is given (its target is used).
    ghost : bool, optional
        Whether to draw a second, thinner human arm (the baseline).
    trail : bool, optional
        Whether to draw the hand path.
    view : sim.output.framing.View, optional
        Camera; without it the camera looks at ``centre`` from the drawn
        arm's side, level with it.

    Attributes
    ----------
    paths : set of str
        Full meshcat paths of every node this scene has sent an object,
        transform or property to: the registry the tests inspect.
    hidden : set of str
        Paths (relative to the scene root) of nodes drawn hidden (the URDF's cuff shells).
    """

    def __init__(self, models: SceneModels, centre: Sequence[float], ghost: bool = False, trail: bool = True,
                 view: View | None = None):
        self.models = models
        m = models
        if view is None:
            view = View(np.asarray(centre, dtype=float), _side_normal(m), [0.0, 0.0, 1.0], 1.6, CAMERA_FOV_DEG)
        self.view = view
        self.centre = np.asarray(view.target_m, dtype=float)
        self.ghost = ghost
        self.trail = trail
        self.paths: set[str] = set()
        self.hidden: set[str] = set()
        self.exo_nodes = [f"exo/{go.name}" for go in m.exo_geom.geometryObjects]
        n_seg = len(m.chain_joints)
        self.seg_lengths: list[float] = []
        self.cuff_nodes = [f"cuffs/{c}" for c in m.cuffs]
        self.force_nodes = [f"forces/{c}" for c in m.cuffs]
        self._n_seg = n_seg
        self._cuff_segment: list[int] | None = None
        self.animation: Any = None

    # -- helpers ------------------------------------------------------------------------------

    def _full(self, rel: str) -> str:
        return f"/meshcat/{ROOT}/{rel}" if rel else f"/meshcat/{ROOT}"

    def _obj(self, vis, rel: str, geometry, material, offset: np.ndarray | None = None, kind=None) -> None:
        node = vis[ROOT][rel] if rel else vis[ROOT]
        if kind is None:
            node.set_object(geometry, material)
        else:
            node.set_object(kind(geometry, material))
        if offset is not None:
            node.set_transform(offset)
        self.paths.add(self._full(rel))

    def cuff_segments(self, q_human: np.ndarray) -> list[int]:
        """Index of the arm segment each cuff sits on (the nearest one to its human frame)."""
        if self._cuff_segment is None:
            m = self.models
            pts = m.human_points(q_human)  # leaves human_data at q_human
            segs = []
            for fid in m.cuff_human_frames:
                p = pin.updateFramePlacement(m.human_model, m.human_data, fid).translation
                dist = []
                for i in range(len(pts) - 1):
                    a, b = pts[i], pts[i + 1]
                    t = float(np.clip((p - a) @ (b - a) / max(float((b - a) @ (b - a)), 1e-12), 0.0, 1.0))
                    dist.append(float(np.linalg.norm(a + t * (b - a) - p)))
                segs.append(int(np.argmin(dist)))
            self._cuff_segment = segs
        return self._cuff_segment

    def cuff_radius_m(self, k: int, q_human: np.ndarray) -> float:
        """Outer radius of the band of cuff ``k`` [m]: the limb's radius plus :data:`CUFF_BAND_M`."""
        radii = self.models.segment_radii
        return radii[min(self.cuff_segments(q_human)[k], len(radii) - 1)] + CUFF_BAND_M

    # -- static part ----------------------------------------------------------------------------

    def draw(self, vis, q_exo0: np.ndarray, q_human0: np.ndarray, hand_path: np.ndarray | None = None,
             q_ghost0: np.ndarray | None = None, ghost_path: np.ndarray | None = None) -> None:
        """Send every object, the camera and the initial poses.

        Parameters
        ----------
        vis : meshcat.Visualizer
            Target viewer.
        q_exo0, q_human0 : ndarray
            Configurations of the first pose.
        hand_path : ndarray, shape (N, 3), optional
            Hand path drawn as the trail (world coordinates).
        q_ghost0 : ndarray, optional
            First configuration of the ghost arm.
        ghost_path : ndarray, shape (N, 3), optional
            Hand path of the baseline, drawn in the ghost's colour.
        """
        _require_meshcat()
        m = self.models
        vis[ROOT].delete()
        vis[ROOT].set_transform(_translation(-self.centre))
        self.paths.add(self._full(""))
        self._setup_view(vis)
        # robot links: one group per geometry object, the shape as its child
        shells = self._cuff_shells(q_exo0)
        for i, (go, node) in enumerate(zip(m.exo_geom.geometryObjects, self.exo_nodes)):
            shape = self._shape(go.geometry)
            if shape is None:
                _log.info("exo geometry %s (%s) is not drawn", go.name, type(go.geometry).__name__)
                continue
            geom, offset = shape
            rgba = np.asarray(go.meshColor, dtype=float)
            self._obj(vis, f"{node}/shape", geom, _material(rgba[:3], float(rgba[3])), offset)
            if i in shells:  # the cuff is drawn once, as the band under cuffs/
                vis[ROOT][node].set_property("visible", False)
                self.hidden.add(node)
        # the wearer
        pts = m.human_points(q_human0)
        self.seg_lengths = [float(np.linalg.norm(pts[i + 1] - pts[i])) for i in range(self._n_seg)]
        self._draw_arm(vis, "human", SKIN, 1.0)
        if self.ghost and q_ghost0 is not None:
            self._draw_arm(vis, "ghost", GHOST, 1.0, shrink=GHOST_RADIUS_RATIO)
        self._draw_context(vis, q_exo0)
        for k, node in enumerate(self.cuff_nodes):
            self._obj(vis, f"{node}/ring", mg.Cylinder(CUFF_WIDTH_M, radius=self.cuff_radius_m(k, q_human0)),
                      _material(CUFF_RING), _ROT_Y_TO_Z)
        for node in self.force_nodes:
            self._obj(vis, f"{node}/shaft/shape", mg.Cylinder(1.0, radius=FORCE_SHAFT_RADIUS_M), _material(FORCE_ARROW),
                      _translation([0.0, 0.5, 0.0]))
            self._obj(vis, f"{node}/head/shape",
                      mg.Cylinder(FORCE_HEAD_M, radiusTop=0.0, radiusBottom=FORCE_HEAD_RADIUS_M),
                      _material(FORCE_ARROW),
                      _translation([0.0, FORCE_HEAD_M / 2, 0.0]))
        self._draw_walls(vis, hand_path if hand_path is not None else pts)
        if self.trail and hand_path is not None and len(hand_path) > 1:
            self.set_trail(vis, hand_path)
        if self.trail and self.ghost and ghost_path is not None and len(ghost_path) > 1:
            self.set_trail(vis, ghost_path, "ghost_trail", GHOST)
        for rel, T in self.transforms(q_exo0, q_human0, np.zeros((len(m.cuffs), 3)), q_ghost0).items():
            vis[ROOT][rel].set_transform(T)
            self.paths.add(self._full(rel))
        for rel, s in self.scales(np.zeros((len(m.cuffs), 3))).items():
            vis[ROOT][rel].set_property("scale", s)

    def set_trail(self, vis, hand_path: np.ndarray, rel: str = "trail", rgb: Sequence[float] = TRAIL) -> None:
        """Draw (or redraw) a hand path as a line through ``hand_path`` (world, shape (N, 3))."""
        pts = np.ascontiguousarray(np.asarray(hand_path, dtype=np.float32).T)
        vis[ROOT][rel].set_object(mg.Line(mg.PointsGeometry(pts), mg.LineBasicMaterial(color=_hex(rgb), linewidth=2)))
        self.paths.add(self._full(rel))

    def _setup_view(self, vis) -> None:
        vis["/Background"].set_property("top_color", list(BACKGROUND_TOP))
        vis["/Background"].set_property("bottom_color", list(BACKGROUND_BOTTOM))
        vis["/Grid"].set_property("visible", False)
        vis["/Axes"].set_property("visible", False)
        vis["/Cameras/default"].set_transform(np.eye(4))
        p = self.view.distance_m * self.view.direction
        # the camera node is rotated so that three.js' y-up frame becomes z-up: (x, y, z) -> (x, z, -y)
        cam = vis["/Cameras/default/rotated/<object>"]
        cam.set_property("position", [float(p[0]), float(p[2]), float(-p[1])])
        cam.set_property("fov", float(self.view.fov_deg))
        self.paths.update({"/Cameras/default", "/Cameras/default/rotated/<object>", "/Background", "/Grid",
                           "/Axes"})

    @staticmethod
    def _shape(geometry):
        kind = type(geometry).__name__
        if kind == "Box":
            return mg.Box(list(2.0 * np.asarray(geometry.halfSide, dtype=float))), None
        if kind == "Cylinder":
            return mg.Cylinder(2.0 * float(geometry.halfLength), radius=float(geometry.radius)), _ROT_Y_TO_Z
        if kind == "Sphere":
            return mg.Sphere(float(geometry.radius)), None
        return None

    def _cuff_shells(self, q_exo: np.ndarray) -> set[int]:
        """Exo geometry objects centred (within 1 cm) on a cuff frame of the same link: the URDF's cuff shells."""
        m = self.models
        pin.forwardKinematics(m.exo_model, m.exo_data, np.asarray(q_exo, dtype=float))
        pin.updateGeometryPlacements(m.exo_model, m.exo_data, m.exo_geom, m.exo_geom_data)
        cuffs = [(m.exo_model.frames[f].parentJoint, pin.updateFramePlacement(m.exo_model, m.exo_data, f).translation)
                 for f in m.cuff_exo_frames]
        out = set()
        for i, go in enumerate(m.exo_geom.geometryObjects):
            c = m.exo_geom_data.oMg[i].translation
            if any(j == go.parentJoint and np.linalg.norm(c - p) < 0.01 for j, p in cuffs):
                out.add(i)
        return out

    def _draw_arm(self, vis, prefix: str, rgb, opacity: float, shrink: float = 1.0) -> None:
        mat = _material(rgb, opacity)
        radii = self.models.segment_radii
        for i, L in enumerate(self.seg_lengths):
            self._obj(vis, f"{prefix}/seg_{i}/shape", mg.Cylinder(max(L, 1e-4), radius=shrink * radii[i]), mat,
                      _translation([0.0, L / 2, 0.0]))
        for k in range(len(self.seg_lengths) + 1):
            r = radii[min(k, len(radii) - 1)] if k < len(radii) else radii[-1] * 0.95
            if 0 < k < len(radii):
                r = max(radii[k - 1], radii[k])
            self._obj(vis, f"{prefix}/joint_{k}/shape", mg.Sphere(shrink * r), mat)

    def _draw_context(self, vis, q_exo0: np.ndarray) -> None:
        """The seated wearer, the seat, the floor with its grid, and the column under the robot's base."""
        m = self.models
        body = m.body
        if body is None:
            return
        Tb = np.asarray(m.thorax, dtype=float)
        for name, kind, size, pose, rgb in body.shapes():
            T = Tb @ pose
            if kind == "box":
                geom = mg.Box(list(size))
            elif kind == "ellipsoid":
                geom = mg.Ellipsoid(list(size))
            else:  # a unit cylinder along local z, stretched to the two radii
                geom = mg.Cylinder(1.0, radius=1.0)
                T = T @ np.diag([size[1], size[2], size[0], 1.0]) @ _ROT_Y_TO_Z
            self._obj(vis, f"body/{name}", geom, _material(rgb), T)
        # floor: a slab and a grid of FLOOR_GRID_M squares around the seat
        z = float((Tb @ [0.0, 0.0, body.floor_z_m, 1.0])[2])
        c = (Tb @ [0.25, body.midline_y_m, 0.0, 1.0])[:2]
        half = 1.0
        self._obj(vis, "body/floor", mg.Box([2 * half, 2 * half, 0.01]), _material(FLOOR),
                  _translation([c[0], c[1], z - 0.006]))
        minor, major = [], []
        n = int(round(half / FLOOR_GRID_M))
        for k in range(-n, n + 1):
            off = k * FLOOR_GRID_M
            seg = [[c[0] + off, c[1] - half, z], [c[0] + off, c[1] + half, z],
                   [c[0] - half, c[1] + off, z], [c[0] + half, c[1] + off, z]]
            (major if k % 5 == 0 else minor).extend(seg)
        for rel, lines, rgb in (("body/grid_minor", minor, GRID_MINOR), ("body/grid_major", major, GRID_MAJOR)):
            pts = np.ascontiguousarray(np.asarray(lines, dtype=np.float32).T)
            self._obj(vis, rel, mg.PointsGeometry(pts), mg.LineBasicMaterial(color=_hex(rgb)), kind=mg.LineSegments)
        # the robot's base stands on a column from the floor
        mount = self._base_bottom(q_exo0)
        if mount is not None and mount[2] > z + 0.05:
            h = float(mount[2] - z)
            self._obj(vis, "body/mount_column", mg.Box([0.07, 0.07, h]), _material(MOUNT),
                      _translation([mount[0], mount[1], z + h / 2]))
            self._obj(vis, "body/mount_foot", mg.Box([0.3, 0.3, 0.02]), _material(MOUNT),
                      _translation([mount[0], mount[1], z + 0.01]))

    def _base_bottom(self, q_exo0: np.ndarray) -> np.ndarray | None:
        """Below the middle of the robot's fixed geometry: (x, y) of its centre and z of its lowest point."""
        m = self.models
        pin.forwardKinematics(m.exo_model, m.exo_data, np.asarray(q_exo0, dtype=float))
        pin.updateGeometryPlacements(m.exo_model, m.exo_data, m.exo_geom, m.exo_geom_data)
        centres, lows = [], []
        for i, go in enumerate(m.exo_geom.geometryObjects):
            if go.parentJoint != 0:
                continue
            M = m.exo_geom_data.oMg[i]
            g, kind = go.geometry, type(go.geometry).__name__
            if kind == "Box":
                reach = float(np.abs(M.rotation[2]) @ np.asarray(g.halfSide, dtype=float))
            elif kind == "Cylinder":
                reach = float(abs(M.rotation[2, 2]) * g.halfLength + g.radius)
            elif kind == "Sphere":
                reach = float(g.radius)
            else:
                continue
            centres.append(M.translation)
            lows.append(M.translation[2] - reach)
        if not centres:
            return None
        c = np.mean(centres, axis=0)
        return np.array([c[0], c[1], min(lows)])

    def _draw_walls(self, vis, reach_points: np.ndarray) -> None:
        face = mg.MeshLambertMaterial(color=_hex(WALL), transparent=True, opacity=0.12, depthWrite=False)
        edge = mg.LineBasicMaterial(color=_hex(WALL_EDGE))
        hatch = mg.LineBasicMaterial(color=_hex(WALL), transparent=True, opacity=0.6)
        pts = np.asarray(reach_points, dtype=float).reshape(-1, 3)
        for i, wall in enumerate(self.models.walls):
            kind, p = wall[0], wall[1] if len(wall) > 1 else {}
            if kind == "wall_plane":
                n = np.asarray(p["normal"], dtype=float)
                n = n / np.linalg.norm(n)
                R = _rotation_y_to(n)  # pane in the local x-z plane
                x0 = np.asarray(p["point_m"], dtype=float)
                local = (pts - x0) @ R
                lo = np.minimum(local.min(axis=0), 0.0) - 0.15
                hi = np.maximum(local.max(axis=0), 0.0) + 0.15
                mid = 0.5 * (lo + hi)
                size = np.maximum(hi - lo, 0.5)
                T = np.eye(4)
                T[:3, :3] = R
                T[:3, 3] = x0 + R @ [mid[0], 0.0, mid[2]]
                self._obj(vis, f"walls/{i}", mg.Box([size[0], 0.002, size[2]]), face, T)
                hx, hz = size[0] / 2, size[2] / 2
                rim = [[-hx, 0, -hz], [hx, 0, -hz], [hx, 0, -hz], [hx, 0, hz],
                       [hx, 0, hz], [-hx, 0, hz], [-hx, 0, hz], [-hx, 0, -hz]]
                lines = []
                for k in range(1, int(size[2] / FLOOR_GRID_M)):
                    zk = -hz + k * FLOOR_GRID_M
                    lines += [[-hx, 0, zk], [hx, 0, zk]]
                self._obj(vis, f"walls/{i}/edges", mg.PointsGeometry(np.asarray(rim, dtype=np.float32).T),
                          edge, kind=mg.LineSegments)
                if lines:
                    self._obj(vis, f"walls/{i}/hatch", mg.PointsGeometry(np.asarray(lines, dtype=np.float32).T),
                              hatch, kind=mg.LineSegments)
            elif kind == "wall_box":
                lo, hi = np.asarray(p["lower_m"], dtype=float), np.asarray(p["upper_m"], dtype=float)
                self._obj(vis, f"walls/{i}", mg.Box(list(hi - lo)), face, _translation((lo + hi) / 2))
                h = (hi - lo) / 2
                corners = [np.array([sx, sy, sz]) * h for sx in (-1, 1) for sy in (-1, 1) for sz in (-1, 1)]
                rim = [[corners[a], corners[b]] for a in range(8) for b in range(a + 1, 8)
                       if np.count_nonzero(corners[a] != corners[b]) == 1]
                self._obj(vis, f"walls/{i}/edges",
                          mg.PointsGeometry(np.asarray(rim, dtype=np.float32).reshape(-1, 3).T), edge,
                          kind=mg.LineSegments)
            elif kind == "wall_sphere":
                r = float(p["radius_m"])
                self._obj(vis, f"walls/{i}", mg.Sphere(r), face, _translation(p["center_m"]))
                self._obj(vis, f"walls/{i}/edges", mg.Sphere(r),
                          mg.MeshBasicMaterial(color=_hex(WALL_EDGE), wireframe=True, transparent=True, opacity=0.35))
            else:
                _log.warning("wall kind %r is not drawn", kind)

    # -- moving part ------------------------------------------------------------------------------

    def _arm_transforms(self, prefix: str, q_human: np.ndarray, out: dict) -> None:
        pts = self.models.human_points(q_human)
        for i in range(len(pts) - 1):
            T = np.eye(4)
            T[:3, :3] = _rotation_y_to(pts[i + 1] - pts[i])
            T[:3, 3] = pts[i]
            out[f"{prefix}/seg_{i}"] = T
        for k, p in enumerate(pts):
            out[f"{prefix}/joint_{k}"] = _translation(p)

    def transforms(self, q_exo: np.ndarray, q_human: np.ndarray, cuff_forces_world: np.ndarray,
                   q_ghost: np.ndarray | None = None) -> dict[str, np.ndarray]:
        """World transforms of every moving group node for one pose.

        Parameters
        ----------
        q_exo, q_human : ndarray
            Robot and human configurations.
        cuff_forces_world : ndarray, shape (n_cuffs, 3)
            Interaction force on the human at each cuff [N, world axes].
        q_ghost : ndarray, optional
            Configuration of the ghost arm (ignored without a ghost).

        Returns
        -------
        dict of str to ndarray (4, 4)
            Node path relative to the scene root -> homogeneous transform.
            A force arrow's node sits at its base (:func:`arrow_base`) with its
            local y axis along the force.
        """
        m = self.models
        out: dict[str, np.ndarray] = {}
        q_exo = np.asarray(q_exo, dtype=float)
        pin.forwardKinematics(m.exo_model, m.exo_data, q_exo)
        pin.updateGeometryPlacements(m.exo_model, m.exo_data, m.exo_geom, m.exo_geom_data)
        for i, node in enumerate(self.exo_nodes):
            out[node] = m.exo_geom_data.oMg[i].homogeneous
        for fid, node in zip(m.cuff_exo_frames, self.cuff_nodes):
            out[node] = pin.updateFramePlacement(m.exo_model, m.exo_data, fid).homogeneous
        segs = self.cuff_segments(q_human)
        self._arm_transforms("human", q_human, out)  # leaves human_data at q_human
        pts = m.human_points(q_human)
        forces = np.asarray(cuff_forces_world, dtype=float).reshape(len(m.cuffs), 3)
        for k, (fid, node, f) in enumerate(zip(m.cuff_human_frames, self.force_nodes, forces)):
            total, shaft, _ = arrow_lengths(f)
            T = np.eye(4)
            T[:3, :3] = _rotation_y_to(f) if total > 0 else np.eye(3)
            p = pin.updateFramePlacement(m.human_model, m.human_data, fid).translation
            i = segs[k]
            axis = pts[i + 1] - pts[i]
            beside = np.cross(axis, self.view.direction)  # across the limb in the picture, toward its top
            beside = -beside if beside @ self.view.up < 0 else beside
            T[:3, 3] = arrow_base(p, f, axis, self.cuff_radius_m(k, q_human), beside)
            out[node] = T
            out[f"{node}/head"] = _translation([0.0, shaft, 0.0])
        if self.ghost and q_ghost is not None:
            self._arm_transforms("ghost", q_ghost, out)
        return out

    def scales(self, cuff_forces_world: np.ndarray) -> dict[str, list[float]]:
        """``scale`` property of the arrow parts: shaft stretched along y, head shrunk for short arrows."""
        out = {}
        forces = np.asarray(cuff_forces_world, dtype=float).reshape(len(self.models.cuffs), 3)
        for node, f in zip(self.force_nodes, forces):
            total, shaft, head = arrow_lengths(f)
            out[f"{node}/shaft"] = [1.0, max(shaft, _EPS_SCALE), 1.0]
            h = max(head / FORCE_HEAD_M, _EPS_SCALE)
            out[f"{node}/head"] = [h, h, h]
        return out


# ----------------------------------------------------------------------------------------------
# visualizer lifetime
# ----------------------------------------------------------------------------------------------


def start_server(host: str = viewer_server.DEFAULT_HOST) -> tuple[subprocess.Popen, str, str]:
    """Start the viewer's server (:mod:`sim.output.viewer_server`) listening on ``host`` only.

    The server stops when this process has gone (however it ended); stop it
    sooner with :func:`close_visualizer` (or ``proc.terminate()``).

    Returns
    -------
    proc : subprocess.Popen
        The server process.
    zmq_url, web_url : str
        Where it takes drawing commands, and the page to open in a browser.
    """
    cmd = [sys.executable, "-u", viewer_server.__file__, "--host", host, "--parent-pid", str(os.getpid())]
    # a session of its own, as meshcat does: a Ctrl-C at the terminal reaches this process, which stops it
    # its messages go to a file, not a pipe that nobody reads and that would block it once full
    errors = tempfile.TemporaryFile()
    proc = subprocess.Popen(cmd, stdin=subprocess.DEVNULL, stdout=subprocess.PIPE, stderr=errors,
                            start_new_session=True)
    urls = {}
    try:
        while len(urls) < 2:
            line = proc.stdout.readline().decode("utf-8", "replace").strip()
            if not line:
                if proc.poll() is not None:
                    errors.seek(0)
                    err = errors.read().decode("utf-8", "replace").strip().splitlines()
                    raise RuntimeError(f"the viewer's server stopped at start (exit code {proc.returncode})"
                                       + (f": {err[-1]}" if err else ""))
                continue
            key, sep, value = line.partition("=")
            if sep and key in ("zmq_url", "web_url"):
                urls[key] = value
    except BaseException:
        _stop_server(proc)
        raise
    finally:
        errors.close()  # the server keeps its own descriptor of the file
    proc.stdout.close()  # it prints nothing more there
    return proc, urls["zmq_url"], urls["web_url"]


def _stop_server(proc: subprocess.Popen) -> None:
    if proc.poll() is None:
        proc.terminate()
        try:
            proc.wait(timeout=5)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait(timeout=10)
    for stream in (proc.stdout, proc.stderr):
        if stream is not None:
            stream.close()


def open_visualizer(zmq_url: str | None = None) -> Any:
    """A meshcat visualizer; starts a server on 127.0.0.1 when ``zmq_url`` is None (:func:`start_server`).

    meshcat's own "open the URL" message is sent to the log instead of stdout.

    Parameters
    ----------
    zmq_url : str, optional
        Address of a running meshcat server (``tcp://127.0.0.1:6000``).

    Returns
    -------
    meshcat.Visualizer
        Its ``window.server_proc`` is the server it started, if any, which
        :func:`close_visualizer` stops.

    Raises
    ------
    ImportError
        If meshcat is not installed (with the install hint).
    """
    _require_meshcat()
    proc = None
    if zmq_url is None:
        proc, zmq_url, _ = start_server()
    buf = io.StringIO()
    try:
        with contextlib.redirect_stdout(buf):
            vis = meshcat.Visualizer(zmq_url=zmq_url)
    except BaseException:
        if proc is not None:
            _stop_server(proc)
        raise
    vis.window.server_proc = proc if proc is not None else vis.window.server_proc
    _log.info("meshcat viewer at %s", vis.url())
    return vis


def close_visualizer(vis: Any) -> None:
    """Close the connection of ``vis`` and stop the server subprocess it started, if any."""
    window = getattr(vis, "window", None)
    if window is None:
        return
    proc = getattr(window, "server_proc", None)
    sock = getattr(window, "zmq_socket", None)
    if sock is not None:
        sock.close(linger=0)
    if proc is not None:
        _stop_server(proc)


# ----------------------------------------------------------------------------------------------
# replays
# ----------------------------------------------------------------------------------------------


def _frame_indices(t: np.ndarray, dt: float, fps: float) -> np.ndarray:
    """Tick index drawn at each frame: ``round(N * dt * fps)`` frames at 1/fps, nearest earlier tick."""
    n_ticks = len(t)
    duration = n_ticks * dt
    n_frames = max(1, int(round(duration * fps)))
    times = t[0] + np.arange(n_frames) / fps
    idx = np.searchsorted(t, times + 1e-9, side="right") - 1
    return np.clip(idx, 0, n_ticks - 1)


def _side_normal(models: SceneModels) -> np.ndarray:
    """World direction from the trunk out through the drawn arm's shoulder (horizontal)."""
    lateral = -1.0 if models.body is None or models.body.side == "right" else 1.0
    return np.asarray(models.thorax[:3, :3] @ [0.0, lateral, 0.0], dtype=float)


def replay_view(models: SceneModels, q_human: np.ndarray, hand_path: np.ndarray,
                extra_points: np.ndarray | None = None, fov_deg: float = CAMERA_FOV_DEG,
                fill: float = CAMERA_FILL, raise_deg: float = CAMERA_RAISE_DEG) -> View:
    """The camera of a replay: :func:`sim.output.framing.frame_view` of the hand path and the arm's joints.

    Parameters
    ----------
    models : SceneModels
        The run's models (walls, body).
    q_human : ndarray, shape (N, nq)
        Human configurations over the run (up to 200 of them, evenly spread, are used).
    hand_path : ndarray, shape (N, 3)
        Hand positions over the run [m].
    extra_points : ndarray, shape (M, 3), optional
        Further points to keep in the picture [m].
    fov_deg, fill, raise_deg : float, optional
        Passed to :func:`~sim.output.framing.frame_view`.

    Returns
    -------
    View
    """
    q = np.asarray(q_human, dtype=float)
    picks = np.unique(np.linspace(0, len(q) - 1, min(len(q), 200)).round().astype(int))
    pts = [models.human_points(q[i]) for i in picks]
    if extra_points is not None:
        pts.append(np.asarray(extra_points, dtype=float).reshape(-1, 3))
    body_centre = None
    if models.body is not None:
        body_centre = (models.thorax @ np.append(models.body.centre_m, 1.0))[:3]
    return frame_view(hand_path, np.concatenate(pts), walls=models.walls, body_centre_m=body_centre,
                      fallback_normal=_side_normal(models), fov_deg=fov_deg, fill=fill, raise_deg=raise_deg)


def _load(run_dir: str | Path, ghost: bool):
    run = load_run(run_dir)
    base = None
    if ghost and (Path(run_dir) / "human_alone" / "meta.json").exists():
        base = load_run(Path(run_dir) / "human_alone")
    return run, base


def build_animation(scene: Scene, arrays: Mapping[str, np.ndarray], dt: float, fps: float = 30,
                    ghost_arrays: Mapping[str, np.ndarray] | None = None) -> Any:
    """A meshcat animation of logged ticks, one frame per 1/fps of simulated time.

    Parameters
    ----------
    scene : Scene
        The drawn scene (gives the node paths and poses).
    arrays : mapping
        Logged columns ``t``, ``q_exo``, ``q_human`` and ``cuff_force_human_world``.
    dt : float
        Tick period [s].
    fps : float, optional
        Frames per second of simulated time.
    ghost_arrays : mapping, optional
        Columns of the baseline run (``t``, ``q_human``) for the ghost arm.

    Returns
    -------
    meshcat.animation.Animation
        ``round(N * dt * fps)`` frames (at least one).
    """
    _require_meshcat()
    t = np.asarray(arrays["t"], dtype=float)
    forces = arrays.get("cuff_force_human_world")
    if forces is None:
        forces = np.zeros((len(t), len(scene.models.cuffs), 3))
    anim = Animation(default_framerate=fps)
    g_q = g_t = None
    if ghost_arrays is not None and scene.ghost:
        g_t = np.asarray(ghost_arrays["t"], dtype=float)
        g_q = np.asarray(ghost_arrays["q_human"], dtype=float)
    for k, i in enumerate(_frame_indices(t, dt, fps)):
        q_g = None
        if g_q is not None:
            q_g = g_q[min(int(np.searchsorted(g_t, t[i] + 1e-9, side="right")) - 1, len(g_q) - 1)]
        with anim.at_frame(_AnimRoot(), k) as frame:
            root = frame[ROOT]
            for rel, T in scene.transforms(arrays["q_exo"][i], arrays["q_human"][i], forces[i], q_g).items():
                root[rel].set_transform(T)
            for rel, s in scene.scales(forces[i]).items():
                root[rel].set_property("scale", "vector3", s)
    return anim


class _AnimRoot:
    """Stand-in visualizer giving ``Animation.at_frame`` the ``/meshcat`` root path."""

    @property
    def path(self):
        from meshcat.path import Path as MPath

        return MPath(("meshcat",))


def draw_replay(vis: Any, run_dir: str | Path, fps: float = 30, ghost: bool = True) -> Scene:
    """Draw a run folder into ``vis`` and set its animation (playing from the start).

    Parameters
    ----------
    vis : meshcat.Visualizer
        Target viewer.
    run_dir : str or Path
        Folder written by ``exosandbox run``.
    fps : float, optional
        Animation frames per second of simulated time.
    ghost : bool, optional
        Draw the human-alone baseline when the run has one.

    Returns
    -------
    Scene
        The drawn scene; its ``animation`` attribute holds the animation sent.
    """
    run, base = _load(run_dir, ghost)
    models = SceneModels.from_run_dir(run_dir)
    a = run.arrays | cuff_columns(run)
    hand = np.asarray(a["p_hand_human"], dtype=float)
    view = replay_view(models, a["q_human"], hand)
    scene = Scene(models, view.target_m, ghost=base is not None, view=view)
    q_g0 = base.arrays["q_human"][0] if base is not None else None
    g_path = base.arrays["p_hand_human"] if base is not None else None
    scene.draw(vis, a["q_exo"][0], a["q_human"][0], hand_path=hand, q_ghost0=q_g0, ghost_path=g_path)
    anim = build_animation(scene, a, float(run.meta["dt_s"]), fps,
                           ghost_arrays=base.arrays if base is not None else None)
    vis.set_animation(anim, play=True, repetitions=1)
    scene.animation = anim
    return scene


def replay(run_dir: str | Path, vis: Any = None, fps: float = 30, ghost: bool = True) -> tuple[Any, str]:
    """Replay a run folder in the browser, with play/pause and a time scrubber.

    Parameters
    ----------
    run_dir : str or Path
        Folder written by ``exosandbox run``.
    vis : meshcat.Visualizer, optional
        Viewer to draw into; a new loopback server is started when omitted
        (stop it with :func:`close_visualizer`).
    fps : float, optional
        Animation frames per second of simulated time.
    ghost : bool, optional
        Draw the human-alone baseline as a translucent arm when the run has one.

    Returns
    -------
    vis : meshcat.Visualizer
    url : str
        Address of the viewer page (open it in a browser).
    """
    if vis is None:
        vis = open_visualizer()
    draw_replay(vis, run_dir, fps, ghost)
    return vis, vis.url()


def replay_captions(run_dir: str | Path, fps: float = 30, ghost: bool = True) -> dict[str, Any]:
    """What the HTML replay's caption shows, frame by frame (JSON-able).

    Parameters
    ----------
    run_dir : str or Path
        Folder written by ``exosandbox run``.
    fps : float, optional
        Frames per second of simulated time (as in :func:`build_animation`).
    ghost : bool, optional
        Whether the baseline arm is drawn (adds its key entry).

    Returns
    -------
    dict
        ``title``, ``scenario``, ``controller``, ``subject`` (str), ``fps``,
        ``duration_s``, ``t_s`` (simulated time of each animation frame [s]),
        ``cuffs`` (names), ``force_N`` (per frame, the magnitude of the force
        on the wearer at each cuff [N], 0.1 N resolution), ``force_scale_cm_per_N``,
        ``force_cap_N`` (force drawn at the longest arrow [N]), ``grid_cm``,
        ``ghost`` (bool), ``walls`` (how many), ``faults`` (the names of the
        scenario's faults) and ``fault_text`` (per frame, the active faults'
        names, "fault: NAME, NAME", or "" when none is active).
    """
    run = load_run(run_dir)
    meta = run.meta
    dt = float(meta["dt_s"])
    t = np.asarray(run.arrays["t"], dtype=float)
    idx = _frame_indices(t, dt, fps)
    forces = cuff_columns(run).get("cuff_force_human_world")
    cuffs = list(meta.get("cuffs", []))
    mags = (np.zeros((len(idx), len(cuffs))) if forces is None
            else np.linalg.norm(np.asarray(forces, dtype=float)[idx], axis=-1))
    body = seated_body(meta)
    subject = ""
    with contextlib.suppress(KeyError, TypeError):
        sp = meta["parameters"]["subject"]["subject"]
        subject = f"{sp['sex']}, {sp['stature_m']:.3f} m, {sp['mass_kg']:.1f} kg"
    if body is not None:
        subject += f", {body.side} arm"
    scenario, controller = str(meta.get("scenario", "?")), str(meta.get("controller", "?"))
    fault_names = [str(f["name"]) for f in meta.get("faults") or []]
    fault_text = [""] * len(idx)
    if fault_names and "fault_active" in run.arrays:
        active = np.asarray(run.arrays["fault_active"], dtype=bool)[idx]
        fault_text = [("fault: " + ", ".join(n for n, on in zip(fault_names, row) if on)) if row.any() else ""
                      for row in active]
    return {
        "title": f"exosandbox replay: {scenario} with the {controller} controller",
        "scenario": scenario,
        "controller": controller,
        "subject": subject,
        "fps": float(fps),
        "duration_s": round(len(t) * dt, 6),
        "t_s": [round(float(x), 4) for x in t[idx]],
        "cuffs": cuffs,
        "force_N": np.round(mags, 1).tolist(),
        "force_scale_cm_per_N": round(100.0 * FORCE_SCALE_M_PER_N, 3),
        "force_cap_N": round(FORCE_ARROW_MAX_M / FORCE_SCALE_M_PER_N, 1),
        "grid_cm": round(100.0 * FLOOR_GRID_M, 3),
        "ghost": bool(ghost),
        "walls": len(meta.get("walls") or []),
        "faults": fault_names,
        "fault_text": fault_text,
    }


def _css(rgb: Sequence[float]) -> str:
    return f"#{_hex(rgb):06x}"


def add_captions(html: str, captions: Mapping[str, Any]) -> str:
    """The meshcat page ``html`` with our title, a caption driven by the replay's clock, and a key.

    The caption reads the animation's time from the viewer (the largest
    ``time`` of its animation actions, which is what the scene shows) and
    shows the frame's simulated time and cuff forces from ``captions``
    (:func:`replay_captions`).

    Parameters
    ----------
    html : str
        A page from ``meshcat.Visualizer.static_html()``.
    captions : mapping
        From :func:`replay_captions`.

    Returns
    -------
    str
    """
    import html as html_lib

    esc = html_lib.escape
    data = json.dumps(dict(captions), separators=(",", ":")).replace("</", "<\\/")
    key = [(SKIN, "the wearer's arm"), (_EXO_KEY, "the robot"), (CUFF_RING, "cuffs"),
           (FORCE_ARROW, f"force on the wearer, from the cuff's surface, "
                         f"{captions['force_scale_cm_per_N']:g} cm per N"),
           (TRAIL, "hand path")]
    if captions.get("ghost"):
        key.insert(1, (GHOST, "the arm alone, without the robot (baseline), and its hand path"))
    if captions.get("walls"):
        key.append((WALL, "virtual wall"))
    key.append((GRID_MAJOR, f"floor grid: {captions['grid_cm']:g} cm squares"))
    rows = "".join(f'<div><span class="xs-sw" style="background:{_css(c)}"></span>{esc(label)}</div>'
                   for c, label in key)
    head = (f'<div id="xs-caption"><div id="xs-scenario">{esc(captions["scenario"])}</div>'
            f'<div>controller <b id="xs-controller">{esc(captions["controller"])}</b></div>'
            f'<div id="xs-subject">{esc(captions["subject"])}</div>'
            f'<div>simulated time <b id="xs-time">{captions["t_s"][0] if captions["t_s"] else 0:.2f} s</b>'
            f' of {captions["duration_s"]:.2f} s</div>'
            '<div class="xs-head">force on the wearer</div><div id="xs-forces"></div>'
            '<div id="xs-faults"></div></div>'
            f'<div id="xs-key">{rows}</div>')
    style = """<style>
#xs-caption, #xs-key { position: absolute; font: 13px/1.45 system-ui, sans-serif; color: #262a2e;
  background: rgba(255, 255, 252, 0.8); border-left: 4px solid #d98b1b; padding: 8px 12px; pointer-events: none; }
#xs-caption { top: 12px; left: 12px; min-width: 230px; }
#xs-key { bottom: 12px; right: 12px; font-size: 12px; }
#xs-scenario { font-size: 17px; font-weight: 600; }
.xs-head { margin-top: 4px; color: #555c63; }
.xs-sw { display: inline-block; width: 10px; height: 10px; margin-right: 7px; border-radius: 2px; }
.xs-row { display: flex; align-items: center; gap: 6px; font-variant-numeric: tabular-nums; }
.xs-name { width: 72px; } .xs-val { width: 56px; text-align: right; }
.xs-bar { height: 6px; background: #db1f38; border-radius: 3px; }
#xs-faults { margin-top: 4px; color: #9a4a06; font-weight: 600; }
</style>"""
    script = """<script>
(function () {
  var D = JSON.parse(document.getElementById("xs-data").textContent);
  var box = document.getElementById("xs-forces"), vals = [], bars = [];
  D.cuffs.forEach(function (c) {
    var row = document.createElement("div"); row.className = "xs-row";
    var n = document.createElement("span"); n.className = "xs-name"; n.textContent = c.replace(/_/g, " ");
    var v = document.createElement("span"); v.className = "xs-val";
    var b = document.createElement("span"); b.className = "xs-bar";
    row.appendChild(n); row.appendChild(v); row.appendChild(b); box.appendChild(row);
    vals.push(v); bars.push(b);
  });
  function show() {
    var t = 0, a = window.viewer && window.viewer.animator;
    if (a && a.actions) { a.actions.forEach(function (x) { t = Math.max(t, x.time); }); }
    var k = Math.max(0, Math.min(D.t_s.length - 1, Math.floor(t * D.fps + 1e-6)));
    document.getElementById("xs-time").textContent = (D.t_s.length ? D.t_s[k] : 0).toFixed(2) + " s";
    document.getElementById("xs-faults").textContent = (D.fault_text && D.fault_text[k]) || "";
    var f = D.force_N[k] || [];
    for (var i = 0; i < vals.length; i++) {
      var x = f[i] || 0;
      vals[i].textContent = x.toFixed(1) + " N";
      bars[i].style.width = Math.min(x, D.force_cap_N) * 3 + "px";
    }
  }
  show();
  var a = window.viewer && window.viewer.animator;
  if (a && a.update) {  // refresh right after each animation step, so the caption matches the drawn frame
    var step = a.update.bind(a);
    a.update = function () { step(); show(); };
  }
  setInterval(show, 100);
})();
</script>"""
    block = (f'{style}{head}<script type="application/json" id="xs-data">{data}</script>{script}')
    out = re.sub(r"<title>.*?</title>", f"<title>{esc(captions['title'])}</title>", html, count=1, flags=re.S)
    i = out.rfind("</body>")
    if i < 0:
        raise ValueError("add_captions: the page has no </body>; expected a page from meshcat's static_html()")
    return out[:i] + block + out[i:]


def write_replay_html(run_dir: str | Path, html_path: str | Path, fps: float = 30, ghost: bool = True,
                      vis: Any = None) -> Path:
    """Write a self-contained HTML replay of a run that opens offline and plays on load.

    The animation is stored with meshcat's ``play`` option set, which makes the
    viewer start it as soon as the page has loaded; it plays once and then
    rests at its first frame (use the Animations panel to replay or scrub).
    The page carries its own title and a caption (:func:`replay_captions`,
    :func:`add_captions`): scenario, controller, wearer, simulated time and
    the force on the wearer at each cuff, following the replay's clock, and a
    key to the colours and scales.

    Parameters
    ----------
    run_dir : str or Path
        Folder written by ``exosandbox run``.
    html_path : str or Path
        File to write.
    fps : float, optional
        Animation frames per second of simulated time.
    ghost : bool, optional
        Include the human-alone baseline arm.
    vis : meshcat.Visualizer, optional
        Viewer (server) used to assemble the page; a temporary one is started
        and stopped when omitted.

    Returns
    -------
    Path
        ``html_path``.
    """
    own = vis is None
    if own:
        vis = open_visualizer()
    try:
        scene = draw_replay(vis, run_dir, fps, ghost)
        html = vis.static_html()
    finally:
        if own:
            close_visualizer(vis)
    html = add_captions(html, replay_captions(run_dir, fps, ghost=scene.ghost))
    out = Path(html_path)
    out.write_text(html, encoding="utf-8")
    _log.info("replay written to %s", out)
    return out


# ----------------------------------------------------------------------------------------------
# live viewer
# ----------------------------------------------------------------------------------------------


class LiveViewer:
    """Draw a running simulation, at most ``max_fps`` frames per second of wall time.

    Parameters
    ----------
    run_dir_or_models : str, Path or SceneModels
        A run folder (its URDF files and ``meta.json`` must exist) or models.
    max_fps : float, optional
        Largest drawing rate [frames per wall-clock second].
    vis : meshcat.Visualizer, optional
        Viewer to draw into; a loopback server is started (and stopped by
        :meth:`close`) when omitted.
    clock : callable, optional
        Wall clock in seconds, :func:`time.perf_counter` by default (tests
        inject a fake one).
    background : bool, optional
        Draw in a background thread (default False): :meth:`update` then
        only hands over copies of the state when a frame is due, so the
        simulation does not wait for the viewer's messages.

    Notes
    -----
    :meth:`update` is meant to be called every tick: a skipped update is one
    clock read and one comparison.
    """

    def __init__(self, run_dir_or_models: str | Path | SceneModels, max_fps: float = 30, vis: Any = None,
                 clock: Callable[[], float] = time.perf_counter, background: bool = False):
        _require_meshcat()
        if max_fps <= 0:
            raise ValueError(f"max_fps must be positive, got {max_fps!r}")
        models = (run_dir_or_models if isinstance(run_dir_or_models, SceneModels)
                  else SceneModels.from_run_dir(run_dir_or_models))
        self._own = vis is None
        self.vis = open_visualizer() if vis is None else vis
        self.url: str = self.vis.url()
        self._clock = clock
        self._period = 1.0 / float(max_fps)
        self._next = -math.inf
        self.frames_drawn = 0
        self._trail: deque = deque()
        self._scene: Scene | None = None
        self.models = models
        self._pending = None
        self._wake = threading.Event()
        self._stop = False
        self._thread = None
        if background:
            self._thread = threading.Thread(target=self._drawer, name="exosandbox-live-view", daemon=True)
            self._thread.start()

    def _drawer(self) -> None:
        while True:
            self._wake.wait()
            self._wake.clear()
            job, self._pending = self._pending, None
            if job is not None:
                try:
                    self._draw(*job)
                except Exception:  # a viewer problem must never stop the simulation
                    _log.exception("live view: drawing failed; the view stops updating")
                    return
            if self._stop:
                return

    @property
    def scene(self) -> Scene | None:
        """The drawn scene (made at the first drawn update)."""
        return self._scene

    def update(self, t_s: float, q_exo: np.ndarray, q_human: np.ndarray,
               cuff_forces_world: np.ndarray | None = None) -> bool:
        """Draw this state unless a frame was drawn less than 1/max_fps ago.

        Parameters
        ----------
        t_s : float
            Simulated time [s] (for the trail).
        q_exo, q_human : ndarray
            Robot and human configurations.
        cuff_forces_world : ndarray, shape (n_cuffs, 3), optional
            Force on the human at each cuff [N, world axes].

        Returns
        -------
        bool
            Whether a frame was drawn.
        """
        now = self._clock()
        if now < self._next:
            return False
        self._next = now + self._period
        if self._thread is None:
            self._draw(float(t_s), q_exo, q_human, cuff_forces_world)
        else:  # hand over copies; the drawer thread takes the latest
            forces = None if cuff_forces_world is None else np.array(cuff_forces_world, dtype=float)
            self._pending = (float(t_s), np.array(q_exo, dtype=float), np.array(q_human, dtype=float), forces)
            self._wake.set()
        return True

    def _draw(self, t_s, q_exo, q_human, forces) -> None:
        m = self.models
        if forces is None:
            forces = np.zeros((len(m.cuffs), 3))
        hand = m.human_points(q_human)[-1]
        if self._scene is None:
            pts = m.human_points(q_human)
            ahead = pts[-1:] + m.thorax[:3, :3] @ [0.25, 0.0, 0.1]  # room for the reach ahead
            view = frame_view(pts[-1:], np.concatenate([pts, ahead]), walls=m.walls,
                              fallback_normal=_side_normal(m), fov_deg=CAMERA_FOV_DEG, fill=CAMERA_FILL,
                              raise_deg=CAMERA_RAISE_DEG)
            self._scene = Scene(m, view.target_m, ghost=False, view=view)
            self._scene.draw(self.vis, q_exo, q_human)
        vis, scene = self.vis, self._scene
        for rel, T in scene.transforms(q_exo, q_human, forces).items():
            vis[ROOT][rel].set_transform(T)
        for rel, s in scene.scales(forces).items():
            vis[ROOT][rel].set_property("scale", s)
        self._trail.append((t_s, hand))
        while self._trail and self._trail[0][0] < t_s - LIVE_TRAIL_S:
            self._trail.popleft()
        if len(self._trail) > 1:
            scene.set_trail(vis, np.array([p for _, p in self._trail]))
        self.frames_drawn += 1

    def close(self) -> None:
        """Stop the drawer thread, then the viewer's server if this viewer started it."""
        if self._thread is not None:
            self._stop = True
            self._wake.set()
            self._thread.join(timeout=5.0)
            self._thread = None
        if self._own and self.vis is not None:
            close_visualizer(self.vis)
        self.vis = None

    def __enter__(self) -> LiveViewer:
        return self

    def __exit__(self, *exc) -> None:
        self.close()
