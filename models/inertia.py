"""Rigid-body inertial parameters: a validated record and textbook solids.

The conditions for a physically consistent rigid body are: mass m > 0 and the
rotational inertia about the centre of mass I_c symmetric positive definite
with principal moments obeying the triangle inequality
I_1 <= I_2 + I_3 (and permutations); see Traversaro, Brossette, Escande &
Nori (2016), "Identification of fully physical consistent inertial parameters
using optimization on manifolds", IROS, eq. (6).

The closed forms of the solids are the standard textbook ones (e.g. Meriam &
Kraige, *Engineering Mechanics: Dynamics*, Appendix B, Table D/4).
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass

import numpy as np

from .checks import positive, vector
from .errors import ParameterError

__all__ = [
    "Inertial",
    "solid_cylinder",
    "cylindrical_tube",
    "solid_box",
    "combine",
]

#: Relative tolerance of the triangle inequality and positive-definiteness tests.
_REL_TOL = 1e-9


@dataclass(frozen=True)
class Inertial:
    """Mass, centre of mass and rotational inertia of one rigid link.

    Parameters
    ----------
    mass_kg : float
        Mass m > 0 [kg].
    com_m : (3,) tuple
        Centre of mass in the link frame [m].
    inertia_kg_m2 : (6,) tuple
        Rotational inertia about the centre of mass, in axes parallel to the
        link frame, as ``(ixx, iyy, izz, ixy, ixz, iyz)`` [kg m^2] (the order
        of the URDF ``<inertia>`` attributes is different; the writer maps it).
    name : str
        Owner named in error messages.
    """

    mass_kg: float
    com_m: tuple[float, float, float]
    inertia_kg_m2: tuple[float, float, float, float, float, float]
    name: str = "Inertial"

    def __post_init__(self) -> None:
        object.__setattr__(self, "mass_kg", positive(self.name, "mass_kg", self.mass_kg, "kg"))
        object.__setattr__(self, "com_m", vector(self.name, "com_m", self.com_m, 3))
        object.__setattr__(
            self, "inertia_kg_m2", vector(self.name, "inertia_kg_m2", self.inertia_kg_m2, 6)
        )
        check_rotational_inertia(self.name, self.matrix)

    @property
    def matrix(self) -> np.ndarray:
        """(3, 3) rotational inertia about the centre of mass [kg m^2]."""
        ixx, iyy, izz, ixy, ixz, iyz = self.inertia_kg_m2
        return np.array([[ixx, ixy, ixz], [ixy, iyy, iyz], [ixz, iyz, izz]])

    @property
    def com(self) -> np.ndarray:
        """(3,) centre of mass in the link frame [m]."""
        return np.array(self.com_m)

    @classmethod
    def from_matrix(
        cls, mass_kg: float, com_m: Iterable[float], inertia: np.ndarray, name: str = "Inertial"
    ) -> Inertial:
        """Build from a (3, 3) inertia about the centre of mass [kg m^2]."""
        I = np.asarray(inertia, dtype=float)
        if I.shape != (3, 3):
            raise ParameterError(f"{name}.inertia_kg_m2 must be 3x3, got shape {I.shape}")
        return cls(
            mass_kg=mass_kg,
            com_m=tuple(com_m),
            inertia_kg_m2=(I[0, 0], I[1, 1], I[2, 2], I[0, 1], I[0, 2], I[1, 2]),
            name=name,
        )

    def moved(self, offset_m: Iterable[float], rotation: np.ndarray | None = None) -> Inertial:
        """The same body expressed in a frame where its old frame sits at ``offset_m``.

        ``rotation`` (3, 3) maps old-frame coordinates to new-frame ones.
        ``I' = R I R^T`` (rotation of a tensor), ``c' = R c + offset``.
        """
        R = np.eye(3) if rotation is None else np.asarray(rotation, dtype=float)
        com = R @ self.com + np.asarray(tuple(offset_m), dtype=float)
        return Inertial.from_matrix(self.mass_kg, com, R @ self.matrix @ R.T, self.name)


def check_rotational_inertia(owner: str, inertia: np.ndarray) -> None:
    """Raise :class:`ParameterError` unless ``inertia`` is a physical rotational inertia.

    Checks symmetry, positive definiteness and the triangle inequality of the
    principal moments (Traversaro et al. 2016, eq. 6).
    """
    I = np.asarray(inertia, dtype=float)
    if I.shape != (3, 3) or not np.all(np.isfinite(I)):
        raise ParameterError(f"{owner}: inertia must be a finite 3x3 matrix, got {I.tolist()}")
    scale = max(float(np.max(np.abs(I))), 1e-300)
    if np.max(np.abs(I - I.T)) > _REL_TOL * scale:
        raise ParameterError(f"{owner}: inertia must be symmetric, got {I.tolist()}")
    eig = np.linalg.eigvalsh(0.5 * (I + I.T))
    if eig[0] <= 0.0:
        raise ParameterError(
            f"{owner}: inertia must be positive definite, principal moments {eig.tolist()} kg m^2"
        )
    # sorted ascending: the only inequality that can fail is the largest one
    if eig[2] > (eig[0] + eig[1]) * (1.0 + _REL_TOL):
        raise ParameterError(
            f"{owner}: principal moments {eig.tolist()} kg m^2 violate the triangle "
            f"inequality I3 <= I1 + I2 ({eig[2]:.6g} > {eig[0] + eig[1]:.6g})"
        )


def _axis_rotation(axis: str | np.ndarray) -> np.ndarray:
    """Rotation whose third column is the unit vector ``axis`` (local z -> axis)."""
    if isinstance(axis, str):
        a = {"x": (1.0, 0.0, 0.0), "y": (0.0, 1.0, 0.0), "z": (0.0, 0.0, 1.0)}[axis]
        z = np.array(a)
    else:
        z = np.asarray(axis, dtype=float)
        z = z / np.linalg.norm(z)
    helper = np.array([1.0, 0.0, 0.0]) if abs(z[0]) < 0.9 else np.array([0.0, 1.0, 0.0])
    x = np.cross(helper, z)
    x /= np.linalg.norm(x)
    y = np.cross(z, x)
    return np.column_stack([x, y, z])


def cylindrical_tube(
    mass_kg: float,
    inner_radius_m: float,
    outer_radius_m: float,
    length_m: float,
    axis: str | np.ndarray = "z",
    center_m: Iterable[float] = (0.0, 0.0, 0.0),
    name: str = "tube",
) -> Inertial:
    """Thick-walled cylindrical tube (a solid cylinder when the inner radius is 0).

    .. math::
        I_{axis} = \\tfrac{1}{2} m (r_1^2 + r_2^2), \\qquad
        I_{\\perp} = \\tfrac{1}{12} m \\left(3 (r_1^2 + r_2^2) + h^2\\right)

    (Meriam & Kraige, Table D/4).
    """
    m = positive(name, "mass_kg", mass_kg, "kg")
    r1 = float(inner_radius_m)
    r2 = positive(name, "outer_radius_m", outer_radius_m, "m")
    h = positive(name, "length_m", length_m, "m")
    if not 0.0 <= r1 < r2:
        raise ParameterError(f"{name}: inner radius must be in [0, {r2:g}) m, got {r1!r}")
    i_ax = 0.5 * m * (r1**2 + r2**2)
    i_perp = m * (3.0 * (r1**2 + r2**2) + h**2) / 12.0
    local = Inertial.from_matrix(m, (0.0, 0.0, 0.0), np.diag([i_perp, i_perp, i_ax]), name)
    return local.moved(center_m, _axis_rotation(axis))


def solid_cylinder(
    mass_kg: float,
    radius_m: float,
    length_m: float,
    axis: str | np.ndarray = "z",
    center_m: Iterable[float] = (0.0, 0.0, 0.0),
    name: str = "cylinder",
) -> Inertial:
    """Solid cylinder: :func:`cylindrical_tube` with zero inner radius."""
    return cylindrical_tube(mass_kg, 0.0, radius_m, length_m, axis, center_m, name)


def solid_box(
    mass_kg: float,
    size_m: Iterable[float],
    center_m: Iterable[float] = (0.0, 0.0, 0.0),
    name: str = "box",
) -> Inertial:
    """Solid cuboid with edges ``(a, b, c)`` along x, y, z.

    .. math:: I_{xx} = \\tfrac{1}{12} m (b^2 + c^2) \\text{ and cyclic}

    (Meriam & Kraige, Table D/4).
    """
    m = positive(name, "mass_kg", mass_kg, "kg")
    a, b, c = (positive(name, f"size_m[{i}]", s, "m") for i, s in enumerate(size_m))
    I = np.diag([b * b + c * c, a * a + c * c, a * a + b * b]) * m / 12.0
    return Inertial.from_matrix(m, tuple(center_m), I, name)


def combine(parts: Iterable[Inertial], name: str = "Inertial") -> Inertial:
    """Rigidly join several bodies given in one frame into one.

    Mass and first moment add; inertias are moved to the common centre of mass
    with the parallel-axis (Huygens–Steiner) theorem,
    :math:`I = \\sum_i I_i + m_i (\\lVert d_i\\rVert^2 \\mathbb 1 - d_i d_i^T)`.
    """
    parts = list(parts)
    if not parts:
        raise ParameterError(f"{name}: combine() needs at least one part")
    m = sum(p.mass_kg for p in parts)
    c = sum(p.mass_kg * p.com for p in parts) / m
    I = np.zeros((3, 3))
    for p in parts:
        d = p.com - c
        I += p.matrix + p.mass_kg * (d @ d * np.eye(3) - np.outer(d, d))
    return Inertial.from_matrix(m, c, I, name)
