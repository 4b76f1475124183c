"""3-D views of runs in a browser: animated replays, offline HTML files and a live viewer.

Everything here is *off* the simulation's hot path: it reads a run folder (or the
models of a run) and sends drawing commands to a meshcat server bound to the
loopback interface.  Nothing in :mod:`controllers` or in the simulation loop
imports this module, apart from the optional :class:`LiveViewer` whose skipped
updates cost one clock read.

What is drawn (the scene tree under ``/meshcat/exosandbox``):

``exo/<geometry>``
    the exoskeleton links from the URDF's visual geometry (boxes, cylinders,
    spheres), in their URDF colours;
``human/seg_<i>``, ``human/joint_<i>``
    the wearer's arm as capsules (a cylinder and two spheres per segment,
    shoulder -> elbow -> wrist -> hand point) in a skin tone, and the trunk from
    the human URDF as a muted box;
``cuffs/<name>``
    a thin ring (short open-looking disc) at each cuff frame of the robot;
``forces/<name>``
    an arrow at each human cuff frame for the interaction force *on the
    human*: cylinder shaft and cone head, of length :data:`FORCE_SCALE_M_PER_N`
    (1 cm per N) times the magnitude, capped at :data:`FORCE_ARROW_MAX_M`
    (see :func:`arrow_lengths`);
``trail``
    the path of the human hand point (the whole run in replays, the last
    :data:`LIVE_TRAIL_S` seconds in the live viewer);
``ghost/...``
    optionally, the human-alone baseline arm as a translucent ghost;
``walls/<i>``
    the virtual walls as translucent shapes (a plane as a large thin box).

The whole scene is offset so that the middle of the arm's workspace sits at
the world origin, which is where meshcat's orbit camera looks; the camera is
then placed in front of and to the right of the wearer at
:data:`CAMERA_DISTANCE_M`.

Moving parts are meshcat *group* nodes that carry only a transform; their
shapes are child nodes with a fixed offset.  Animations therefore target nodes
whose three.js objects are never replaced, which keeps them working in the
static HTML export regardless of the order in which its commands load.

meshcat is imported lazily-guarded: ``import sim.output.viz`` works without it and
the :class:`ImportError` with the install hint is raised when a viewer is made.
"""

from __future__ import annotations

import contextlib
import io
import json
import logging
import math
import threading
import time
from collections import deque
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pinocchio as pin

from sim.analysis.derived import cuff_columns
from sim.loop.runlog import load_run

try:  # guarded: the module must import without meshcat
    import meshcat
    import meshcat.geometry as mg
    from meshcat.animation import Animation
except ImportError:  # pragma: no cover - exercised by reloading with meshcat hidden
    meshcat = None
    mg = None
    Animation = None

__all__ = [
    "MESHCAT_INSTALL_HINT",
    "FORCE_SCALE_M_PER_N",
    "FORCE_ARROW_MAX_M",
    "SceneModels",
    "Scene",
    "arrow_lengths",
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
FORCE_HEAD_M = 0.03
#: Seconds of hand path kept by the live viewer's trail.
LIVE_TRAIL_S = 3.0
#: Distance from the camera to the middle of the arm's workspace [m].
CAMERA_DISTANCE_M = 1.6
#: Direction from the workspace middle to the camera (front-right, a little above).
CAMERA_DIRECTION = (0.78, -0.55, 0.30)
#: Vertical field of view of the camera [deg].
CAMERA_FOV_DEG = 34.0

ROOT = "exosandbox"
"""Name of the scene's root node under ``/meshcat``."""

# Our own palette (RGB in 0..1).  The robot keeps its URDF colours.
SKIN = (0.89, 0.67, 0.52)
TRUNK = (0.55, 0.60, 0.50)
GHOST = (0.70, 0.62, 0.90)
CUFF_RING = (0.18, 0.72, 0.58)
FORCE_ARROW = (0.86, 0.22, 0.30)
TRAIL = (0.95, 0.55, 0.10)
WALL = (0.55, 0.75, 0.88)
BACKGROUND_TOP = (0.96, 0.96, 0.94)
BACKGROUND_BOTTOM = (0.82, 0.83, 0.84)

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


# ----------------------------------------------------------------------------------------------
# models of a run
# ----------------------------------------------------------------------------------------------


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

    @classmethod
    def from_urdf(cls, exo_urdf: str, human_urdf: str, cuff_frames: Mapping[str, Sequence[str]],
                  human_hand_frame: str = "human_hand_point", walls: Sequence = ()) -> SceneModels:
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
        return cls(exo_model=em, exo_data=em.createData(), exo_geom=eg, exo_geom_data=pin.GeometryData(eg),
                   human_model=hm, human_data=hm.createData(), human_geom=hg, chain_joints=chain,
                   human_hand_frame=frame(hm, human_hand_frame), cuffs=names,
                   cuff_exo_frames=[frame(em, cuff_frames[c][0]) for c in names],
                   cuff_human_frames=[frame(hm, cuff_frames[c][1]) for c in names],
                   walls=[list(w) for w in walls], segment_radii=radii)

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
                             walls=meta.get("walls", []))

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
        World point put at the viewer's origin (where the camera looks).
    ghost : bool, optional
        Whether to draw a second, translucent human arm (the baseline).
    trail : bool, optional
        Whether to draw the hand path.

    Attributes
    ----------
    paths : set of str
        Full meshcat paths of every node this scene has sent an object,
        transform or property to: the registry the tests inspect.
    """

    def __init__(self, models: SceneModels, centre: Sequence[float], ghost: bool = False, trail: bool = True):
        self.models = models
        self.centre = np.asarray(centre, dtype=float)
        self.ghost = ghost
        self.trail = trail
        self.paths: set[str] = set()
        m = models
        self.exo_nodes = [f"exo/{go.name}" for go in m.exo_geom.geometryObjects]
        n_seg = len(m.chain_joints)
        self.seg_lengths: list[float] = []
        self.cuff_nodes = [f"cuffs/{c}" for c in m.cuffs]
        self.force_nodes = [f"forces/{c}" for c in m.cuffs]
        self._n_seg = n_seg
        self.animation: Any = None

    # -- helpers ------------------------------------------------------------------------------

    def _full(self, rel: str) -> str:
        return f"/meshcat/{ROOT}/{rel}" if rel else f"/meshcat/{ROOT}"

    def _obj(self, vis, rel: str, geometry, material, offset: np.ndarray | None = None) -> None:
        node = vis[ROOT][rel] if rel else vis[ROOT]
        node.set_object(geometry, material)
        if offset is not None:
            node.set_transform(offset)
        self.paths.add(self._full(rel))

    # -- static part ----------------------------------------------------------------------------

    def draw(self, vis, q_exo0: np.ndarray, q_human0: np.ndarray, hand_path: np.ndarray | None = None,
             q_ghost0: np.ndarray | None = None) -> None:
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
        """
        _require_meshcat()
        m = self.models
        vis[ROOT].delete()
        vis[ROOT].set_transform(_translation(-self.centre))
        self.paths.add(self._full(""))
        self._setup_view(vis)
        # robot links: one group per geometry object, the shape as its child
        for go, node in zip(m.exo_geom.geometryObjects, self.exo_nodes):
            shape = self._shape(go.geometry)
            if shape is None:
                _log.info("exo geometry %s (%s) is not drawn", go.name, type(go.geometry).__name__)
                continue
            geom, offset = shape
            rgba = np.asarray(go.meshColor, dtype=float)
            self._obj(vis, f"{node}/shape", geom, _material(rgba[:3], float(rgba[3])), offset)
        # the wearer
        pts = m.human_points(q_human0)
        self.seg_lengths = [float(np.linalg.norm(pts[i + 1] - pts[i])) for i in range(self._n_seg)]
        self._draw_arm(vis, "human", SKIN, 1.0)
        self._draw_trunk(vis)
        if self.ghost and q_ghost0 is not None:
            self._draw_arm(vis, "ghost", GHOST, 0.35, shrink=0.9)
        for node in self.cuff_nodes:
            self._obj(vis, f"{node}/ring", mg.Cylinder(0.022, radius=0.058), _material(CUFF_RING, 0.55),
                      _ROT_Y_TO_Z)
        for node in self.force_nodes:
            self._obj(vis, f"{node}/shaft/shape", mg.Cylinder(1.0, radius=0.007), _material(FORCE_ARROW),
                      _translation([0.0, 0.5, 0.0]))
            self._obj(vis, f"{node}/head/shape",
                      mg.Cylinder(FORCE_HEAD_M, radiusTop=0.0, radiusBottom=0.016), _material(FORCE_ARROW),
                      _translation([0.0, FORCE_HEAD_M / 2, 0.0]))
        self._draw_walls(vis)
        if self.trail and hand_path is not None and len(hand_path) > 1:
            self.set_trail(vis, hand_path)
        for rel, T in self.transforms(q_exo0, q_human0, np.zeros((len(m.cuffs), 3)), q_ghost0).items():
            vis[ROOT][rel].set_transform(T)
            self.paths.add(self._full(rel))
        for rel, s in self.scales(np.zeros((len(m.cuffs), 3))).items():
            vis[ROOT][rel].set_property("scale", s)

    def set_trail(self, vis, hand_path: np.ndarray) -> None:
        """Draw (or redraw) the hand path as a line through ``hand_path`` (world, shape (N, 3))."""
        pts = np.ascontiguousarray(np.asarray(hand_path, dtype=np.float32).T)
        vis[ROOT]["trail"].set_object(mg.Line(mg.PointsGeometry(pts),
                                              mg.LineBasicMaterial(color=_hex(TRAIL), linewidth=2)))
        self.paths.add(self._full("trail"))

    def _setup_view(self, vis) -> None:
        vis["/Background"].set_property("top_color", list(BACKGROUND_TOP))
        vis["/Background"].set_property("bottom_color", list(BACKGROUND_BOTTOM))
        vis["/Grid"].set_property("visible", False)
        vis["/Axes"].set_property("visible", False)
        vis["/Cameras/default"].set_transform(np.eye(4))
        d = np.asarray(CAMERA_DIRECTION, dtype=float)
        p = CAMERA_DISTANCE_M * d / np.linalg.norm(d)
        # the camera node is rotated so that three.js' y-up frame becomes z-up: (x, y, z) -> (x, z, -y)
        cam = vis["/Cameras/default/rotated/<object>"]
        cam.set_property("position", [float(p[0]), float(p[2]), float(-p[1])])
        cam.set_property("fov", CAMERA_FOV_DEG)
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

    def _draw_trunk(self, vis) -> None:
        m = self.models
        gd = pin.GeometryData(m.human_geom)
        pin.forwardKinematics(m.human_model, m.human_data, pin.neutral(m.human_model))
        pin.updateGeometryPlacements(m.human_model, m.human_data, m.human_geom, gd)
        for i, go in enumerate(m.human_geom.geometryObjects):
            if go.parentJoint != 0:
                continue  # the arm itself is drawn as capsules
            shape = self._shape(go.geometry)
            if shape is None:
                continue
            geom, offset = shape
            T = gd.oMg[i].homogeneous
            self._obj(vis, f"human/trunk_{i}", geom, _material(TRUNK, 0.8), T if offset is None else T @ offset)

    def _draw_walls(self, vis) -> None:
        mat = _material(WALL, 0.25)
        for i, wall in enumerate(self.models.walls):
            kind, p = wall[0], wall[1] if len(wall) > 1 else {}
            if kind == "wall_plane":
                T = np.eye(4)
                n = np.asarray(p["normal"], dtype=float)
                T[:3, :3] = _rotation_y_to(n)
                T[:3, 3] = p["point_m"]
                self._obj(vis, f"walls/{i}", mg.Box([0.6, 0.004, 0.6]), mat, T)  # a 0.6 m pane around the point
            elif kind == "wall_box":
                lo, hi = np.asarray(p["lower_m"], dtype=float), np.asarray(p["upper_m"], dtype=float)
                self._obj(vis, f"walls/{i}", mg.Box(list(hi - lo)), mat, _translation((lo + hi) / 2))
            elif kind == "wall_sphere":
                self._obj(vis, f"walls/{i}", mg.Sphere(float(p["radius_m"])), mat, _translation(p["center_m"]))
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
        self._arm_transforms("human", q_human, out)  # leaves human_data at q_human
        forces = np.asarray(cuff_forces_world, dtype=float).reshape(len(m.cuffs), 3)
        for fid, node, f in zip(m.cuff_human_frames, self.force_nodes, forces):
            total, shaft, _ = arrow_lengths(f)
            T = np.eye(4)
            T[:3, :3] = _rotation_y_to(f) if total > 0 else np.eye(3)
            T[:3, 3] = pin.updateFramePlacement(m.human_model, m.human_data, fid).translation
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


def open_visualizer(zmq_url: str | None = None) -> Any:
    """A meshcat visualizer; starts a loopback server when ``zmq_url`` is None.

    meshcat's own "open the URL" message is sent to the log instead of stdout.

    Parameters
    ----------
    zmq_url : str, optional
        Address of a running meshcat server (``tcp://127.0.0.1:6000``).

    Returns
    -------
    meshcat.Visualizer

    Raises
    ------
    ImportError
        If meshcat is not installed (with the install hint).
    """
    _require_meshcat()
    buf = io.StringIO()
    with contextlib.redirect_stdout(buf):
        vis = meshcat.Visualizer(zmq_url=zmq_url)
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
    if proc is not None and proc.poll() is None:
        proc.kill()
        proc.wait(timeout=10)


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


def _workspace_centre(*point_sets: np.ndarray) -> np.ndarray:
    pts = np.concatenate([np.asarray(p, dtype=float).reshape(-1, 3) for p in point_sets])
    return 0.5 * (pts.min(axis=0) + pts.max(axis=0))


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
    pts = [a["p_hand_human"], a["p_hand_exo"], models.human_points(a["q_human"][0])]
    scene = Scene(models, _workspace_centre(*pts), ghost=base is not None)
    q_g0 = base.arrays["q_human"][0] if base is not None else None
    scene.draw(vis, a["q_exo"][0], a["q_human"][0], hand_path=a["p_hand_human"], q_ghost0=q_g0)
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


def write_replay_html(run_dir: str | Path, html_path: str | Path, fps: float = 30, ghost: bool = True,
                      vis: Any = None) -> Path:
    """Write a self-contained HTML replay of a run that opens offline and plays on load.

    The animation is stored with meshcat's ``play`` option set, which makes the
    viewer start it as soon as the page has loaded; it plays once and then
    rests at its first frame (use the Animations panel to replay or scrub).

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
        draw_replay(vis, run_dir, fps, ghost)
        html = vis.static_html()
    finally:
        if own:
            close_visualizer(vis)
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
            centre = _workspace_centre(pts, pts[-1:] + [0.25, 0.0, 0.1])  # room for the reach ahead
            self._scene = Scene(m, centre, ghost=False)
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
