"""Load a serial arm from URDF text into pinocchio, after checking that it is physical.

:class:`ArmModel` is what the rest of the project consumes, for the built-in
exoskeleton and human arm and for a user's own URDF alike: a pinocchio
``Model`` plus the names of the actuated joints, the cuff sites and the hand
point.  :func:`load_arm` checks the file first, so that a bad file fails with
a message that names the element and the value instead of a crash deep in a
dynamics algorithm.
"""

from __future__ import annotations

import math
import xml.etree.ElementTree as ET
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from xml.parsers import expat

import numpy as np
import pinocchio as pin

from .errors import ModelError, ParameterError, UnknownNameError
from .inertia import check_rotational_inertia

__all__ = [
    "ArmModel", "load_arm", "check_urdf", "read_urdf_file", "MAX_URDF_BYTES", "MAX_URDF_LINKS",
    "MAX_LINK_MASS_KG", "MAX_INERTIA_KG_M2", "MAX_OFFSET_M",
]

#: Largest URDF file read [bytes]: a 200-link arm is about 100 kB of text (common practice bound, not a standard).
MAX_URDF_BYTES = 10_000_000
#: Most ``<link>`` elements in a URDF.  pinocchio's URDF reader recurses along the tree: a 4,000-link chain
#: crashes the process (segmentation fault) and a 500-link chain takes ~10 s to build; 200 links is far above
#: any arm (the built-in exoskeleton has 12) and builds in well under a second.
MAX_URDF_LINKS = 200
#: Largest mass of one link [kg] (an upper-limb exoskeleton link weighs a few kg; common practice bound).
MAX_LINK_MASS_KG = 1000.0
#: Largest element of a link's rotational inertia [kg m^2] (common practice bound).
MAX_INERTIA_KG_M2 = 1000.0
#: Largest coordinate of a joint origin or a centre of mass [m] (common practice bound).
MAX_OFFSET_M = 10.0


@dataclass(frozen=True, eq=False)
class ArmModel:
    """A fixed-base serial arm as pinocchio sees it.

    Attributes
    ----------
    name : str
        Robot name from the URDF.
    urdf : str
        The URDF text the model was built from.
    model : pinocchio.Model
        Kinematics and dynamics; ``model.armature`` [kg m^2], ``model.damping``
        [N m s/rad], ``model.friction`` [N m], ``model.effortLimit`` [N m],
        ``model.velocityLimit`` [rad/s] and the position limits [rad] are set.
    joint_names : tuple of str
        The actuated joints, in the order of ``q``.
    sites : mapping str -> str
        Cuff site role (e.g. ``"upper_arm"``) to frame name.
    hand_frame : str
        Frame of the hand point.
    """

    name: str
    urdf: str
    model: pin.Model
    joint_names: tuple[str, ...]
    sites: Mapping[str, str] = field(default_factory=dict)
    hand_frame: str = ""

    @property
    def nq(self) -> int:
        """Number of configuration variables (= number of revolute joints)."""
        return int(self.model.nq)

    @property
    def nv(self) -> int:
        """Number of velocity variables."""
        return int(self.model.nv)

    def frame_id(self, name: str) -> int:
        """Index of frame ``name``; an unknown name lists the frames there are."""
        if not self.model.existFrame(name):
            links = [f.name for f in self.model.frames if f.type == pin.FrameType.BODY]
            raise UnknownNameError(f"{self.name}: no frame named {name!r}; the links are " + ", ".join(links))
        return int(self.model.getFrameId(name))

    def site_frame(self, role: str) -> str:
        """Frame name of cuff site ``role``."""
        try:
            return self.sites[role]
        except KeyError as e:
            raise UnknownNameError(
                f"{self.name}: no cuff site {role!r}; sites are {sorted(self.sites)}"
            ) from e

    def neutral(self) -> np.ndarray:
        """(nq,) the zero posture [rad] (every built-in arm hangs at the side there)."""
        return pin.neutral(self.model)

    def position_limits(self) -> tuple[np.ndarray, np.ndarray]:
        """Lower and upper joint limits, (nq,) each [rad]."""
        return self.model.lowerPositionLimit.copy(), self.model.upperPositionLimit.copy()


def read_urdf_file(path: str | Path) -> str:
    """Read a URDF file as text, turning an unreadable path into a :class:`ModelError`."""
    p = Path(path)
    try:
        size = p.stat().st_size
        if size > MAX_URDF_BYTES:
            raise ModelError(f"URDF file {str(p)!r} is {size} bytes; at most {MAX_URDF_BYTES} bytes are read")
        return p.read_text(encoding="utf-8")
    except OSError as e:
        raise ModelError(f"cannot read URDF file {str(p)!r}: {e.strerror or e}") from e
    except UnicodeDecodeError as e:
        raise ModelError(f"URDF file {str(p)!r} is not UTF-8 text: {e}") from e


def _float_attr(el: ET.Element, attr: str, where: str, default: float | None = None) -> float:
    raw = el.get(attr)
    if raw is None:
        if default is None:
            raise ModelError(f"{where}: missing attribute {attr!r}")
        return default
    try:
        x = float(raw)
    except ValueError as e:
        raise ModelError(f"{where}: {attr}={raw!r} is not a number") from e
    if not math.isfinite(x):
        raise ModelError(f"{where}: {attr}={raw!r} is not finite")
    return x


def _vec_attr(el: ET.Element | None, attr: str, where: str, default: str, bound: float | None = None) -> np.ndarray:
    raw = default if el is None or el.get(attr) is None else el.get(attr)
    try:
        v = np.array([float(t) for t in raw.split()])
    except ValueError as e:
        raise ModelError(f"{where}: {attr}={raw!r} is not a list of numbers") from e
    if v.shape != (3,) or not np.all(np.isfinite(v)):
        raise ModelError(f"{where}: {attr}={raw!r} must be 3 finite numbers")
    if bound is not None and np.max(np.abs(v)) > bound:
        raise ModelError(f"{where}: {attr}={raw!r} must lie within +-{bound:g} m")
    return v


def _refuse_doctype(text: str, source: str) -> None:
    """Refuse a DOCTYPE (and with it every entity declaration) before the text is parsed.

    Python's XML parser expands internal entities but pinocchio's URDF reader does not (it reads ``&I;`` as
    no number, so an inertia given through an entity becomes zero): the model built would differ from the
    file that was checked.  URDF has no use for a DTD, so none is accepted.
    """
    scan = expat.ParserCreate()

    def doctype(name, *_):
        raise ModelError(f"{source}: a <!DOCTYPE {name} ...> (DTD or entity declaration) is not accepted in URDF: "
                         "pinocchio's reader does not expand entities; write the values out")

    scan.StartDoctypeDeclHandler = doctype
    try:
        scan.Parse(text, True)
    except expat.ExpatError:
        pass  # malformed XML: reported by the parse that follows, with its position


def check_urdf(text: str, source: str = "<urdf>") -> ET.Element:
    """Parse URDF text and check every inertial and every joint limit.

    Raises :class:`ModelError` naming the element and the value for: malformed
    XML, a root that is not ``<robot>``, a non-positive or non-finite mass, an
    inertia that is not positive definite or breaks the triangle inequality, a
    joint that refers to a missing link, a zero axis, and inconsistent limits
    (``lower > upper``, ``effort <= 0``, ``velocity <= 0``).

    Also refused, before anything is built: text longer than :data:`MAX_URDF_BYTES`, a ``<!DOCTYPE>``
    (entities, which pinocchio's reader does not expand), more than :data:`MAX_URDF_LINKS` links (a deep
    chain crashes pinocchio's recursive reader), a link heavier than :data:`MAX_LINK_MASS_KG`, an inertia
    element above :data:`MAX_INERTIA_KG_M2` and an origin or centre of mass farther than
    :data:`MAX_OFFSET_M` along an axis.

    Returns the parsed ``<robot>`` element.
    """
    if len(text) > MAX_URDF_BYTES:
        raise ModelError(f"{source}: URDF text of {len(text)} characters; at most {MAX_URDF_BYTES} are read")
    _refuse_doctype(text, source)
    try:
        root = ET.fromstring(text)
    except ET.ParseError as e:
        raise ModelError(f"{source}: malformed URDF XML ({e})") from e
    if root.tag != "robot":
        raise ModelError(f"{source}: root element must be <robot>, got <{root.tag}>")
    n_links, n_joints = len(root.findall("link")), len(root.findall("joint"))
    if n_links > MAX_URDF_LINKS or n_joints > MAX_URDF_LINKS:
        raise ModelError(f"{source}: {n_links} links and {n_joints} joints; at most {MAX_URDF_LINKS} of each are "
                         "accepted (a much larger tree crashes the URDF reader)")
    links = {}
    for link in root.findall("link"):
        name = link.get("name")
        if not name:
            raise ModelError(f"{source}: a <link> has no name")
        if name in links:
            raise ModelError(f"{source}: link {name!r} is defined twice")
        links[name] = link
        ine = link.find("inertial")
        if ine is None:
            continue
        where = f"{source}: link {name!r}"
        _vec_attr(ine.find("origin"), "xyz", where + " <inertial><origin>", "0 0 0", MAX_OFFSET_M)
        _vec_attr(ine.find("origin"), "rpy", where + " <inertial><origin>", "0 0 0")
        mass_el = ine.find("mass")
        if mass_el is None:
            raise ModelError(f"{where}: <inertial> without <mass>")
        m = _float_attr(mass_el, "value", where + " <mass>")
        if m <= 0.0:
            raise ModelError(f"{where}: mass must be > 0 kg, got {m!r}")
        if m > MAX_LINK_MASS_KG:
            raise ModelError(f"{where}: mass must be at most {MAX_LINK_MASS_KG:g} kg, got {m!r}")
        inertia_el = ine.find("inertia")
        if inertia_el is None:
            raise ModelError(f"{where}: <inertial> without <inertia>")
        w = where + " <inertia>"
        c = {k: _float_attr(inertia_el, k, w) for k in ("ixx", "ixy", "ixz", "iyy", "iyz", "izz")}
        big = [k for k, x in c.items() if abs(x) > MAX_INERTIA_KG_M2]
        if big:
            raise ModelError(f"{w}: {big[0]}={c[big[0]]!r} must be at most {MAX_INERTIA_KG_M2:g} kg m^2 in size")
        I = np.array(
            [[c["ixx"], c["ixy"], c["ixz"]], [c["ixy"], c["iyy"], c["iyz"]], [c["ixz"], c["iyz"], c["izz"]]]
        )
        try:
            check_rotational_inertia(where, I)
        except ParameterError as e:
            raise ModelError(str(e)) from e
    joints = set()
    for j in root.findall("joint"):
        name = j.get("name")
        where = f"{source}: joint {name!r}"
        if not name:
            raise ModelError(f"{source}: a <joint> has no name")
        if name in joints:
            raise ModelError(f"{source}: joint {name!r} is defined twice")
        joints.add(name)
        kind = j.get("type")
        if kind not in {"revolute", "continuous", "prismatic", "fixed", "floating", "planar"}:
            raise ModelError(f"{where}: unknown joint type {kind!r}")
        for end in ("parent", "child"):
            el = j.find(end)
            ref = None if el is None else el.get("link")
            if ref is None:
                raise ModelError(f"{where}: missing <{end} link=...>")
            if ref not in links:
                raise ModelError(f"{where}: {end} link {ref!r} is not defined")
        _vec_attr(j.find("origin"), "xyz", where + " <origin>", "0 0 0", MAX_OFFSET_M)
        _vec_attr(j.find("origin"), "rpy", where + " <origin>", "0 0 0")
        if kind in {"revolute", "continuous", "prismatic"}:
            axis = _vec_attr(j.find("axis"), "xyz", where + " <axis>", "1 0 0")
            if np.linalg.norm(axis) < 1e-12:
                raise ModelError(f"{where}: axis must be non-zero, got {axis.tolist()}")
        if kind in {"revolute", "prismatic"}:
            lim = j.find("limit")
            if lim is None:
                raise ModelError(f"{where}: a {kind} joint needs a <limit> element")
            w = where + " <limit>"
            lo = _float_attr(lim, "lower", w, 0.0)
            hi = _float_attr(lim, "upper", w, 0.0)
            eff = _float_attr(lim, "effort", w)
            vel = _float_attr(lim, "velocity", w)
            if lo > hi:
                raise ModelError(f"{w}: lower={lo!r} is above upper={hi!r}")
            if eff <= 0.0:
                raise ModelError(f"{w}: effort must be > 0, got {eff!r}")
            if vel <= 0.0:
                raise ModelError(f"{w}: velocity must be > 0, got {vel!r}")
        dyn = j.find("dynamics")
        if dyn is not None:
            for attr in ("damping", "friction"):
                val = _float_attr(dyn, attr, where + " <dynamics>", 0.0)
                if val < 0.0:
                    raise ModelError(f"{where} <dynamics>: {attr} must be >= 0, got {val!r}")
    return root


def load_arm(
    urdf: str,
    *,
    sites: Mapping[str, str] | None = None,
    hand_frame: str | None = None,
    joint_names: Sequence[str] | None = None,
    armature_kg_m2: Sequence[float] | None = None,
    source: str = "<urdf>",
) -> ArmModel:
    """Check URDF text and build an :class:`ArmModel` with pinocchio.

    Parameters
    ----------
    urdf : str
        URDF text (use :func:`read_urdf_file` for a path).
    sites : mapping, optional
        Cuff site role -> frame name, e.g. ``{"upper_arm": "my_cuff_1"}``.
        Every frame must exist.
    hand_frame : str, optional
        Frame of the hand point; must exist.
    joint_names : sequence of str, optional
        The joints the caller requires, in order; each must exist and be
        ``revolute`` (with limits).  When given, the model must have exactly
        these movable joints in this order.
    armature_kg_m2 : sequence of float, optional
        Reflected rotor inertia per joint [kg m^2] (URDF has no field for it).
    source : str
        Name of the file used in error messages.

    Raises
    ------
    ModelError
        The file is malformed or not physical (see :func:`check_urdf`), or the
        joint-space inertia is singular (a joint moves no mass).
    UnknownNameError
        A named frame or joint is missing.
    """
    root = check_urdf(urdf, source)
    kinds = {j.get("name"): j.get("type") for j in root.findall("joint")}
    movable = [n for n, k in kinds.items() if k != "fixed"]
    if joint_names is not None:
        for n in joint_names:
            if n not in kinds:
                raise UnknownNameError(f"{source}: no joint named {n!r}; joints are {sorted(kinds)}")
            if kinds[n] != "revolute":
                raise ModelError(
                    f"{source}: joint {n!r} must be revolute (with limits), got type {kinds[n]!r}"
                )
        extra = [n for n in movable if n not in joint_names]
        if extra:
            raise ModelError(f"{source}: movable joints {extra} are not among the required ones")
    elif not movable:
        raise ModelError(f"{source}: no movable joint (only {len(kinds)} fixed joints and "
                         f"{len(root.findall('link'))} links); an arm needs at least one revolute joint")
    else:
        bad = [n for n in movable if kinds[n] != "revolute"]
        if bad:
            raise ModelError(
                f"{source}: joints {bad} must be revolute (with limits), got "
                + ", ".join(f"{n}={kinds[n]!r}" for n in bad)
            )
    try:
        model = pin.buildModelFromXML(urdf)
    except (RuntimeError, ValueError) as e:
        raise ModelError(f"{source}: pinocchio could not build the model: {e}") from e
    _check_built_inertias(model, root, source)
    names = tuple(model.names[1:])
    if joint_names is not None and names != tuple(joint_names):
        raise ModelError(
            f"{source}: joint order in the chain is {list(names)}, expected {list(joint_names)}"
        )
    if model.nq != model.nv:
        raise ModelError(f"{source}: nq={model.nq} != nv={model.nv}; only revolute joints are allowed")
    parents = list(model.parents)[1:]
    forks = sorted({p for p in parents if parents.count(p) > 1})
    if forks:
        k = forks[0]
        children = [model.names[i] for i in range(1, model.njoints) if model.parents[i] == k]
        where = "the base" if k == 0 else f"joint {model.names[k]!r}"
        raise ModelError(f"{source}: the movable joints must form one serial chain; {where} carries "
                         f"{len(children)} movable joints {children} (a branching tree)")
    if armature_kg_m2 is not None:
        a = np.asarray(armature_kg_m2, dtype=float)
        if a.shape != (model.nv,) or not np.all(np.isfinite(a)) or np.any(a < 0):
            raise ParameterError(
                f"armature_kg_m2 must be {model.nv} finite values >= 0, got {list(armature_kg_m2)}"
            )
        model.armature = a.copy()
    arm = ArmModel(
        name=model.name,
        urdf=urdf,
        model=model,
        joint_names=names,
        sites=dict(sites or {}),
        hand_frame=hand_frame or "",
    )
    for role, frame in list(arm.sites.items()) + ([("hand point", hand_frame)] if hand_frame else []):
        if not model.existFrame(frame):
            links = [f.name for f in model.frames if f.type == pin.FrameType.BODY]
            raise UnknownNameError(
                f"{source}: {role} frame {frame!r} does not exist; the links are " + ", ".join(links)
            )
    _check_mass_matrix(arm, source)
    return arm


def _file_inertias(root: ET.Element) -> dict[str, pin.Inertia]:
    """Each link's inertia as the file declares it, in the link frame (mass, centre of mass, rotated tensor)."""
    out = {}
    for link in root.findall("link"):
        ine = link.find("inertial")
        if ine is None:
            continue
        origin = ine.find("origin")
        com = _vec_attr(origin, "xyz", "", "0 0 0")
        R = pin.rpy.rpyToMatrix(*_vec_attr(origin, "rpy", "", "0 0 0"))
        el = ine.find("inertia")
        c = {k: float(el.get(k)) for k in ("ixx", "ixy", "ixz", "iyy", "iyz", "izz")}
        I = np.array([[c["ixx"], c["ixy"], c["ixz"]], [c["ixy"], c["iyy"], c["iyz"]], [c["ixz"], c["iyz"], c["izz"]]])
        out[link.get("name")] = pin.Inertia(float(ine.find("mass").get("value")), com, R @ I @ R.T)
    return out


def _check_built_inertias(model: pin.Model, root: ET.Element, source: str) -> None:
    r"""Compare, body by body, the mass, centre of mass and inertia pinocchio built with the file's values.

    pinocchio lumps the links carried by one joint (through fixed joints) into that joint's inertia.  The
    file's inertia of each link is moved to the joint frame through the link frame's placement
    :math:`{}^{j}X_{l}` and summed (the parallel-axis theorem: Featherstone, *Rigid Body Dynamics Algorithms*,
    2008, eq. 2.63); mass, centre of mass and rotational inertia must agree to 1e-9 relative.  A difference
    means an element was read differently (e.g. a value pinocchio's reader could not parse and took as 0).
    """
    declared = _file_inertias(root)
    expected = [pin.Inertia.Zero() for _ in range(model.njoints)]
    carried: list[list[str]] = [[] for _ in range(model.njoints)]
    for f in model.frames:
        if f.type == pin.FrameType.BODY and f.name in declared:
            expected[f.parentJoint] += f.placement.act(declared[f.name])
            carried[f.parentJoint].append(f.name)
    missing = sorted(set(declared) - {n for names in carried for n in names})
    if missing:
        raise ModelError(f"{source}: links {missing} carry mass but are not part of the tree pinocchio built "
                         "(not connected to the root by joints)")
    for j in range(model.njoints):
        built, want = model.inertias[j], expected[j]
        if not carried[j] and built.mass == 0.0:
            continue
        scale_m = max(abs(want.mass), 1e-300)
        scale_i = max(float(np.max(np.abs(want.inertia))), 1e-300)
        scale_c = max(float(np.max(np.abs(want.lever))), 1e-3)
        for what, got, exp, scale, unit in (
            ("mass", built.mass, want.mass, scale_m, "kg"),
            ("centre of mass", built.lever, want.lever, scale_c, "m"),
            ("inertia", built.inertia, want.inertia, scale_i, "kg m^2"),
        ):
            if np.max(np.abs(np.asarray(got) - np.asarray(exp))) > 1e-9 * scale:
                on = "the base" if j == 0 else f"joint {model.names[j]!r}"
                raise ModelError(
                    f"{source}: links {carried[j]} on {on}: pinocchio built {what} "
                    f"{np.round(np.asarray(got), 12).tolist()} {unit} where the file declares "
                    f"{np.round(np.asarray(exp), 12).tolist()} {unit}; an <inertial> element was not understood"
                )


def _check_mass_matrix(arm: ArmModel, source: str) -> None:
    """The joint-space inertia at the neutral posture must be positive definite."""
    model = arm.model
    data = model.createData()
    saved = model.armature.copy()
    model.armature = np.zeros(model.nv)  # judge the links alone, not the rotors
    try:
        M = pin.crba(model, data, pin.neutral(model))
    finally:
        model.armature = saved
    M = np.triu(M) + np.triu(M, 1).T
    diag = np.diag(M)
    for i, d in enumerate(diag):
        if not d > 1e-12:
            raise ModelError(
                f"{source}: joint {arm.joint_names[i]!r} moves no mass (M[{i},{i}] = {d:g} kg m^2)"
            )
    if np.linalg.eigvalsh(M)[0] <= 1e-12 * float(np.max(diag)):
        raise ModelError(f"{source}: the joint-space inertia is singular at the zero posture")
