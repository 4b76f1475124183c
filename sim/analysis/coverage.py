"""Range-of-motion coverage: which humerus orientations the exoskeleton can follow, and how far from singular.

* :func:`humerus_rotation` and :func:`isb_shoulder_angles` convert between a
  humerus orientation and the shoulder angles of the ISB recommendation
  [Wu2005]_: plane of elevation, elevation and axial rotation, an intrinsic
  Y-X-Y' sequence of the humerus relative to the thorax.
* :func:`manipulability` is Yoshikawa's measure [Yoshikawa1985]_.
* :func:`coverage_map` sweeps plane of elevation x elevation; in each cell it
  samples the axial rotation, solves the robot posture that lines its upper
  arm up with the wearer's (:func:`models.coupling.matching_exo_posture`) and
  records which axial rotations lie inside the robot's joint limits, the
  manipulability of the robot's hand Jacobian, the smallest singular value of
  its shoulder's angular Jacobian and how far the cuffs are pulled off their
  strapping position (joint-centre offsets: misalignment, shoulder girdle).
* :data:`ADL_NEEDS_DEG` are the ranges needed for activities of daily living
  [Gates2016]_, mapped to the model's sign conventions.

Frames.  The thorax frame of the models has x anterior, y to the left, z up;
the ISB thorax frame has X anterior, Y up, Z to the right.  For the right arm
``R_isb = C R_model C^T`` with the rows of ``C`` being (1,0,0), (0,0,1),
(0,-1,0); the humerus link frame of the models is parallel to the thorax at
rest with the humerus along -z, so the same map gives the ISB humerus frame
(Y along the shaft towards the shoulder).  A left arm's joint angles mean the
same anatomical motions as the right's (its chart is the right one's mirror),
so the same angles apply; an orientation read from a left model is mirrored
across the sagittal plane (``diag(1,-1,1) R diag(1,-1,1)``) before it is
decomposed.

Sign conventions (ISB, [Wu2005]_): plane of elevation 0 = abduction in the
frontal plane, +90 deg = flexion in the sagittal plane (positive anterior);
elevation positive away from the side (the ISB sequence's X rotation is its
negative); axial rotation positive internal.

References
----------
.. [Wu2005] Wu G., van der Helm F.C.T., Veeger H.E.J., Makhsous M., Van Roy P., Anglin C., Nagels J.,
   Karduna A.R., McQuade K., Wang X., Werner F.W., Buchholz B. (2005), "ISB recommendation on definitions of
   joint coordinate systems of various joints for the reporting of human joint motion - Part II: shoulder,
   elbow, wrist and hand", Journal of Biomechanics 38(5):981-992.
.. [Yoshikawa1985] Yoshikawa T. (1985), "Manipulability of robotic mechanisms", International Journal of
   Robotics Research 4(2):3-9 (pages from memory).
.. [Gates2016] Gates D.H., Walters L.S., Cowley J., Wilken J.M., Resnik L. (2016), "Range of motion
   requirements for upper-limb activities of daily living", American Journal of Occupational Therapy
   70(1):7001350010.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from types import MappingProxyType

import numpy as np
import pinocchio as pin

from models.arm import ArmModel
from models.coupling import DEFAULT_CUFFS, CuffSpec, matching_exo_posture, strap_cuffs
from models.errors import ParameterError, UnknownNameError
from models.human import HumanParams, girdle_posture

__all__ = ["ADL_NEEDS_DEG", "CoverageParams", "CoverageCell", "CoverageMap", "humerus_rotation",
           "isb_shoulder_angles", "manipulability", "smallest_singular_value", "coverage_map",
           "human_arm_posture", "required_share"]

#: Model thorax coordinates (x anterior, y left, z up) to ISB thorax coordinates (X anterior, Y up, Z right).
_MODEL_TO_ISB = ((1.0, 0.0, 0.0), (0.0, 0.0, 1.0), (0.0, -1.0, 0.0))

#: Ranges [deg] needed for activities of daily living, [Gates2016]_ (eight tasks, the range covering all),
#: in the model's conventions.  Shoulder: ISB angles (as the paper reports them, internal rotation positive).
#: Elbow flexion as reported.  Forearm, wrist: the paper's ``-53/0/13`` forearm rotation is read as 53 deg
#: supination to 13 deg pronation, ``-40/0/38`` wrist as 40 deg extension to 38 deg flexion, and ``-28/0/38``
#: as 28 deg radial to 38 deg ulnar deviation (ISB signs: pronation, flexion and ulnar deviation positive;
#: reading from memory, not confirmed in the paper); the model's wrist deviation is positive radial, so that
#: range is negated.
ADL_NEEDS_DEG = MappingProxyType({
    "plane_of_elevation": (-65.0, 105.0),
    "elevation": (0.0, 108.0),
    "axial_rotation": (-55.0, 79.0),
    "elbow_flexion": (0.0, 121.0),
    "forearm_rotation": (-53.0, 13.0),
    "wrist_flexion": (-40.0, 38.0),
    "wrist_deviation": (-38.0, 28.0),
})


def _rot(axis: str, angle: float) -> np.ndarray:
    return pin.utils.rotate(axis, float(angle))


def humerus_rotation(plane_rad: float, elevation_rad: float, axial_rad: float) -> np.ndarray:
    r"""Humerus orientation in the ISB thorax frame from the ISB shoulder angles [Wu2005]_.

    .. math:: R = R_Y(\phi)\, R_X(-\theta)\, R_Y(\psi)

    (intrinsic Y-X-Y'), ``plane_rad`` :math:`\phi`, ``elevation_rad`` :math:`\theta` (positive: arm raised),
    ``axial_rad`` :math:`\psi` (positive: internal rotation).  Returns (3, 3), ISB axes (X anterior, Y up,
    Z right; humerus Y along the shaft towards the shoulder).
    """
    return _rot("y", plane_rad) @ _rot("x", -elevation_rad) @ _rot("y", axial_rad)


def isb_shoulder_angles(R: np.ndarray) -> tuple[float, float, float]:
    r"""ISB shoulder angles (plane of elevation, elevation, axial rotation) [rad] of a humerus orientation.

    Inverse of :func:`humerus_rotation` with elevation in [0, pi]: with
    :math:`R = R_Y(\phi) R_X(-\theta) R_Y(\psi)`, :math:`\cos\theta = R_{11}`,
    :math:`\phi = \mathrm{atan2}(-R_{01}, -R_{21})`, :math:`\psi = \mathrm{atan2}(-R_{10}, R_{12})` [Wu2005]_.
    At elevation 0 or pi (arm along the trunk) only the sum of plane and axial
    rotation is defined; the plane is then reported as 0.
    """
    R = np.asarray(R, dtype=float)
    if R.shape != (3, 3):
        raise ParameterError(f"isb_shoulder_angles: R must be (3, 3), got shape {R.shape}")
    s = math.hypot(R[0, 1], R[2, 1])
    elevation = math.atan2(s, R[1, 1])
    if s < 1e-12:
        plane = 0.0
        axial = math.atan2(R[0, 2], R[0, 0]) * (1.0 if R[1, 1] > 0 else -1.0)
        return plane, elevation, axial
    plane = math.atan2(-R[0, 1], -R[2, 1])
    axial = math.atan2(-R[1, 0], R[1, 2])
    return plane, elevation, axial


def manipulability(J: np.ndarray) -> float:
    r"""Yoshikawa's manipulability :math:`w = \sqrt{\det(J J^T)}` [Yoshikawa1985]_, the product of the
    singular values of ``J`` (m, n), m <= n (0 at a singular posture)."""
    J = np.atleast_2d(np.asarray(J, dtype=float))
    if J.shape[0] > J.shape[1]:
        raise ParameterError(f"manipulability: J must have no more rows than columns, got shape {J.shape}")
    return float(np.prod(np.linalg.svd(J, compute_uv=False)))


def smallest_singular_value(J: np.ndarray) -> float:
    """Smallest singular value of ``J`` (distance to the nearest rank-deficient matrix, 2-norm)."""
    return float(np.linalg.svd(np.atleast_2d(np.asarray(J, dtype=float)), compute_uv=False)[-1])


@dataclass(frozen=True)
class CoverageParams:
    """The grid and the fixed distal posture of a coverage map (angles in degrees only at the CLI).

    Attributes
    ----------
    plane_rad, elevation_rad : tuple of float
        Cell centres of the ISB plane of elevation and elevation [rad].
    axial_rad : tuple of float
        Axial rotations sampled in each cell [rad].
    distal_rad : tuple of 4 float
        Elbow flexion, pronation, wrist flexion, radial deviation held in every cell [rad]
        (default 90 deg elbow flexion, the rest 0: common practice for shoulder range tests).
    singular_sigma : float
        A cell is marked singular when the smallest singular value of the shoulder's
        angular Jacobian drops below this along its covered range [-] (rad/s per rad/s;
        0.1 common practice).
    max_cuff_offset_m : float
        A posture counts as comfortably followed when no cuff is pulled farther than this off its
        strapping position [m] (0.02 common practice).
    """

    plane_rad: tuple[float, ...]
    elevation_rad: tuple[float, ...]
    axial_rad: tuple[float, ...]
    distal_rad: tuple[float, float, float, float] = (math.pi / 2, 0.0, 0.0, 0.0)
    singular_sigma: float = 0.1
    max_cuff_offset_m: float = 0.02

    def __post_init__(self) -> None:
        for name in ("plane_rad", "elevation_rad", "axial_rad"):
            v = tuple(float(x) for x in getattr(self, name))
            if not v or not all(math.isfinite(x) for x in v):
                raise ParameterError(f"CoverageParams.{name} must be a non-empty sequence of finite angles, got {v}")
            object.__setattr__(self, name, v)
        if any(e <= 0.0 or e >= math.pi for e in self.elevation_rad):
            raise ParameterError(f"CoverageParams.elevation_rad must lie in (0, pi) (the ISB chart is singular at "
                                 f"0 and pi), got {self.elevation_rad}")
        d = tuple(float(x) for x in self.distal_rad)
        if len(d) != 4:
            raise ParameterError(f"CoverageParams.distal_rad must have 4 angles, got {len(d)}")
        object.__setattr__(self, "distal_rad", d)
        if not self.singular_sigma > 0.0:
            raise ParameterError(f"CoverageParams.singular_sigma must be > 0, got {self.singular_sigma}")
        if not self.max_cuff_offset_m > 0.0:
            raise ParameterError(f"CoverageParams.max_cuff_offset_m must be > 0, got {self.max_cuff_offset_m}")

    @classmethod
    def grid_deg(cls, plane_step_deg: float = 15.0, elevation_step_deg: float = 15.0,
                 axial_step_deg: float = 10.0, **kw) -> CoverageParams:
        """Plane of elevation -90..150 deg, elevation from half a step up to 170 deg, axial -90..90 deg."""
        for name, v in (("plane_step_deg", plane_step_deg), ("elevation_step_deg", elevation_step_deg),
                        ("axial_step_deg", axial_step_deg)):
            if not (math.isfinite(v) and 0.5 <= v <= 90.0):
                raise ParameterError(f"CoverageParams.grid_deg: {name} must be in [0.5, 90] deg, got {v}")
        plane = np.arange(-90.0, 150.0 + 1e-9, plane_step_deg)
        elev = np.arange(elevation_step_deg / 2, 170.0 + 1e-9, elevation_step_deg)
        axial = np.arange(-90.0, 90.0 + 1e-9, axial_step_deg)
        return cls(tuple(np.radians(plane)), tuple(np.radians(elev)), tuple(np.radians(axial)), **kw)


@dataclass(frozen=True)
class CoverageCell:
    """One cell (plane of elevation x elevation) of a coverage map.

    ``reachable`` (n_axial,) bool: the robot follows the humerus inside its joint limits at each axial
    rotation of :attr:`CoverageParams.axial_rad`; ``w`` (n_axial,) manipulability of the hand Jacobian
    (6 x n, pinocchio ``LOCAL_WORLD_ALIGNED``; units mixed, m^3 for a 7-joint arm) and ``sigma_min``
    (n_axial,) smallest singular value of the shoulder's 3 x 3 angular Jacobian [-], NaN where not
    reachable; ``cuff_offset_m`` (n_axial,) the largest distance of a cuff from its strapping position [m].
    """

    plane_rad: float
    elevation_rad: float
    reachable: np.ndarray
    w: np.ndarray
    sigma_min: np.ndarray
    cuff_offset_m: np.ndarray

    def axial_range_rad(self, axial_rad: Sequence[float]) -> tuple[float, float] | None:
        """Lowest and highest reachable axial rotation [rad] (None if none)."""
        a = np.asarray(axial_rad)[self.reachable]
        return (float(a.min()), float(a.max())) if a.size else None


@dataclass(frozen=True)
class CoverageMap:
    """Cells in row-major order (elevation outer, plane inner) and the parameters they came from."""

    params: CoverageParams
    cells: tuple[CoverageCell, ...]
    exo_name: str
    girdle: bool
    misalignment_m: tuple[float, float, float]


def human_arm_posture(human: HumanParams, R_isb: np.ndarray, distal_rad: Sequence[float]) -> np.ndarray:
    """Human joint posture [rad] whose humerus has orientation ``R_isb`` relative to the thorax.

    The glenohumeral chart of :mod:`models.human` is :math:`R = R_y(-a) R_x(-b) R_z(c)` in model axes;
    with the girdle on, the clavicle follows the shoulder rhythm (:func:`models.human.girdle_posture`)
    and the humerus keeps the same orientation relative to the thorax.  Human joint limits are not
    applied (the question is what the robot follows).
    """
    C = np.array(_MODEL_TO_ISB)
    R = C.T @ np.asarray(R_isb, dtype=float) @ C  # the chart's angles mean the same motion on either side
    beta = math.asin(max(-1.0, min(1.0, -R[1, 2])))
    alpha = math.atan2(R[0, 2], R[2, 2])
    gamma = math.atan2(R[1, 0], R[1, 1])
    q_arm = np.concatenate([[-alpha, -beta, gamma], np.asarray(distal_rad, dtype=float)])
    return girdle_posture(human, q_arm) if human.girdle else q_arm


def _cuff_specs(exo: ArmModel, human: ArmModel) -> tuple[CuffSpec, ...]:
    return tuple(s for s in DEFAULT_CUFFS if s.exo_site in exo.sites and s.human_site in human.sites)


def coverage_map(exo: ArmModel, human: ArmModel, human_params: HumanParams, params: CoverageParams, *,
                 misalignment_m: Sequence[float] = (0.0, 0.0, 0.0), progress=None) -> CoverageMap:
    r"""Sweep the ISB shoulder grid; in each cell, which axial rotations the robot follows and how well.

    Parameters
    ----------
    exo : ArmModel
        The exoskeleton (3 shoulder joints, then 4 distal joints with the human's axes and signs, as
        :func:`models.coupling.matching_exo_posture` expects; its ``upper_arm`` frame is ``exo_upper_arm``).
    human : ArmModel
        The wearer's arm built from ``human_params`` (placed with the misalignment, if any).
    human_params : HumanParams
        The wearer (its ``girdle`` and ``side`` are used).
    params : CoverageParams
        Grid and distal posture.
    misalignment_m : (3,) [m]
        Recorded with the map (the placement itself is in ``human``).
    progress : callable(done, total), optional
        Called after each cell.

    Notes
    -----
    For each axial rotation the humerus orientation is :func:`humerus_rotation`; the human posture is
    :func:`human_arm_posture`; the robot posture is :func:`models.coupling.matching_exo_posture`, which
    fails when no solution lies in the robot's limits.  The cuffs are strapped at rest (both arms at
    zero, girdle on its rhythm) and the cuff offset is :math:`\max_k \|p_{A,k} - p_{B,k}\|`.
    """
    if not hasattr(exo, "model") or not hasattr(human, "model"):
        raise ParameterError("coverage_map: exo and human must be ArmModel objects")
    specs = _cuff_specs(exo, human)
    q_h0 = human_arm_posture(human_params, np.eye(3), (0.0, 0.0, 0.0, 0.0))
    try:
        cuffs = strap_cuffs(exo, exo.neutral(), human, q_h0, specs)
    except (ParameterError, UnknownNameError):
        cuffs = ()
    de, dh = exo.model.createData(), human.model.createData()
    hand = exo.frame_id(exo.hand_frame)
    upper = exo.frame_id("exo_upper_arm")
    cells = []
    total = len(params.plane_rad) * len(params.elevation_rad)
    n = len(params.axial_rad)
    for elev in params.elevation_rad:
        for plane in params.plane_rad:
            reach = np.zeros(n, dtype=bool)
            w, sig, off = (np.full(n, np.nan) for _ in range(3))
            for k, axial in enumerate(params.axial_rad):
                qh = human_arm_posture(human_params, humerus_rotation(plane, elev, axial), params.distal_rad)
                try:
                    qe = matching_exo_posture(exo, human, qh)
                except ParameterError:
                    continue
                reach[k] = True
                J = pin.computeFrameJacobian(exo.model, de, qe, hand, pin.LOCAL_WORLD_ALIGNED)
                w[k] = manipulability(J)
                Js = pin.computeFrameJacobian(exo.model, de, qe, upper, pin.LOCAL)[3:, :3]
                sig[k] = smallest_singular_value(Js)
                if cuffs:
                    pin.framesForwardKinematics(exo.model, de, qe)
                    pin.framesForwardKinematics(human.model, dh, qh)
                    off[k] = max(float(np.linalg.norm(de.oMf[c.exo_frame_id].translation
                                                      - (dh.oMf[c.human_frame_id] * c.human_offset).translation))
                                 for c in cuffs)
            cells.append(CoverageCell(float(plane), float(elev), reach, w, sig, off))
            if progress is not None:
                progress(len(cells), total)
    return CoverageMap(params, tuple(cells), exo.name, bool(human_params.girdle),
                       tuple(float(x) for x in misalignment_m))


def required_share(cmap: CoverageMap, *, max_cuff_offset_m: float | None = None) -> tuple[float, int]:
    """Share [0..1] of the daily-living region (grid samples with plane, elevation and axial rotation inside
    :data:`ADL_NEEDS_DEG`) that the robot follows, and the number of such samples.

    With ``max_cuff_offset_m``, a sample also needs every cuff within that distance of its strapping
    position.  Returns ``(nan, 0)`` when no grid sample falls in the region.
    """
    lo = {k: math.radians(v[0]) for k, v in ADL_NEEDS_DEG.items()}
    hi = {k: math.radians(v[1]) for k, v in ADL_NEEDS_DEG.items()}
    axial = np.asarray(cmap.params.axial_rad)
    ax_in = (axial >= lo["axial_rotation"] - 1e-12) & (axial <= hi["axial_rotation"] + 1e-12)
    need = got = 0
    for c in cmap.cells:
        if not (lo["plane_of_elevation"] - 1e-12 <= c.plane_rad <= hi["plane_of_elevation"] + 1e-12
                and lo["elevation"] - 1e-12 <= c.elevation_rad <= hi["elevation"] + 1e-12):
            continue
        ok = c.reachable.copy()
        if max_cuff_offset_m is not None:
            ok &= np.nan_to_num(c.cuff_offset_m, nan=0.0) <= max_cuff_offset_m
        need += int(ax_in.sum())
        got += int((ok & ax_in).sum())
    return (got / need if need else float("nan")), need
