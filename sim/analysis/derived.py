"""Columns of a coupled run that follow from the logged ones and the run's own models.

The log of a coupled run stores each cuff's wrench on the human,
``cuff_wrench_human`` = :math:`w_B = [f_B; \\tau_B]` in the human-side cuff
frame B (:func:`models.cuffs.cuff_wrench`).  Two more columns follow from it
and the kinematics exactly, so they are not stored (they were in logs before
format version 2 of :mod:`sim.loop.runlog`):

* ``cuff_wrench_exo`` (n, n_cuffs, 6): the wrench on the robot in its cuff
  frame A, equal and opposite,

  .. math:: w_A = -{}^A X_B^{*}\\, w_B, \\qquad
            f_A = -R f_B, \\quad \\tau_A = -(R \\tau_B + p \\times R f_B)

  with :math:`{}^A M_B = ({}^o M_A)^{-1}\\, {}^o M_B = (R, p)` and
  :math:`{}^A X_B^{*}` its action on wrenches (Featherstone, *Rigid Body
  Dynamics Algorithms*, 2008, ch. 2), the law of
  :func:`models.cuffs.cuff_wrench` and of :meth:`sim.physics.plant.CoupledPlant.update_cuffs`;
* ``cuff_force_human_world`` (n, n_cuffs, 3): the force on the human in world
  axes, :math:`f_o = R_{oB}\\, f_B`.

:math:`{}^o M_A` is the robot cuff frame at ``q_exo`` on ``exo.urdf``;
:math:`{}^o M_B = {}^o M_{i} \\, {}^{i} M_{site} \\, {}^{site} M_B` the human cuff
frame at ``q_human`` on ``human.urdf``: the placement of the cuff's human
frame in its joint, times the strap offset ``meta["models"]["cuff_human_offsets"]``
(:attr:`models.coupling.Cuff.human_offset`, a 4x4 homogeneous matrix per cuff).

Forward kinematics is evaluated for all ticks at once with numpy from the
pinocchio models of the run's URDFs: per joint,
:math:`{}^o M_i = {}^o M_{\\lambda(i)}\\, {}^{\\lambda(i)} M_{i,0}\\, \\exp(\\hat a_i q_i)`
with the joint placement of the model and, for a revolute joint of unit axis
a, the Rodrigues rotation :math:`\\cos q\\, I + \\sin q\\, [a]_\\times + (1 - \\cos q)\\, a a^T`
(Featherstone 2008, ch. 4; Murray, Li & Sastry, *A Mathematical
Introduction to Robotic Manipulation*, 1994, ch. 2: the exponential of a twist).  A model with other
joint types falls back to ``pinocchio.forwardKinematics`` tick by tick.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from types import MappingProxyType

import numpy as np
import pinocchio as pin

from sim.loop.runlog import Run, RunLogError

__all__ = ["DERIVED_CUFF_COLUMNS", "cuff_columns", "joint_placements", "human_cuff_twists"]

#: The columns :func:`cuff_columns` returns.
DERIVED_CUFF_COLUMNS = ("cuff_wrench_exo", "cuff_force_human_world")

_BLOCK_TICKS = 4096  # ticks per block of the vectorised kinematics
_UNIT_AXES = MappingProxyType(
    {"JointModelRX": (1.0, 0.0, 0.0), "JointModelRY": (0.0, 1.0, 0.0), "JointModelRZ": (0.0, 0.0, 1.0)})


def _revolute_axis(joint) -> np.ndarray | None:
    """Unit axis of a revolute joint model, or None for another joint type."""
    name = joint.shortname()
    if name in _UNIT_AXES:
        return np.array(_UNIT_AXES[name])
    if name == "JointModelRevoluteUnaligned":
        return np.array(joint.extract().axis, dtype=float)
    return None


def _rotated(R0: np.ndarray, axis: np.ndarray, angle_rad: np.ndarray) -> np.ndarray:
    """(n, 3, 3) products :math:`R_0 \\exp([a]_\\times q)` for the angles ``angle_rad`` (n,) about the unit ``axis``.

    With Rodrigues' formula, :math:`R_0 (\\cos q\\, I + \\sin q\\, [a]_\\times + (1 - \\cos q)\\, a a^T)`:
    three constant matrices weighted per tick.
    """
    a = np.asarray(axis, dtype=float)
    skew = np.array([[0.0, -a[2], a[1]], [a[2], 0.0, -a[0]], [-a[1], a[0], 0.0]])
    c, s = np.cos(angle_rad)[:, None, None], np.sin(angle_rad)[:, None, None]
    return c * R0 + s * (R0 @ skew) + (1.0 - c) * np.outer(R0 @ a, a)


def joint_placements(model, q: np.ndarray, joints: Sequence[int]) -> tuple[np.ndarray, np.ndarray]:
    """World placements of the given joints at every posture: rotations (n, k, 3, 3), translations (n, k, 3) [m].

    Vectorised over the n rows of ``q`` (n, nq) [rad] for models of revolute
    joints (module docstring); any other model goes through
    ``pinocchio.forwardKinematics`` row by row.
    """
    q = np.asarray(q, dtype=float)
    n = len(q)
    axes = [_revolute_axis(model.joints[i]) for i in range(1, model.njoints)]
    if any(a is None for a in axes) or model.nq != model.njoints - 1:
        return _joint_placements_loop(model, q, joints)
    R = np.empty((model.njoints, n, 3, 3))
    p = np.empty((model.njoints, n, 3))
    R[0], p[0] = np.eye(3), 0.0
    for i in range(1, model.njoints):
        parent, M0 = model.parents[i], model.jointPlacements[i]
        R_local = _rotated(M0.rotation, axes[i - 1], q[:, model.idx_qs[i]])  # parent<-joint: M0 exp(a q)
        R[i] = R[parent] @ R_local
        p[i] = p[parent] + R[parent] @ M0.translation  # (n, 3, 3) @ (3,): (n, 3)
    js = list(joints)
    return np.ascontiguousarray(R[js].swapaxes(0, 1)), np.ascontiguousarray(p[js].swapaxes(0, 1))


def _joint_placements_loop(model, q: np.ndarray, joints: Sequence[int]) -> tuple[np.ndarray, np.ndarray]:
    """:func:`joint_placements` with ``pinocchio.forwardKinematics``, one posture at a time."""
    data = model.createData()
    n, k = len(q), len(joints)
    R, p = np.empty((n, k, 3, 3)), np.empty((n, k, 3))
    for t in range(n):
        pin.forwardKinematics(model, data, q[t])
        for c, j in enumerate(joints):
            M = data.oMi[j]
            R[t, c], p[t, c] = M.rotation, M.translation
    return R, p


def _frames(model, names: Sequence[str], where: str) -> tuple[list[int], list[pin.SE3]]:
    """Parent joints and placements in them of the named frames."""
    joints, places = [], []
    for name in names:
        if not model.existFrame(name):
            raise RunLogError(f"{where}: the model has no frame {name!r}")
        f = model.frames[model.getFrameId(name)]
        joints.append(f.parentJoint)
        places.append(f.placement)
    return joints, places


def _offset(value, where: str) -> pin.SE3:
    M = np.asarray(value, dtype=float)
    if M.shape != (4, 4) or not np.all(np.isfinite(M)) or not np.allclose(M[3], [0.0, 0.0, 0.0, 1.0]):
        raise RunLogError(f"{where} must be a 4x4 homogeneous matrix, got {value!r}")
    R = M[:3, :3]
    if not np.allclose(R.T @ R, np.eye(3), atol=1e-9) or np.linalg.det(R) < 0:
        raise RunLogError(f"{where}: the upper-left 3x3 block is not a rotation matrix")
    return pin.SE3(R.copy(), M[:3, 3].copy())


def _cuff_placements(model, q: np.ndarray, joints: Sequence[int], places: Sequence[pin.SE3]
                     ) -> tuple[np.ndarray, np.ndarray]:
    """World placements (n, k, 3, 3), (n, k, 3) of frames fixed in the given joints: oMi * iMf."""
    Rj, pj = joint_placements(model, q, joints)
    Rf = np.array([P.rotation for P in places]).reshape(len(places), 3, 3)
    pf = np.array([P.translation for P in places]).reshape(len(places), 3)
    return Rj @ Rf, pj + (Rj @ pf[:, :, None])[..., 0]


def cuff_columns(run: Run) -> dict[str, np.ndarray]:
    """``cuff_wrench_exo`` [N, N m] and ``cuff_force_human_world`` [N] of a coupled run (module docstring).

    Every reader of a run's cuff wrenches on the robot or world cuff forces
    takes them from here: ``arrays = run.arrays | cuff_columns(run)``.

    Parameters
    ----------
    run : sim.loop.runlog.Run
        A run read by :func:`sim.loop.runlog.load_run`.

    Returns
    -------
    dict
        The two columns, shapes (n, n_cuffs, 6) and (n, n_cuffs, 3): the stored
        ones when the log holds them (runs written before log format 2), else
        computed from ``cuff_wrench_human``, ``q_exo`` and ``q_human`` with the
        run's ``exo.urdf`` and ``human.urdf``, once per ``Run`` (kept, read-only,
        in ``run.derived`` for the next call).  Empty for a run without cuffs
        (no ``cuff_wrench_human`` column: a human-alone or robot-alone run).

    Raises
    ------
    RunLogError
        Naming the run folder, if the columns must be computed and a model
        file, a frame or the strap offsets in ``meta.json`` are missing.
    """
    arrays = run.arrays
    if all(name in arrays for name in DERIVED_CUFF_COLUMNS):
        return {name: arrays[name] for name in DERIVED_CUFF_COLUMNS}
    if "cuff_wrench_human" not in arrays:
        return {}
    if all(name in run.derived for name in DERIVED_CUFF_COLUMNS):  # computed for this Run already
        return {name: run.derived[name] for name in DERIVED_CUFF_COLUMNS}
    where = f"run folder {str(run.folder)!r}"
    if run.folder is None:
        raise RunLogError("the run was not read from a folder (Run.folder is None): its models are unknown, so "
                          f"{list(DERIVED_CUFF_COLUMNS)} cannot be computed")
    meta = run.meta
    models_meta = meta.get("models")
    if not isinstance(models_meta, Mapping) or "cuff_human_offsets" not in models_meta:
        raise RunLogError(f"{where}: meta.json has no models.cuff_human_offsets, needed to compute "
                          f"{list(DERIVED_CUFF_COLUMNS)}")
    cuffs = list(meta["cuffs"])
    exo_model = _model(run, models_meta.get("exo_urdf", "exo.urdf"))
    human_model = _model(run, models_meta.get("human_urdf", "human.urdf"))
    frames = models_meta["cuff_frames"]
    offsets = models_meta["cuff_human_offsets"]
    missing = [c for c in cuffs if c not in frames or c not in offsets]
    if missing:
        raise RunLogError(f"{where}: meta.json has no cuff frames or strap offset for the cuffs {missing}")
    je, pe = _frames(exo_model, [frames[c][0] for c in cuffs], f"{where}, exo model")
    jh, ph = _frames(human_model, [frames[c][1] for c in cuffs], f"{where}, human model")
    ph = [P * _offset(offsets[c], f"{where}: meta.json models.cuff_human_offsets[{c!r}]") for P, c in zip(ph, cuffs)]
    w_h = np.asarray(arrays["cuff_wrench_human"], dtype=float)
    q_e, q_h = np.asarray(arrays["q_exo"], dtype=float), np.asarray(arrays["q_human"], dtype=float)
    w_a, f_o = np.empty_like(w_h), np.empty(w_h.shape[:-1] + (3,))
    for k in range(0, len(w_h), _BLOCK_TICKS):  # in blocks: the temporaries stay small
        ticks = slice(k, k + _BLOCK_TICKS)
        Ra, pa = _cuff_placements(exo_model, q_e[ticks], je, pe)
        Rb, pb = _cuff_placements(human_model, q_h[ticks], jh, ph)
        f_b, tau_b = w_h[ticks, :, :3, None], w_h[ticks, :, 3:, None]
        RaT = np.swapaxes(Ra, -1, -2)
        R = RaT @ Rb  # aMb = oMa^-1 oMb
        p = (RaT @ (pb - pa)[..., None])[..., 0]
        f = (R @ f_b)[..., 0]
        w_a[ticks, :, :3] = -f
        w_a[ticks, :, 3:] = -((R @ tau_b)[..., 0] + np.cross(p, f))
        f_o[ticks] = (Rb @ f_b)[..., 0]
    for a in (w_a, f_o):
        a.flags.writeable = False  # shared by every reader of this Run
    run.derived.update(cuff_wrench_exo=w_a, cuff_force_human_world=f_o)
    return {"cuff_wrench_exo": w_a, "cuff_force_human_world": f_o}


def human_cuff_twists(run: Run) -> np.ndarray | None:
    r"""(n, n_cuffs, 6) spatial velocity ``[v; omega]`` [m/s, rad/s] of each human-side cuff frame B, in B.

    The frame of ``cuff_wrench_human``, so that :math:`w_B \cdot V_B` is the power each cuff delivers to the
    wearer (:func:`sim.analysis.metrics.interaction_power_W`).  Per tick, pinocchio's
    ``forwardKinematics(q_human, dq_human)`` and ``getFrameVelocity`` (LOCAL) of the cuff's site frame on the
    run's ``human.urdf``, moved to B through the strap offset :math:`{}^{site}M_B`
    (:math:`V_B = {}^{site}M_B^{-1} \cdot V_{site}`, Featherstone 2008, ch. 2).  None for a run without cuffs.
    Kept in ``run.derived`` for the next call.
    """
    arrays = run.arrays
    if "cuff_wrench_human" not in arrays or "dq_human" not in arrays:
        return None
    if "human_cuff_twist" in run.derived:
        return run.derived["human_cuff_twist"]
    where = f"run folder {str(run.folder)!r}"
    meta = run.meta
    models_meta = meta.get("models")
    if run.folder is None or not isinstance(models_meta, Mapping) or "cuff_human_offsets" not in models_meta:
        raise RunLogError(f"{where}: the human cuff twists need the run's human.urdf and meta.json's "
                          "models.cuff_human_offsets")
    cuffs = list(meta["cuffs"])
    model = _model(run, models_meta.get("human_urdf", "human.urdf"))
    data = model.createData()
    fids = []
    for c in cuffs:
        name = models_meta["cuff_frames"][c][1]
        if not model.existFrame(name):
            raise RunLogError(f"{where}, human model: no frame {name!r}")
        fids.append(model.getFrameId(name))
    offsets = [_offset(models_meta["cuff_human_offsets"][c], f"{where}: meta.json models.cuff_human_offsets[{c!r}]")
               for c in cuffs]
    q, dq = np.asarray(arrays["q_human"], dtype=float), np.asarray(arrays["dq_human"], dtype=float)
    out = np.empty((len(q), len(cuffs), 6))
    local = pin.ReferenceFrame.LOCAL
    for k in range(len(q)):
        pin.forwardKinematics(model, data, q[k], dq[k])
        for c, (fid, off) in enumerate(zip(fids, offsets)):
            out[k, c] = off.actInv(pin.getFrameVelocity(model, data, fid, local)).vector
    out.flags.writeable = False
    run.derived["human_cuff_twist"] = out
    return out


def _model(run: Run, name: str):
    path = run.folder / name
    try:
        return pin.buildModelFromXML(path.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, RuntimeError, ValueError) as e:
        raise RunLogError(f"cannot read the model {str(path)!r} of the run: {e}") from e
