"""Join an exoskeleton and a human arm: fit, register and strap the cuffs.

* :func:`fit_exo` sets the exoskeleton's adjustable lengths to a wearer.
* :class:`Registration` places the human thorax frame (whose origin is the
  glenohumeral centre at rest) at the exoskeleton's shoulder centre, plus an
  optional misalignment offset of the human joint centres.
* :func:`strap_cuffs` closes each cuff where it lands: the human-side cuff
  frame is the robot-side frame at the strapping posture, expressed on the
  human segment, so the pair starts attached without preload, aligned or not.
* :func:`assemble` does all three and returns an :class:`Assembly`.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np
import pinocchio as pin

from .arm import ArmModel
from .checks import vector
from .cuffs import HAND_GRIP, CuffParams
from .errors import ParameterError, UnknownNameError
from .exo import ExoParams, build_exo
from .human import HumanParams, build_human

__all__ = [
    "CuffSpec", "Cuff", "DEFAULT_CUFFS", "Registration", "Assembly", "fit_exo", "strap_cuffs", "assemble",
    "matching_exo_posture", "matching_exo_velocity",
]


@dataclass(frozen=True)
class CuffSpec:
    """Which robot site joins which human site, and the interface law."""

    name: str
    exo_site: str
    human_site: str
    params: CuffParams = field(default_factory=CuffParams)

    def __post_init__(self) -> None:
        if not self.name:
            raise ParameterError("CuffSpec.name must be non-empty")
        if not isinstance(self.params, CuffParams):
            raise ParameterError(f"CuffSpec({self.name!r}).params must be CuffParams, got {self.params!r}")


#: Upper-arm cuff, forearm cuff and hand grip (common practice).
DEFAULT_CUFFS: tuple[CuffSpec, ...] = (
    CuffSpec("upper_arm", "upper_arm", "upper_arm"),
    CuffSpec("forearm", "forearm", "forearm"),
    CuffSpec("hand", "hand", "hand", HAND_GRIP),
)


@dataclass(frozen=True, eq=False)
class Cuff:
    """A strapped cuff: frame ids on both models and the strap placement.

    ``human_offset`` is the placement of the cuff frame B in the human site
    frame; the world placement of B is ``oM_site * human_offset``.
    """

    spec: CuffSpec
    exo_frame_id: int
    human_frame_id: int
    human_offset: pin.SE3

    @property
    def name(self) -> str:
        """Cuff name."""
        return self.spec.name


@dataclass(frozen=True)
class Registration:
    """Placement of the human relative to the exoskeleton (base frame, SI units).

    ``misalignment_m`` shifts the human glenohumeral centre (and with it every
    distal joint centre) relative to the robot's shoulder centre.
    """

    misalignment_m: tuple[float, float, float] = (0.0, 0.0, 0.0)

    def __post_init__(self) -> None:
        v = vector("Registration", "misalignment_m", self.misalignment_m, 3)
        if np.linalg.norm(v) > 0.1:
            raise ParameterError(
                f"Registration.misalignment_m must be within 0.1 m of the shoulder centre, got {v}"
            )
        object.__setattr__(self, "misalignment_m", v)

    def human_base_xyz_m(self) -> tuple[float, float, float]:
        """Thorax-frame origin (rest glenohumeral centre) in the robot base frame [m]."""
        return self.misalignment_m


def fit_exo(human: HumanParams, **overrides) -> ExoParams:
    """Exoskeleton parameters with upper arm, forearm and grip lengths set to the wearer's."""
    overrides.setdefault("side", human.side)
    return ExoParams.fitted_to(
        human.length_m("upper_arm"), human.length_m("forearm"), human.grip_distance_m, **overrides
    )


def strap_cuffs(
    exo: ArmModel,
    q_exo: np.ndarray,
    human: ArmModel,
    q_human: np.ndarray,
    specs: Sequence[CuffSpec] = DEFAULT_CUFFS,
) -> tuple[Cuff, ...]:
    """Close the cuffs at the given postures so that every pose error is zero.

    :math:`{}^{site}M_B = ({}^oM_{site})^{-1}\\, {}^oM_A` evaluated at
    ``q_exo``, ``q_human`` [rad].
    """
    names = [s.name for s in specs]
    if len(set(names)) != len(names):
        raise ParameterError(f"cuff names must be unique, got {names}")
    de, dh = exo.model.createData(), human.model.createData()
    pin.framesForwardKinematics(exo.model, de, _posture(exo, q_exo, "q_exo"))
    pin.framesForwardKinematics(human.model, dh, _posture(human, q_human, "q_human"))
    cuffs = []
    for s in specs:
        try:
            fa = exo.frame_id(exo.site_frame(s.exo_site))
            fb = human.frame_id(human.site_frame(s.human_site))
        except UnknownNameError as e:
            raise UnknownNameError(f"cuff {s.name!r}: {e}") from e
        offset = dh.oMf[fb].actInv(de.oMf[fa])
        cuffs.append(Cuff(s, fa, fb, offset))
    return tuple(cuffs)


def matching_exo_posture(
    exo: ArmModel,
    human: ArmModel,
    q_human: np.ndarray,
    *,
    tol_rad: float = 1e-12,
    max_iter: int = 50,
) -> np.ndarray:
    r"""Exoskeleton posture that lines its segments up with the wearer's.

    Joints 4 to 7 of both arms share axes and signs, so they are copied from
    the human's (the last 4 entries of ``q_human``, girdle or not).  The three
    shoulder angles are solved so that the robot's upper-arm frame has the
    orientation of the human's: Newton iterations on
    :math:`\log_3(R(q)^T R^*)` with the frame's local angular Jacobian
    (pinocchio ``log3``, ``computeFrameJacobian``), started from a grid of
    shoulder postures.  A spherical shoulder has two solutions in general;
    the one inside the joint limits with the largest margin to them is
    returned.  Raises :class:`ParameterError` if no solution lies inside the
    robot's limits.
    """
    qh = np.asarray(q_human, dtype=float)
    dh = human.model.createData()
    pin.framesForwardKinematics(human.model, dh, qh)
    target = dh.oMf[human.frame_id("human_upper_arm")].rotation
    model, data = exo.model, exo.model.createData()
    fid = exo.frame_id("exo_upper_arm")
    lo, hi = exo.position_limits()
    best, best_margin = None, -np.inf
    for seed in _SHOULDER_SEEDS:
        q = exo.neutral()
        q[:3] = seed
        q[3:] = qh[-(model.nq - 3):]
        for _ in range(max_iter):
            pin.framesForwardKinematics(model, data, q)
            err = pin.log3(data.oMf[fid].rotation.T @ target)
            if np.linalg.norm(err) < tol_rad:
                break
            J = pin.computeFrameJacobian(model, data, q, fid, pin.LOCAL)[3:, :3]
            if np.linalg.svd(J, compute_uv=False)[-1] < 1e-9:
                break
            q[:3] += np.linalg.lstsq(J, err, rcond=None)[0]
            q[:3] = (q[:3] + np.pi) % (2 * np.pi) - np.pi
        else:
            continue
        if np.linalg.norm(err) >= 1e-9:
            continue
        margin = float(np.min(np.minimum(q - lo, hi - q) / (hi - lo)))
        if margin > best_margin:
            best, best_margin = q.copy(), margin
    if best is None:
        raise ParameterError("matching_exo_posture: no shoulder posture lines the robot up with the wearer")
    return _posture(exo, best, "q_exo")  # raises, naming the joint, when even the best is outside the limits


#: Start points of the shoulder search [rad] (a coarse grid over the joint ranges).
_SHOULDER_SEEDS = tuple(
    np.array([a, b, c]) for a in (-0.5, 0.5, 1.5, 2.5) for b in (-0.4, 0.4, 1.0) for c in (-1.0, 0.0, 1.0)
)


def matching_exo_velocity(
    exo: ArmModel, human: ArmModel, q_exo: np.ndarray, q_human: np.ndarray, v_human: np.ndarray
) -> np.ndarray:
    r"""Robot joint velocities that move its segments with the wearer's.

    Joints 4 to 7 copy the human's; the shoulder rates solve
    :math:`J_\omega^{exo} \dot q_{1:3} = \omega_{upper\,arm}^{human}` (angular
    frame Jacobians in the world-aligned frame, pinocchio
    ``computeFrameJacobian``).  With aligned joint centres the cuffs then start
    with no relative motion.
    """
    me, mh = exo.model, human.model
    de, dh = me.createData(), mh.createData()
    Jh = pin.computeFrameJacobian(mh, dh, np.asarray(q_human, float), human.frame_id("human_upper_arm"),
                                  pin.LOCAL_WORLD_ALIGNED)[3:]
    Je = pin.computeFrameJacobian(me, de, np.asarray(q_exo, float), exo.frame_id("exo_upper_arm"),
                                  pin.LOCAL_WORLD_ALIGNED)[3:, :3]
    vh = np.asarray(v_human, dtype=float)
    ve = np.zeros(me.nv)
    ve[:3] = np.linalg.solve(Je, Jh @ vh)
    ve[3:] = vh[-4:]
    return ve


def _posture(arm: ArmModel, q, name: str) -> np.ndarray:
    q = np.asarray(vector("strap_cuffs", name, q, arm.nq))
    lo, hi = arm.position_limits()
    bad = np.flatnonzero((q < lo - 1e-12) | (q > hi + 1e-12))
    if bad.size:
        i = int(bad[0])
        raise ParameterError(
            f"strap_cuffs: {name}[{i}] ({arm.joint_names[i]}) = {q[i]!r} rad is outside "
            f"[{lo[i]!r}, {hi[i]!r}]"
        )
    return q


@dataclass(frozen=True, eq=False)
class Assembly:
    """An exoskeleton, a registered human arm and the cuffs between them."""

    exo_params: ExoParams
    human_params: HumanParams
    registration: Registration
    exo: ArmModel
    human: ArmModel
    cuffs: tuple[Cuff, ...]
    q_exo0: np.ndarray
    q_human0: np.ndarray


def assemble(
    human: HumanParams | str = "m50",
    exo: ExoParams | None = None,
    registration: Registration | None = None,
    cuffs: Sequence[CuffSpec] = DEFAULT_CUFFS,
    q_exo0: np.ndarray | None = None,
    q_human0: np.ndarray | None = None,
) -> Assembly:
    """Build both models, register the human and strap the cuffs.

    ``exo=None`` fits the default exoskeleton to the wearer.  Postures default
    to zero (arm hanging); with the girdle on, ``q_human0`` has 9 entries.
    Given ``q_human0`` alone, the robot starts at :func:`matching_exo_posture`.
    """
    hp = HumanParams(human) if isinstance(human, str) else human
    ep = fit_exo(hp) if exo is None else exo
    reg = Registration() if registration is None else registration
    if ep.side != hp.side:
        raise ParameterError(f"the exoskeleton is for the {ep.side} arm but the human arm is the {hp.side} one")
    exo_arm = build_exo(ep)
    human_arm = build_human(hp, base_xyz_m=reg.human_base_xyz_m())
    qh = human_arm.neutral() if q_human0 is None else np.asarray(q_human0, dtype=float)
    if q_exo0 is not None:
        qe = np.asarray(q_exo0, dtype=float)
    elif q_human0 is None:
        qe = exo_arm.neutral()
    else:
        qe = matching_exo_posture(exo_arm, human_arm, qh)
    straps = strap_cuffs(exo_arm, qe, human_arm, qh, cuffs)
    return Assembly(ep, hp, reg, exo_arm, human_arm, straps, qe.copy(), qh.copy())
