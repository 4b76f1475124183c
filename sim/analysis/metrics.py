"""Run metrics: pure functions of logged arrays, one per metric.

Notation: :math:`f_{c}(t_k)` is the force part of cuff c's wrench on the
human at tick k, :math:`\\tau_h(t_k)` the human's joint torques, N the number
of ticks.  Every function takes the arrays of :func:`sim.loop.runlog.load_run`;
those that read ``cuff_wrench_exo`` or ``cuff_force_human_world``, which a
run log does not store, take them with the logged ones:
``run.arrays | sim.analysis.derived.cuff_columns(run)``.  The keys of
:func:`run_metrics` are a contract: they keep their names and meaning.

References
----------
.. [ColgateSchenkel1997] J. E. Colgate, G. G. Schenkel, "Passivity of a class
   of sampled-data systems: application to haptic interfaces", *Journal of
   Robotic Systems* 14(1):37-47, 1997.
.. [FlashHogan1985] T. Flash, N. Hogan, "The coordination of arm movements: an
   experimentally confirmed mathematical model", *Journal of Neuroscience*
   5(7):1688-1703, 1985.
.. [ISO15066] ISO/TS 15066:2016 (first edition, 2016-02-15), International
   Organization for Standardization, Annex A, quasi-static force limits per
   body region (hand and fingers 140 N confirmed; upper arm and elbow 150 N,
   lower arm and wrist 160 N from memory).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from types import MappingProxyType

import numpy as np
import pinocchio as pin

from controllers.safety import BODY_REGION_FORCE_LIMITS_N as SAFETY_FORCE_LIMITS_N
from controllers.safety import TRIP_REASONS

__all__ = [
    "interaction_force_norm_N",
    "interaction_force_rms_N",
    "interaction_force_free_rms_N",
    "interaction_force_peak_N",
    "cuff_force_metrics",
    "human_effort_rms_Nm",
    "path_deviation_rms_rad",
    "torque_saturation_fraction",
    "interaction_torque_norm_Nm",
    "plane_penetration_m",
    "rendered_wall_stiffness_N_per_m",
    "rendered_wall_damping_N_s_per_m",
    "wall_impedance_fit",
    "joint_limit_violation_count",
    "joint_limit_excursion_max_rad",
    "wall_contacts",
    "wall_cycle_energy_returned_J",
    "rest_to_rest",
    "wall_bounce_count",
    "hand_cuff_index",
    "wall_normal_series",
    "wall_metrics",
    "interaction_power_W",
    "interaction_work_J",
    "positive_work_J",
    "joint_power_W",
    "path_error_rms_m",
    "assistance_metrics",
    "apparent_mass_kg",
    "apparent_mass_fit",
    "MassFit",
    "MASS_FIT_MIN_R2",
    "MASS_FIT_MAX_REL_CI95",
    "MASS_FIT_MIN_SAMPLES",
    "compensation_shares",
    "robot_interaction_terms",
    "BODY_REGION_FORCE_LIMITS_N",
    "force_limit_exceed_count",
    "safety_trips",
    "safety_metrics",
    "solver_metrics",
    "run_metrics",
    "TARGET_TOLERANCE_M",
    "intended_reach",
    "movement_completion",
    "time_to_target_s",
    "completion_metrics",
    "MetricInfo",
    "METRICS",
    "TIMING_KEYS",
    "is_timing_key",
    "flat_metrics",
]


def interaction_force_norm_N(cuff_wrench: np.ndarray) -> np.ndarray:
    """Per tick :math:`F(t_k) = \\sqrt{\\sum_c \\lVert f_c(t_k) \\rVert^2}` [N].

    ``cuff_wrench`` (N, n_cuffs, 6): force in columns 0-2.
    """
    f = np.asarray(cuff_wrench)[..., :3]
    return np.sqrt(np.sum(f * f, axis=(-1, -2)))


def interaction_force_rms_N(cuff_wrench: np.ndarray) -> float:
    """:math:`\\sqrt{\\tfrac1N \\sum_k F(t_k)^2}` [N] (RMS over time of the quadrature sum over cuffs)."""
    F = interaction_force_norm_N(cuff_wrench)
    return float(np.sqrt(np.mean(F * F))) if F.size else 0.0


def interaction_force_free_rms_N(cuff_wrench: np.ndarray, past_wall: np.ndarray | None = None) -> float | None:
    """:func:`interaction_force_rms_N` over the ticks with the hand on the free side of a wall [N].

    ``past_wall`` (bool per tick) marks the ticks with the hand past the
    wall's plane; None (no wall) keeps every tick.  Inside a wall the force
    is the wall's, which a wall variant renders on purpose: this RMS is the
    transparency of the free motion, comparable between variants that render
    the wall and variants that do not when every variant gets the same mask
    (the plane of the scenario's wall).  None when no tick is on the free
    side.
    """
    w = np.asarray(cuff_wrench)
    if past_wall is None:
        return interaction_force_rms_N(w)
    past = np.asarray(past_wall, dtype=bool)
    if past.shape != (len(w),):
        raise ValueError(f"past_wall must hold one flag per tick, shape ({len(w)},); got shape {past.shape}")
    return interaction_force_rms_N(w[~past]) if not past.all() else None


def interaction_force_peak_N(cuff_wrench: np.ndarray) -> float:
    """:math:`\\max_k F(t_k)` [N]."""
    F = interaction_force_norm_N(cuff_wrench)
    return float(F.max()) if F.size else 0.0


def cuff_force_metrics(cuff_wrench: np.ndarray, names: Sequence[str]) -> dict[str, dict[str, float]]:
    """Per cuff: RMS and peak over time of :math:`\\lVert f_c(t_k) \\rVert` [N] and of the torque part
    :math:`\\lVert m_c(t_k) \\rVert` [N m] (``force_rms_N``, ``force_peak_N``, ``torque_rms_Nm``,
    ``torque_peak_Nm``)."""
    w = np.asarray(cuff_wrench)
    f = np.linalg.norm(w[..., :3], axis=-1)
    m = np.linalg.norm(w[..., 3:], axis=-1)

    def rms(x):
        return float(np.sqrt(np.mean(x * x))) if x.size else 0.0

    def peak(x):
        return float(x.max()) if x.size else 0.0

    return {
        name: {"force_rms_N": rms(f[:, i]), "force_peak_N": peak(f[:, i]),
               "torque_rms_Nm": rms(m[:, i]), "torque_peak_Nm": peak(m[:, i])}
        for i, name in enumerate(names)
    }


def interaction_torque_norm_Nm(cuff_wrench: np.ndarray) -> np.ndarray:
    """Per tick :math:`M(t_k) = \\sqrt{\\sum_c \\lVert m_c(t_k) \\rVert^2}` [N m], m_c the cuff torques."""
    m = np.asarray(cuff_wrench)[..., 3:]
    return np.sqrt(np.sum(m * m, axis=(-1, -2)))


def human_effort_rms_Nm(tau_human: np.ndarray) -> float:
    """:math:`\\sqrt{\\tfrac1N \\sum_k \\lVert \\tau_h(t_k) \\rVert^2}` [N m] (norm over joints)."""
    t = np.asarray(tau_human)
    return float(np.sqrt(np.mean(np.sum(t * t, axis=-1)))) if t.size else 0.0


def path_deviation_rms_rad(q_human: np.ndarray, q_human_alone: np.ndarray) -> float:
    """:math:`\\sqrt{\\tfrac1N \\sum_k \\lVert q_h(t_k) - q_h^{alone}(t_k) \\rVert^2}` [rad].

    Compared over the ticks both runs have.
    """
    a, b = np.asarray(q_human), np.asarray(q_human_alone)
    n = min(len(a), len(b))
    d = a[:n] - b[:n]
    return float(np.sqrt(np.mean(np.sum(d * d, axis=-1)))) if n else 0.0


def torque_saturation_fraction(saturated: np.ndarray) -> float:
    """Fraction of ticks in which at least one joint command was saturated."""
    s = np.asarray(saturated, dtype=bool)
    return float(np.mean(np.any(s, axis=-1))) if s.size else 0.0


# -- walls and limits -----------------------------------------------------------------------
def plane_penetration_m(p: np.ndarray, point_m, normal) -> np.ndarray:
    """:math:`n^T (p - x_0)` per tick [m], n the unit normal pointing into the wall."""
    n = np.asarray(normal, dtype=float)
    n = n / np.linalg.norm(n)
    return (np.asarray(p) - np.asarray(point_m, dtype=float)) @ n


def rendered_wall_stiffness_N_per_m(
    force_N: np.ndarray, penetration_m: np.ndarray, dt_s: float, *,
    min_penetration_m: float = 1e-3, max_speed_m_s: float = 0.02,
) -> float | None:
    """Least-squares slope of wall-normal force against penetration over the quasi-static contact.

    Samples count when the penetration exceeds ``min_penetration_m`` and its
    rate (central difference) is below ``max_speed_m_s`` (quasi-static part;
    common practice); the fit is :math:`F = k p + c` (``numpy.polyfit``).
    Returns None when fewer than 20 samples qualify.
    """
    p = np.asarray(penetration_m, dtype=float)
    F = np.asarray(force_N, dtype=float)
    v = np.gradient(p, dt_s) if len(p) > 2 else np.zeros_like(p)
    sel = (p > min_penetration_m) & (np.abs(v) < max_speed_m_s)
    if np.count_nonzero(sel) < 20 or np.ptp(p[sel]) < 1e-4:
        return None
    return float(np.polyfit(p[sel], F[sel], 1)[0])


def wall_impedance_fit(
    force_N: np.ndarray, penetration_m: np.ndarray, dt_s: float, *,
    min_penetration_m: float = 1e-3, inertia: bool = True,
) -> dict[str, float | int | None] | None:
    """Joint least squares :math:`F = k\\,p + b\\,\\dot p\\, [+\\, m\\,\\ddot p] + c` over the contact ticks.

    The ticks with penetration above ``min_penetration_m``;
    :math:`\\dot p, \\ddot p` central differences (``numpy.gradient``) of the
    penetration, the m column only with ``inertia`` (see
    :func:`rendered_wall_damping_N_s_per_m` for why it is there).  Returns
    ``stiffness_N_per_m`` (k), ``damping_N_s_per_m`` (b), ``mass_kg`` (m, None
    without ``inertia``), ``offset_N`` (c) and ``n_samples``; None when fewer
    than 20 ticks qualify, the penetration or its rate does not vary, or the
    columns are not independent.
    """
    p = np.asarray(penetration_m, dtype=float)
    F = np.asarray(force_N, dtype=float)
    if len(p) < 3:
        return None
    v = np.gradient(p, dt_s)
    sel = p > min_penetration_m
    n = int(np.count_nonzero(sel))
    if n < 20 or np.ptp(p[sel]) < 1e-4 or np.ptp(v[sel]) < 1e-4:
        return None
    cols = [p[sel], v[sel]]
    if inertia:
        cols.append(np.gradient(v, dt_s)[sel])
    cols.append(np.ones(n))
    X = np.column_stack(cols)
    if np.linalg.matrix_rank(X) < X.shape[1]:
        return None
    coef = np.linalg.lstsq(X, F[sel], rcond=None)[0]
    return {"stiffness_N_per_m": float(coef[0]), "damping_N_s_per_m": float(coef[1]),
            "mass_kg": float(coef[2]) if inertia else None, "offset_N": float(coef[-1]), "n_samples": n}


def rendered_wall_damping_N_s_per_m(
    force_N: np.ndarray, penetration_m: np.ndarray, dt_s: float, *,
    min_penetration_m: float = 1e-3, inertia: bool = True,
) -> float | None:
    """Damping of a wall as felt [N s/m]: joint least squares of force on penetration, its rate and its acceleration.

    Over the contact ticks (penetration above ``min_penetration_m``, as
    :func:`rendered_wall_stiffness_N_per_m`), moving or not, fit

    .. math:: F = k\\,p + b\\,\\dot p + m\\,\\ddot p + c

    and return b; :math:`\\dot p, \\ddot p` are central differences
    (``numpy.gradient``).  A Kelvin-Voigt spring-damper :math:`F = k p + b \\dot p`
    gives its b back (and m = 0).  The m column is there because a wall
    rendered by a robot is felt with a mass: the wall task
    (:class:`controllers.tasks.WallTask`) moves the hand point as the mass
    :math:`m_n` (a share of the robot's own operational-space mass) pushed by
    the wearer and held by the spring-damper, so the wearer feels
    :math:`K p + B \\dot p + m_n \\ddot p`.  Over a push and release,
    :math:`\\ddot p` correlates with :math:`\\dot p` (the hand enters fast
    and is stopped by the wall, and leaves more slowly), so a fit of
    :math:`F = k p + b \\dot p + c` alone (``inertia=False``) puts part of the
    inertia into b (omitted-variable bias): on ``scenarios/wall_push.py`` under
    ``walls`` it reads -0.8 N s/m for a commanded 5, against 3.0 with the
    mass column.

    What is still missing at the hand is the physics of the rendering, not
    the fit.  Measured on that scenario (K = 600 N/m, B = 5 N s/m, 3.0 felt)
    with one part of the plant changed at a time: the compliant hand cuff
    between the robot's hand point and the wearer's hand, in series with the
    rendered mass-spring-damper, costs the most (with the hand cuff five
    times stiffer, at the same damping ratio, the wearer feels 5.3 N s/m;
    the same fit against the robot's own hand point gives 4.2); the 2 ms
    first-order lag of the torque-source actuators
    (:class:`sim.physics.actuators.ActuatorParams`) about 1 (3.9 with an ideal
    actuator; a spring rendered with an effective delay :math:`\\tau` loses
    :math:`K \\tau` of damping, :math:`K p(t - \\tau) \\approx K p - K \\tau
    \\dot p`, here up to 600 x 0.002 = 1.2: the sampled-spring effect of
    Colgate & Schenkel 1997 [ColgateSchenkel1997]_); the filters and delays
    of the force sensor and the encoders under 0.2 each.

    Returns None when fewer than 20 ticks qualify, or the penetration or its
    rate does not vary (:func:`wall_impedance_fit`).
    """
    fit = wall_impedance_fit(force_N, penetration_m, dt_s, min_penetration_m=min_penetration_m, inertia=inertia)
    return None if fit is None else fit["damping_N_s_per_m"]


def joint_limit_violation_count(q: np.ndarray, lower: np.ndarray, upper: np.ndarray, tol_rad: float = 1e-9) -> int:
    """Number of ticks in which any joint is outside ``[lower - tol, upper + tol]``."""
    q = np.asarray(q)
    return int(np.count_nonzero(np.any((q < np.asarray(lower) - tol_rad) | (q > np.asarray(upper) + tol_rad), axis=-1)))


def joint_limit_excursion_max_rad(q: np.ndarray, lower: np.ndarray, upper: np.ndarray) -> float:
    """Largest distance [rad] by which any joint went past a limit over the run (0 if never)."""
    q = np.asarray(q)
    if not q.size:
        return 0.0
    over = np.maximum(q - np.asarray(upper), np.asarray(lower) - q)
    return float(max(0.0, over.max()))


def wall_contacts(penetration_m: np.ndarray) -> list[tuple[int, int]]:
    """Contact episodes: ``(first, last)`` tick index pairs of each maximal run with penetration > 0."""
    inside = np.asarray(penetration_m) > 0.0
    if not inside.size:
        return []
    edges = np.diff(np.concatenate(([0], inside.astype(np.int8), [0])))
    starts, ends = np.flatnonzero(edges == 1), np.flatnonzero(edges == -1) - 1
    return list(zip(starts.tolist(), ends.tolist()))


def wall_cycle_energy_returned_J(force_N: np.ndarray, penetration_m: np.ndarray, first: int, last: int) -> float:
    """Energy a wall gave back beyond what it absorbed over one push-release cycle [J].

    .. math:: E_{ret} = -\\sum_{k=a}^{b-1} F_k \\, (p_{k+1} - p_k)

    F the wall-normal force on the hand (positive pushing it out), p the
    penetration, over the ticks a..b given by ``first`` and ``last`` (the
    caller's cycle, see :func:`rest_to_rest`).  Pairing the force held at tick
    k with the displacement over the following interval is the exact work of a
    zero-order-hold force under piecewise-constant velocity, the worst case of
    Colgate & Schenkel (1997) [ColgateSchenkel1997]_.  Positive: the wall
    returned net energy, i.e. it was active (a passivity violation); a passive
    spring-damper returns :math:`-\\int B \\dot p^2 dt \\le 0`.
    """
    F = np.asarray(force_N, dtype=float)
    p = np.asarray(penetration_m, dtype=float)
    a, b = max(first, 0), min(last, len(p) - 1)
    return float(-np.sum(F[a:b] * np.diff(p[a:b + 1])))


def rest_to_rest(speed_m_s: np.ndarray, first: int, last: int, rest_speed_m_s: float = 0.01) -> tuple[int, int]:
    """Widen a contact ``(first, last)`` to the last tick at rest before it and the first at rest after it.

    Measured from rest to rest, the kinetic energy of whatever mass the hand
    feels cancels out of :func:`wall_cycle_energy_returned_J`, which then holds
    only what the wall (and any dissipation on the way) did.  A contact with
    no rest on a side keeps its own bound there (one tick outside the wall).
    ``rest_speed_m_s``: 0.01 m/s, common practice.
    """
    v = np.asarray(speed_m_s)
    before = np.flatnonzero(v[:first] < rest_speed_m_s)
    after = np.flatnonzero(v[last + 1:] < rest_speed_m_s)
    a = int(before[-1]) if before.size else max(first - 1, 0)
    b = int(last + 1 + after[0]) if after.size else min(last + 1, len(v) - 1)
    return a, b


def wall_bounce_count(penetration_m: np.ndarray, dt_s: float, window_s: float = 0.1) -> int:
    """Contact bounces: make events that come less than ``window_s`` after the previous break [-].

    A hand that pushes into a wall once makes one contact; a wall that throws it
    out and catches it again within ``window_s`` (0.1 s, common practice: well
    below the time a person takes to decide on a new push) counts one bounce
    per extra make.
    """
    contacts = wall_contacts(penetration_m)
    gap = int(round(window_s / dt_s))
    return sum(1 for (s0, _), (_, e1) in zip(contacts[1:], contacts[:-1]) if s0 - e1 <= gap)


def hand_cuff_index(cuff_names: Sequence[str], sensor: str = "hand") -> int:
    """Index of the cuff named ``sensor`` (the hand cuff by default); the last cuff if there is none so named."""
    names = list(cuff_names)
    return names.index(sensor) if sensor in names else len(names) - 1


def wall_normal_series(arrays: Mapping[str, np.ndarray], point_m, normal, hand_cuff: int
                       ) -> tuple[np.ndarray, np.ndarray]:
    """Per tick, the human hand's penetration [m] of a plane and the wall-normal force it feels [N].

    Penetration :func:`plane_penetration_m` of ``p_hand_human``; force
    :math:`-n^T f` with f the hand cuff's force on the human in world axes
    (positive when it pushes the hand out of the wall).
    """
    n = np.asarray(normal, dtype=float)
    n = n / np.linalg.norm(n)
    felt = -(_derived_column(arrays, "cuff_force_human_world")[:, hand_cuff, :] @ n)
    return plane_penetration_m(arrays["p_hand_human"], point_m, n), felt


def wall_metrics(arrays: Mapping[str, np.ndarray], *, point_m, normal, stiffness_N_per_m: float,
                 hand_cuff: int, dt_s: float, damping_N_s_per_m: float | None = None) -> dict:
    """The wall keys of ``metrics.json`` for a plane wall.

    The force is the one the human feels: the hand cuff's force on the human
    along :math:`-n` (the wall pushes back).  Stiffness is fitted against the
    penetration of the human's hand point (``wall_stiffness_rendered_N_per_m``)
    and of the robot's (``wall_stiffness_rendered_robot_N_per_m``); damping
    (``wall_damping_rendered_N_s_per_m``, :func:`rendered_wall_damping_N_s_per_m`)
    against the human's, next to the commanded ``damping_N_s_per_m``
    (``wall_damping_commanded_N_s_per_m``; None if not given); the energy
    and bounce keys use the human's hand, since they are what the wearer meets.
    ``wall_energy_returned_J`` is the largest :func:`wall_cycle_energy_returned_J`
    over the finished contacts, each taken from rest to rest
    (:func:`rest_to_rest`); None if there is none.  It is the energy along the
    wall normal only: for a push it tells an active wall, but when the hand also
    moves along the wall (a slide) the robot's coupled inertia can move energy
    between directions, so read it against a variant without the wall.
    """
    pen_h, felt = wall_normal_series(arrays, point_m, normal, hand_cuff)
    pen_r = plane_penetration_m(arrays["p_hand_exo"], point_m, normal)
    speed = np.linalg.norm(np.gradient(np.asarray(arrays["p_hand_human"]), dt_s, axis=0), axis=1) \
        if len(pen_h) > 2 else np.zeros(len(pen_h))
    cycles = []
    for a, b in wall_contacts(pen_h):
        if b >= len(pen_h) - 1:
            continue  # still in contact at the end of the run: not a finished cycle
        lo, hi = rest_to_rest(speed, a, b)
        cycles.append({"start_s": a * dt_s, "duration_s": (b - a + 1) * dt_s,
                       "penetration_max_m": float(pen_h[a:b + 1].max()),
                       "energy_returned_J": wall_cycle_energy_returned_J(felt, pen_h, lo, hi)})
    return {
        "wall_stiffness_commanded_N_per_m": float(stiffness_N_per_m),
        "wall_stiffness_rendered_N_per_m": rendered_wall_stiffness_N_per_m(felt, pen_h, dt_s),
        "wall_stiffness_rendered_robot_N_per_m": rendered_wall_stiffness_N_per_m(felt, pen_r, dt_s),
        "wall_damping_commanded_N_s_per_m": None if damping_N_s_per_m is None else float(damping_N_s_per_m),
        "wall_damping_rendered_N_s_per_m": rendered_wall_damping_N_s_per_m(felt, pen_h, dt_s),
        "wall_penetration_max_m": float(max(0.0, pen_h.max())) if len(pen_h) else 0.0,
        "wall_energy_returned_J": max((c["energy_returned_J"] for c in cycles), default=None),
        "wall_bounce_count": wall_bounce_count(pen_h, dt_s),
        "wall_contact_count": len(wall_contacts(pen_h)),
        "wall_cycles": cycles,
    }


# -- transparency: work, felt mass, what is left to carry -----------------------------------------
def interaction_power_W(wrench: np.ndarray, twist: np.ndarray) -> np.ndarray:
    """Per tick :math:`P(t_k) = \\sum_c w_c \\cdot V_c` [W]: power the cuffs deliver to the robot.

    ``wrench`` and ``twist`` (N, n_cuffs, 6) in the same frame, each cuff's wrench
    on the robot and the robot cuff frame's spatial velocity ``[v; omega]``
    (power of a wrench on a moving body, Featherstone 2008, section 2.7).
    """
    return np.einsum("kci,kci->k", np.asarray(wrench, dtype=float), np.asarray(twist, dtype=float))


def interaction_work_J(power_W: np.ndarray, dt_s: float) -> float:
    """Net work the human does on the robot through the cuffs, :math:`W = \\sum_k P(t_k) T` [J].

    Positive: the human fed energy into the robot (pushed it along); a perfectly
    transparent robot at rest at both ends of a movement takes none.
    """
    return float(np.sum(power_W) * dt_s)


# -- assistance: the robot's work on the wearer, against the reference path ------------------------
def positive_work_J(power_W: np.ndarray, dt_s: float) -> float:
    r"""Work of the positive part of a power, :math:`W^+ = \sum_k \max(P(t_k), 0)\, T` [J].

    The power held over each tick (zero-order hold, as :func:`interaction_work_J`); what a source delivered,
    without crediting it for what it took back.
    """
    P = np.asarray(power_W, dtype=float)
    return float(np.sum(np.maximum(P, 0.0)) * dt_s)


def joint_power_W(tau_Nm: np.ndarray, dq_rad_s: np.ndarray) -> np.ndarray:
    r"""Per tick :math:`P(t_k) = \tau(t_k) \cdot \dot q(t_k)` [W] (power of joint torques on their joints)."""
    return np.einsum("ki,ki->k", np.asarray(tau_Nm, dtype=float), np.asarray(dq_rad_s, dtype=float))


def path_error_rms_m(p_hand_m: np.ndarray, t_s: np.ndarray, path) -> float:
    r""":math:`\sqrt{\tfrac1N \sum_k \lVert p(t_k) - p_{ref}(t_k) \rVert^2}` [m]: a hand against a reference
    path at the same times (``path`` a :class:`controllers.tasks.HandPath`)."""
    p = np.asarray(p_hand_m, dtype=float)
    if not len(p):
        return 0.0
    ref, _, _ = path.sample(np.asarray(t_s, dtype=float))
    d = p - ref
    return float(np.sqrt(np.mean(np.sum(d * d, axis=-1))))


def assistance_metrics(arrays: Mapping[str, np.ndarray], human_cuff_twist: np.ndarray | None, dt_s: float,
                       path=None) -> dict:
    r"""The assistance keys of ``metrics.json`` for a coupled run.

    * ``assistance_work_J``: the positive work the robot does on the wearer through the cuffs,
      :func:`positive_work_J` of :math:`P_r(t_k) = \sum_c w_{B,c} \cdot V_{B,c}`, each cuff's wrench on
      the human (``cuff_wrench_human``) times the human-side cuff frame's twist (``human_cuff_twist``,
      :func:`sim.analysis.derived.human_cuff_twists`), both in that frame.  The positive part is taken of
      the sum over the cuffs at each tick (what the robot gives the arm as a whole); the energy the cuffs'
      own springs store and return is in it, as the wearer receives it.  None without the twists (a run
      folder written before ``meta.json`` recorded the cuffs' strap offsets).
    * ``assistance_share``: :math:`W_r^+ / (W_r^+ + W_h^+)`, the wearer's own positive joint work
      :math:`W_h^+` = :func:`positive_work_J` of :func:`joint_power_W` (``tau_human``, ``dq_human``); None
      when neither did positive work.
    * ``path_error_rms_m``: :func:`path_error_rms_m` of the wearer's hand (``p_hand_human``) against
      ``path`` at the same times; None without a path.
    * ``assist_stiffness_peak_N_per_m``, ``assist_stiffness_final_N_per_m``: the largest and the last
      stiffness of an assist-as-needed task (the ``diag_assist_as_needed_stiffness_N_per_m`` column); None
      without one.
    """
    out = {"assistance_work_J": None, "assistance_share": None, "path_error_rms_m": None,
           "assist_stiffness_peak_N_per_m": None, "assist_stiffness_final_N_per_m": None}
    if human_cuff_twist is not None:
        w_r = positive_work_J(interaction_power_W(arrays["cuff_wrench_human"], human_cuff_twist), dt_s)
        w_h = positive_work_J(joint_power_W(arrays["tau_human"], arrays["dq_human"]), dt_s)
        out["assistance_work_J"] = w_r
        out["assistance_share"] = w_r / (w_r + w_h) if w_r + w_h > 0 else None
    if path is not None:
        out["path_error_rms_m"] = path_error_rms_m(arrays["p_hand_human"], arrays["t"], path)
    K = arrays.get("diag_assist_as_needed_stiffness_N_per_m")
    if K is not None and len(K):
        K = np.asarray(K, dtype=float)
        out["assist_stiffness_peak_N_per_m"] = float(np.nanmax(K)) if np.isfinite(K).any() else None
        out["assist_stiffness_final_N_per_m"] = float(K[-1]) if np.isfinite(K[-1]) else None
    return out


def _moving_average(x: np.ndarray, n: int) -> np.ndarray:
    if n <= 1:
        return x
    k = np.ones(n) / n
    pad = n // 2
    xp = np.pad(x, [(pad, n - 1 - pad)] + [(0, 0)] * (x.ndim - 1), mode="edge")
    return np.apply_along_axis(lambda c: np.convolve(c, k, mode="valid"), 0, xp)


#: Smallest R² of the felt-mass line for :func:`apparent_mass_fit` to report the mass (common practice).
MASS_FIT_MIN_R2 = 0.5
#: Largest 95 % half-width of the felt-mass slope, relative to the slope, for it to be reported (common practice).
MASS_FIT_MAX_REL_CI95 = 0.5
#: Fewest moving ticks :func:`apparent_mass_fit` fits.
MASS_FIT_MIN_SAMPLES = 50


@dataclass(frozen=True, eq=False)
class MassFit:
    """The felt mass at the hand and the quality of its fit (:func:`apparent_mass_fit`).

    Attributes
    ----------
    mass_kg : float or None [kg]
        The felt mass; None when the fit is rejected (``reason`` says why).
    fitted_kg : float or None [kg]
        The fitted slope, also when rejected; None when there was nothing to fit.
    r2 : float or None [-]
        Coefficient of determination of the line ``force_N`` against ``acc_m_s2``.
    ci95_kg : float or None [kg]
        Half-width of the 95 % confidence interval of the slope.
    n_samples : int
        Ticks in the fit.
    reason : str or None
        Why ``mass_kg`` is None (None when it is not).
    acc_m_s2 : ndarray [m/s^2]
        The fitted acceleration samples along the movement.
    force_N : ndarray [N]
        The force samples against the motion, less the fit's other columns
        than the intercept (the felt weight), so that
        ``force_N ≈ fitted_kg * acc_m_s2 + intercept_N``: the scatter of the fit.
    intercept_N : float or None [N]
        The fitted steady offset.
    """

    mass_kg: float | None
    fitted_kg: float | None
    r2: float | None
    ci95_kg: float | None
    n_samples: int
    reason: str | None
    acc_m_s2: np.ndarray
    force_N: np.ndarray
    intercept_N: float | None

    def __post_init__(self) -> None:
        acc, force = np.array(self.acc_m_s2, dtype=float), np.array(self.force_N, dtype=float)  # own copies
        if acc.shape != force.shape or acc.ndim != 1:
            raise ValueError(f"MassFit: acc_m_s2 and force_N must be 1-D of the same length; got shapes "
                             f"{acc.shape} and {force.shape}")
        if (self.mass_kg is None) == (self.reason is None):
            raise ValueError(f"MassFit: a reason is given exactly when mass_kg is None; got mass_kg={self.mass_kg!r}, "
                             f"reason={self.reason!r}")
        acc.setflags(write=False)
        force.setflags(write=False)
        object.__setattr__(self, "acc_m_s2", acc)
        object.__setattr__(self, "force_N", force)


def apparent_mass_fit(force_on_human_N: np.ndarray, p_hand_m: np.ndarray, dt_s: float, *,
                      min_speed_m_s: float = 0.05, smooth_s: float = 0.01,
                      exclude: np.ndarray | None = None) -> MassFit:
    """Felt mass at the hand [kg] with the quality of its fit: least-squares slope of force on acceleration.

    With :math:`u_k = v_k / \\lVert v_k \\rVert` the movement direction (ticks
    faster than ``min_speed_m_s``; 0.05 m/s, common practice),
    :math:`F_k = -f_k \\cdot u_k` the hand-cuff force the human feels against
    the motion and :math:`a_k = \\ddot p_k \\cdot u_k`, fit
    :math:`F = m\\,a + m_g\\, g\\, (\\hat z \\cdot u) + c` (``numpy.linalg.lstsq``): a point mass
    m moved along u needs :math:`m (a + g \\hat z) \\cdot u`; the separate
    :math:`m_g` keeps an uncompensated (or compensated) weight from passing for
    inertia, and c absorbs a steady offset.  The gravity column is used only when
    the movement has a vertical part (std of :math:`\\hat z \\cdot u` > 0.05).
    A robot that feels like a point mass m at the hand gives m; a transparent
    one gives 0.  Velocity and acceleration are central differences of the
    hand position (``numpy.gradient``), force and acceleration both smoothed by
    the same centred moving average of ``smooth_s`` (so that noise in the
    regressor does not bias the slope toward zero).

    Quality of the fit, from the ordinary-least-squares theory (e.g. Draper &
    Smith, *Applied Regression Analysis*, 3rd ed., 1998, ch. 1 and 5): with
    X the columns, :math:`\\hat\\sigma^2 = \\mathrm{SSR} / (n - p)` and the
    covariance :math:`\\hat\\sigma^2 (X^T X)^{-1}`, the 95 % half-width of the
    slope is :math:`t_{0.975,\\,n-p} \\sqrt{[\\hat\\sigma^2 (X^T X)^{-1}]_{mm}}`
    (Student's t, ``scipy.stats.t``); R² is that of the scatter the fit
    draws, ``force_N`` (F less the weight column) against ``acc_m_s2``:
    :math:`1 - \\mathrm{SSR} / \\sum_k (F'_k - \\bar F')^2`.  The ticks are
    serially correlated (1 kHz sampling, the moving average), so the nominal
    interval is narrower than a true 95 % one: it tells a tight fit from a
    loose one rather than giving an exact coverage.

    The mass is rejected (``mass_kg`` None, ``reason`` set; ``fitted_kg``,
    ``r2`` and ``ci95_kg`` still given) when the slope is negative (no mass
    feels like that: the force is not the inertia of the motion), when R² is
    below :data:`MASS_FIT_MIN_R2` (0.5: less than half the force's variation
    along the movement follows the acceleration), or when the half-width is
    more than :data:`MASS_FIT_MAX_REL_CI95` (half) of the slope; both
    thresholds common practice.  There is nothing to fit (``fitted_kg`` None
    too) when fewer than :data:`MASS_FIT_MIN_SAMPLES` ticks move or the
    acceleration does not vary.

    The weight column holds a constant felt weight only.  A weight that varies
    with the posture (a robot left uncompensated) is confounded with inertia on
    paths that go out and back the same way, so :func:`run_metrics` rejects
    the mass when more than half the robot's weight is left to the wearer
    (``gravity_share_left > 0.5``).

    ``exclude`` (bool per tick) leaves ticks out of the fit, and with them every
    tick within the smoothing window of one: :func:`run_metrics` passes the
    ticks with the hand past the plane of the scenario's wall (a rendered
    wall's spring would otherwise count as negative inertia), for every
    variant alike, so that all are fitted over the same stretch.
    """
    p = np.asarray(p_hand_m, dtype=float)
    f = np.asarray(force_on_human_N, dtype=float)
    empty = np.zeros(0)

    def nothing(reason: str, n: int = 0) -> MassFit:
        return MassFit(None, None, None, None, n, reason, empty, empty, None)

    if len(p) < 5:
        return nothing(f"only {len(p)} ticks: nothing to fit")
    v = np.gradient(p, dt_s, axis=0)
    a = np.gradient(v, dt_s, axis=0)
    n = max(1, int(round(smooth_s / dt_s)))
    a, f = _moving_average(a, n), _moving_average(f, n)
    speed = np.linalg.norm(v, axis=1)
    sel = speed > min_speed_m_s
    if exclude is not None:
        ex = np.asarray(exclude, dtype=bool)
        if ex.shape != (len(p),):
            raise ValueError(f"exclude must hold one flag per tick, shape ({len(p)},); got shape {ex.shape}")
        # the moving average (and the differences) carry an excluded tick's force into its neighbours
        sel &= np.convolve(ex.astype(float), np.ones(2 * n + 3), mode="same") == 0.0
    n_sel = int(np.count_nonzero(sel))
    if n_sel < MASS_FIT_MIN_SAMPLES:
        return nothing(f"{n_sel} ticks move faster than {min_speed_m_s:g} m/s (outside any wall), fewer than "
                       f"{MASS_FIT_MIN_SAMPLES}: nothing to fit", n_sel)
    u = v[sel] / speed[sel, None]
    acc = np.einsum("ki,ki->k", a[sel], u)
    F = -np.einsum("ki,ki->k", f[sel], u)
    if np.ptp(acc) < 1e-6:
        return nothing("the acceleration along the movement does not vary: nothing to fit", n_sel)
    cols = [acc, np.ones_like(acc)]
    if np.std(u[:, 2]) > 0.05:
        cols.append(9.81 * u[:, 2])
    X = np.column_stack(cols)
    coef = np.linalg.lstsq(X, F, rcond=None)[0]
    slope, intercept = float(coef[0]), float(coef[1])
    force = F - X[:, 2:] @ coef[2:]  # F less the weight column: the scatter of the line
    resid = force - (slope * acc + intercept)
    ssr = float(resid @ resid)
    dev = force - force.mean()
    sst = float(dev @ dev)
    r2 = 1.0 - ssr / sst if sst > 0 else None
    dof = len(F) - X.shape[1]
    from scipy.stats import t as student_t

    cov = ssr / dof * np.linalg.pinv(X.T @ X)
    ci95 = float(student_t.ppf(0.975, dof) * np.sqrt(cov[0, 0]))
    reason = None
    if slope < 0:
        reason = (f"negative slope {slope:.3g} kg: the force against the motion does not follow the acceleration "
                  "as a mass's would")
    elif r2 is None or r2 < MASS_FIT_MIN_R2:
        reason = (f"poor fit: R² = {r2:.2f}, below {MASS_FIT_MIN_R2:g}" if r2 is not None
                  else "poor fit: the force along the movement does not vary")
    elif ci95 > MASS_FIT_MAX_REL_CI95 * slope:
        reason = (f"loose fit: 95 % half-width {ci95:.3g} kg is more than {MASS_FIT_MAX_REL_CI95:g} of the slope "
                  f"{slope:.3g} kg")
    return MassFit(None if reason else slope, slope, r2, ci95, len(F), reason, acc, force, intercept)


def apparent_mass_kg(force_on_human_N: np.ndarray, p_hand_m: np.ndarray, dt_s: float, *,
                     min_speed_m_s: float = 0.05, smooth_s: float = 0.01,
                     exclude: np.ndarray | None = None) -> float | None:
    """Felt mass at the hand [kg], or None: ``apparent_mass_fit(...).mass_kg`` (see :func:`apparent_mass_fit`)."""
    return apparent_mass_fit(force_on_human_N, p_hand_m, dt_s, min_speed_m_s=min_speed_m_s, smooth_s=smooth_s,
                             exclude=exclude).mass_kg


def compensation_shares(tau_interaction: np.ndarray, tau_gravity: np.ndarray, tau_inertia: np.ndarray, *,
                        tau_coriolis: np.ndarray | None = None, dq: np.ndarray | None = None,
                        coulomb_smoothing_rad_s: float = 0.01, exclude: np.ndarray | None = None,
                        ) -> tuple[float | None, float | None]:
    """Shares of the robot's gravity and inertia left for the human to carry [-].

    The robot's dynamics with the joint friction of the plant
    (:class:`sim.physics.plant.PlantParams`: viscous b and smoothed Coulomb
    :math:`\\tau_c`, per joint) are

    .. math:: M\\ddot q + C\\dot q + g + b \\dot q + \\tau_c \\tanh(\\dot q / v_s)
              = \\tau_{act} + \\tau_{int}

    (Lagrange's equations of a rigid multibody system, e.g. Featherstone,
    *Rigid Body Dynamics Algorithms*, 2008, ch. 1 and 5), with
    :math:`\\tau_{int} = \\sum_c J_c^T w_c` the torque the human applies
    through the cuffs.  A controller that leaves a share :math:`\\alpha` of
    the weight, :math:`\\beta` of :math:`M\\ddot q` and :math:`\\gamma` of
    :math:`C\\dot q` to the wearer, and compensates friction in part or not
    at all, gives

    .. math:: \\tau_{int} = \\alpha\\, g(q) + \\beta\\, M(q)\\ddot q + \\gamma\\, C(q,\\dot q)\\dot q
              + \\sum_j \\big(b'_j \\dot q_j + c'_j \\tanh(\\dot q_j / v_s)\\big)\\, e_j

    fitted by least squares over every tick and joint: :math:`\\alpha` (share
    of gravity left: 1 with no compensation, 0 with perfect gravity
    compensation) and :math:`\\beta` (share of inertia left: 1
    uncompensated, 0.5 when half the inertia is compensated) are returned;
    :math:`\\gamma` and the per-joint friction coefficients
    :math:`b'_j, c'_j` (one viscous and one Coulomb column per joint, the
    plant's own friction law) are nuisance terms.  They are in the fit because
    a term left out of a least-squares fit biases the kept coefficients by its
    correlation with them (omitted-variable bias; Greene, *Econometric
    Analysis*, 7th ed., 2012, the chapter on specification analysis; chapter
    from memory), and on an
    out-and-back movement friction and the velocity-product torques
    correlate with :math:`g` and :math:`M\\ddot q`: without them a robot
    under gravity compensation alone reads :math:`\\beta \\approx 0.84`
    instead of 1 on ``scenarios/reach.py``.  :math:`C\\dot q` has a share of
    its own rather than joining :math:`M\\ddot q` because a controller may
    compensate the two by different shares: the transparency task
    (:class:`controllers.tasks.Transparency`) compensates all of
    :math:`C\\dot q + g` and a share c of :math:`M\\ddot q`, so that
    :math:`\\tau_{int} = (1 - c)(M\\ddot q + \\tau_f)`; one column for both
    would read 0.53 there instead of 0.5.

    Parameters
    ----------
    tau_interaction, tau_gravity, tau_inertia : (N, nv) arrays [N m]
        :math:`\\tau_{int}`, :math:`g(q)`, :math:`M(q)\\ddot q` per tick
        (:func:`robot_interaction_terms`).
    tau_coriolis : (N, nv) array [N m], optional
        :math:`C(q,\\dot q)\\dot q`; without it the fit has no such column.
    dq : (N, nv) array [rad/s], optional
        Joint velocities, for the friction columns; without it the fit has
        none (the robot is taken to be frictionless).
    coulomb_smoothing_rad_s : float [rad/s]
        :math:`v_s` of the Coulomb columns: the plant's
        ``coulomb_smoothing_rad_s`` (0.01 rad/s by default, as the plant's).
    exclude : (N,) bool array, optional
        Ticks left out of the fit: :func:`run_metrics` passes those with the
        hand past the scenario's wall, whose force is neither weight nor
        inertia.

    The nuisance columns are removed first (Frisch-Waugh-Lovell theorem:
    regressing every column on the per-joint friction columns, joint by joint,
    and fitting the residuals gives the coefficients of the full least
    squares; Lovell, "Seasonal adjustment of economic time series and
    multiple regression analysis", *J. Am. Stat. Assoc.* 58(304):993-1010,
    1963).  A joint that does not move has zero friction columns and loses
    nothing.  Returns (None, None) if :math:`g` and :math:`M\\ddot q` (with
    :math:`C\\dot q`, if given and not zero) are not independent after that.
    """
    cols = [np.asarray(tau_gravity, dtype=float), np.asarray(tau_inertia, dtype=float)]
    y = np.asarray(tau_interaction, dtype=float)
    if tau_coriolis is not None:
        cols.append(np.asarray(tau_coriolis, dtype=float))
    if exclude is not None:
        ex = np.asarray(exclude, dtype=bool)
        if ex.shape != (len(y),):
            raise ValueError(f"exclude must hold one flag per tick, shape ({len(y)},); got shape {ex.shape}")
        y, cols = y[~ex], [c[~ex] for c in cols]
        dq = None if dq is None else np.asarray(dq, dtype=float)[~ex]
    if dq is not None:
        v = np.asarray(dq, dtype=float)
        if v.shape != y.shape:
            raise ValueError(f"dq must have the shape of tau_interaction, {y.shape}; got {v.shape}")
        if not coulomb_smoothing_rad_s > 0:
            raise ValueError(f"coulomb_smoothing_rad_s must be > 0 [rad/s], got {coulomb_smoothing_rad_s!r}")
        y, cols = _without_friction(y, cols, v, coulomb_smoothing_rad_s)
    y = y.ravel()
    X = np.column_stack([c.ravel() for c in cols])
    if X.shape[1] == 3 and not np.any(X[:, 2]):  # no velocity, no velocity-product torque: nothing to fit
        X = X[:, :2]
    if len(y) < 4:
        return None, None
    coef, _, rank, _ = np.linalg.lstsq(X, y, rcond=None)  # its rank: numpy.linalg.matrix_rank's, without a copy
    if rank < X.shape[1]:
        return None, None
    return float(coef[0]), float(coef[1])


def _without_friction(y: np.ndarray, cols: list[np.ndarray], dq: np.ndarray, v_s: float
                      ) -> tuple[np.ndarray, list[np.ndarray]]:
    """``y`` and ``cols`` (each (N, nv)) less their least-squares projection, joint by joint, on that joint's
    friction columns :math:`\\dot q_j` and :math:`\\tanh(\\dot q_j / v_s)` (see :func:`compensation_shares`)."""
    out = np.stack([y] + cols, axis=-1)  # (N, nv, 1 + len(cols)), a new array: projected in place
    for j in range(dq.shape[1]):
        F = np.column_stack([dq[:, j], np.tanh(dq[:, j] / v_s)])
        if not np.any(F):
            continue
        out[:, j] -= F @ np.linalg.lstsq(F, out[:, j], rcond=None)[0]
    return out[..., 0], [out[..., i + 1] for i in range(len(cols))]


def robot_interaction_terms(arm, arrays: Mapping[str, np.ndarray], cuff_frames: Sequence[str], dt_s: float
                            ) -> dict[str, np.ndarray]:
    """Per-tick robot-side quantities for the transparency metrics, from the logged true state.

    With pinocchio on the run's own robot model ``arm`` (:class:`models.arm.ArmModel`):
    the cuff frames' spatial velocities (``getFrameVelocity``, LOCAL, the frame
    of ``cuff_wrench_exo``), :math:`\\tau_{int} = \\sum_c J_c^T w_c`
    (``getFrameJacobian``, LOCAL), :math:`g(q)`, :math:`M(q)\\ddot q`
    (:math:`\\ddot q` the central difference of ``dq_exo``), the
    velocity-product (Coriolis and centrifugal) torque
    :math:`C(q,\\dot q)\\dot q` (``tau_coriolis``: ``data.nle - data.g``, the
    recursive Newton-Euler torque at zero acceleration less gravity;
    Featherstone, *Rigid Body Dynamics Algorithms*, 2008, ch. 5), the kinetic energy
    :math:`\\tfrac12 \\dot q^T M \\dot q` and the potential energy. One
    ``computeAllTerms`` per tick gives the kinematics, Jacobians, M, the
    nonlinear effects, g and the potential energy (the same values as the
    separate algorithms, to rounding; tested); the products over the cuffs and
    joints run on all ticks at once.
    """
    model = arm.model
    data = model.createData()
    q, dq = np.asarray(arrays["q_exo"]), np.asarray(arrays["dq_exo"])
    w = _derived_column(arrays, "cuff_wrench_exo")
    n, nv = q.shape[0], model.nv
    ddq = np.gradient(dq, dt_s, axis=0) if n > 2 else np.zeros_like(dq)
    fids = [model.getFrameId(f) for f in cuff_frames]
    out = {k: np.zeros((n, nv)) for k in ("tau_interaction", "tau_gravity", "tau_inertia", "tau_coriolis")}
    out["cuff_twist"] = twist = np.zeros(w.shape)
    out["kinetic_J"] = np.zeros(n)
    out["potential_J"] = potential = np.zeros(n)
    gravity, coriolis = out["tau_gravity"], out["tau_coriolis"]
    local = pin.ReferenceFrame.LOCAL
    all_terms, placements, velocity, jacobian = (pin.computeAllTerms, pin.updateFramePlacements, pin.getFrameVelocity,
                                                 pin.getFrameJacobian)
    # the Jacobians and mass matrices of a block of ticks, so that memory does not grow with the run's length
    block = max(1, min(n, _TERMS_BLOCK))
    jac, M = np.zeros((block, len(fids), 6, nv)), np.zeros((block, nv, nv))
    lower = np.tril_indices(nv, -1)
    for start in range(0, n, block):
        end = min(start + block, n)
        for i, k in enumerate(range(start, end)):
            all_terms(model, data, q[k], dq[k])
            placements(model, data)
            for c, fid in enumerate(fids):
                twist[k, c] = velocity(model, data, fid, local).vector
                jac[i, c] = jacobian(model, data, fid, local)
            M[i] = data.M  # the upper triangle (crba's), mirrored below
            gravity[k] = data.g
            coriolis[k] = data.nle - data.g
            potential[k] = data.potential_energy
        m = end - start
        Mb = M[:m]
        Mb[:, lower[0], lower[1]] = Mb[:, lower[1], lower[0]]
        out["tau_interaction"][start:end] = np.einsum("kcrj,kcr->kj", jac[:m], w[start:end])
        out["tau_inertia"][start:end] = np.einsum("kij,kj->ki", Mb, ddq[start:end])
        out["kinetic_J"][start:end] = 0.5 * np.einsum("ki,kij,kj->k", dq[start:end], Mb, dq[start:end])
    return out


#: ticks per block of :func:`robot_interaction_terms` (its scratch memory: about 8 kB per tick)
_TERMS_BLOCK = 1024


def _derived_column(arrays: Mapping[str, np.ndarray], name: str) -> np.ndarray:
    """A column of :func:`sim.analysis.derived.cuff_columns`, with an error that says where to get it."""
    try:
        return np.asarray(arrays[name])
    except KeyError:
        raise KeyError(f"no column {name!r} in the arrays: the run log does not store it; pass "
                       "run.arrays | sim.analysis.derived.cuff_columns(run)") from None


# -- safety -------------------------------------------------------------------------------------
#: Quasi-static force limits [N] per body region, ISO/TS 15066:2016 Annex A ([ISO15066]_):
#: hand and fingers 140 N (confirmed); upper arm and elbow 150 N, lower arm and wrist 160 N (from memory,
#: unconfirmed).  Keyed by the default cuff names; a scenario may override or add (``force_limits_N``).
#: The same mapping as the safety monitor's (:data:`controllers.safety.BODY_REGION_FORCE_LIMITS_N`).
BODY_REGION_FORCE_LIMITS_N: Mapping[str, float] = SAFETY_FORCE_LIMITS_N


def force_limit_exceed_count(cuff_wrench: np.ndarray, names: Sequence[str], limits_N: Mapping[str, float]) -> int:
    """Number of ticks in which any cuff's force magnitude exceeds its body-region limit (cuffs without a limit
    are not counted)."""
    f = np.linalg.norm(np.asarray(cuff_wrench)[..., :3], axis=-1)
    lim = np.array([limits_N.get(nm, np.inf) for nm in names], dtype=float)
    return int(np.count_nonzero(np.any(f > lim, axis=-1))) if f.size else 0


def safety_trips(arrays: Mapping[str, np.ndarray], cuff_names: Sequence[str], joint_names: Sequence[str] | None,
                 dt_s: float) -> list[dict]:
    """The safety monitor's trips from its logged diagnostics (``diag_safety_tripped``, ``diag_safety_reason``,
    ``diag_safety_value``, ``diag_safety_limit``, ``diag_safety_where``; :class:`controllers.safety.Supervised`).

    A trip is a tick where ``safety_tripped`` rises to 1 (or a tick where the reason changes while tripped: a
    release and a new trip on the same tick).  Each is ``{"reason", "t_s", "value", "limit"}`` plus ``"cuff"``
    (a force trip) or ``"joint"`` (a speed or torque trip) by name, and ``"released_s"``: the time of the first
    tick after it with ``safety_tripped`` 0 (None if it stayed latched to the end).
    """
    tripped = np.asarray(arrays["diag_safety_tripped"], dtype=float) > 0.5
    reason = np.asarray(arrays["diag_safety_reason"], dtype=float)
    value = np.asarray(arrays.get("diag_safety_value", np.full(len(tripped), np.nan)), dtype=float)
    limit = np.asarray(arrays.get("diag_safety_limit", np.full(len(tripped), np.nan)), dtype=float)
    where = np.asarray(arrays.get("diag_safety_where", np.full(len(tripped), -1.0)), dtype=float)
    t = np.asarray(arrays["t"], dtype=float) if "t" in arrays else np.arange(len(tripped)) * dt_s
    prev_tripped = np.concatenate([[False], tripped[:-1]])
    prev_reason = np.concatenate([[0.0], reason[:-1]])
    starts = np.flatnonzero(tripped & (~prev_tripped | (reason != prev_reason)))
    off = np.flatnonzero(~tripped)
    out = []
    for k in starts:
        name = TRIP_REASONS.get(int(reason[k]), f"code {int(reason[k])}")
        trip = {"reason": name, "t_s": float(t[k]), "value": _finite_or_none(value[k]),
                "limit": _finite_or_none(limit[k])}
        i = int(where[k])
        if name == "cuff_force":
            trip["cuff"] = cuff_names[i] if 0 <= i < len(cuff_names) else None
        elif name in ("joint_speed", "joint_torque"):
            trip["joint"] = joint_names[i] if joint_names is not None and 0 <= i < len(joint_names) else i
        later = off[off > k]
        trip["released_s"] = float(t[later[0]]) if later.size else None
        out.append(trip)
    return out


def _finite_or_none(x: float) -> float | None:
    return float(x) if np.isfinite(x) else None


def safety_metrics(arrays: Mapping[str, np.ndarray], cuff_names: Sequence[str], joint_names: Sequence[str] | None,
                   dt_s: float) -> dict:
    """``safety_trip_count`` and ``safety_trips`` (:func:`safety_trips`); None and [] for a run without the
    safety monitor (``Scenario.safety=None``, or the ``zero`` variant)."""
    if "diag_safety_tripped" not in arrays or "diag_safety_reason" not in arrays:
        return {"safety_trip_count": None, "safety_trips": []}
    trips = safety_trips(arrays, cuff_names, joint_names, dt_s)
    return {"safety_trip_count": len(trips), "safety_trips": trips}


# -- solver -------------------------------------------------------------------------------------
def _median_p99_us(x) -> tuple[float | None, float | None]:
    x = np.asarray(x, dtype=float)
    x = x[np.isfinite(x)]
    if not x.size:
        return None, None
    return float(np.median(x) * 1e6), float(np.percentile(x, 99) * 1e6)


def solver_metrics(timing: Mapping[str, np.ndarray], fallback: np.ndarray | None,
                   qp_solves: np.ndarray | None = None) -> dict:
    """Solve-time median and 99th percentile per tick [us] (``diag_solve_time_s`` of ``timing.npz``) and per
    level (``diag_level_i_time_s``), the number and share of fallback ticks, and the number of ticks on which the QP
    backend solved a level (``qp_solves`` > 0, the controller's ``diag_qp_solves``; None for a run logged
    without it); None for a controller without a QP."""
    if "diag_solve_time_s" not in timing:
        return {"hqp_solve_median_us": None, "hqp_solve_p99_us": None, "hqp_fallback_count": None,
                "hqp_fallback_fraction": None, "hqp_backend_tick_count": None, "hqp_levels": []}
    med, p99 = _median_p99_us(timing["diag_solve_time_s"])
    levels = []
    i = 0
    while f"diag_level_{i}_time_s" in timing:
        lm, lp = _median_p99_us(timing[f"diag_level_{i}_time_s"])
        levels.append({"level": i, "solve_median_us": lm, "solve_p99_us": lp})
        i += 1
    n_fb = int(np.count_nonzero(np.asarray(fallback) > 0.5)) if fallback is not None else 0
    n_qp = int(np.count_nonzero(np.asarray(qp_solves) > 0.5)) if qp_solves is not None else None
    n_ticks = len(fallback) if fallback is not None else 0
    return {"hqp_solve_median_us": med, "hqp_solve_p99_us": p99, "hqp_fallback_count": n_fb,
            "hqp_fallback_fraction": n_fb / n_ticks if n_ticks else None,
            "hqp_backend_tick_count": n_qp, "hqp_levels": levels}


# -- completion of the intended movement --------------------------------------------------------
#: The hand is at the target within this distance [m] (2 cm, common practice for reaching tasks).
TARGET_TOLERANCE_M = 0.02
#: An intended hand displacement shorter than this [m] is no movement: the completion keys are then None.
MIN_INTENDED_DISPLACEMENT_M = 1e-3


def intended_reach(p_hand_intent: np.ndarray) -> tuple[np.ndarray, np.ndarray, int]:
    """The start, the target and the start tick of an intended hand path (N, 3) [m].

    The start is the intended hand position at the first tick, the target the
    intended position farthest from it, the start tick the last tick before
    the intended hand first moves (the end of the initial hold).
    """
    p = np.asarray(p_hand_intent, dtype=float)
    start = p[0]
    d = np.linalg.norm(p - start, axis=1)
    moved = np.flatnonzero(d > 0.0)
    k0 = max(int(moved[0]) - 1, 0) if len(moved) else 0
    return start, p[int(np.argmax(d))], k0


def movement_completion(p_hand: np.ndarray, start: np.ndarray, target: np.ndarray) -> float | None:
    r"""Share of the intended hand displacement reached.

    .. math::
        c = \mathrm{clip}\Big(\max_k \frac{(p_k - p_s) \cdot (p_t - p_s)}{\lVert p_t - p_s \rVert^2},
        0, 1\Big)

    the hand's greatest progress along start -> target over the distance (None when
    :math:`\lVert p_t - p_s \rVert` < :data:`MIN_INTENDED_DISPLACEMENT_M`: no intended movement).
    """
    p, s, g = (np.asarray(x, dtype=float) for x in (p_hand, start, target))
    D = g - s
    L2 = float(D @ D)
    if len(p) == 0 or L2 < MIN_INTENDED_DISPLACEMENT_M ** 2:
        return None
    return float(np.clip(np.max((p - s) @ D) / L2, 0.0, 1.0))


def time_to_target_s(t_s: np.ndarray, p_hand: np.ndarray, target: np.ndarray, t_start_s: float,
                     tolerance_m: float = TARGET_TOLERANCE_M) -> float | None:
    r"""Time from ``t_start_s`` (the start of the intended move) to the first tick at or after it with the hand
    within ``tolerance_m`` of ``target`` [s]; None if never.

    For a hand on a minimum-jerk path of distance L and duration T [FlashHogan1985]_, it is
    :math:`\tau^* T` with :math:`x(\tau^*) = 10\tau^{*3} - 15\tau^{*4} + 6\tau^{*5} = 1 - \mathrm{tol}/L`,
    to one tick.
    """
    t, p = np.asarray(t_s, dtype=float), np.asarray(p_hand, dtype=float)
    inside = (np.linalg.norm(p - np.asarray(target, dtype=float), axis=1) <= tolerance_m) & (t >= t_start_s)
    k = np.flatnonzero(inside)
    return float(t[k[0]] - t_start_s) if len(k) else None


def completion_metrics(t_s: np.ndarray, p_hand: np.ndarray, p_hand_intent: np.ndarray) -> dict:
    """``movement_completion`` and ``time_to_target_s`` of a run: the wearer's hand (N, 3) against the intended
    hand path (N, 3) [m] (the forward kinematics of the logged intent); both None without an intended movement."""
    if len(t_s) == 0:
        return {"movement_completion": None, "time_to_target_s": None}
    start, target, k0 = intended_reach(p_hand_intent)
    c = movement_completion(p_hand, start, target)
    return {"movement_completion": c,
            "time_to_target_s": None if c is None else time_to_target_s(t_s, p_hand, target, float(t_s[k0]))}


# -- one run ------------------------------------------------------------------------------------
def run_metrics(
    arrays: Mapping[str, np.ndarray],
    *,
    cuff_names: Sequence[str],
    baseline: Mapping[str, np.ndarray] | None,
    dt_s: float,
    tick_times_s: np.ndarray,
    timing: Mapping[str, np.ndarray] | None = None,
    robot_terms: Mapping[str, np.ndarray] | None = None,
    limits_rad: tuple[np.ndarray, np.ndarray] | None = None,
    force_limits_N: Mapping[str, float] | None = None,
    hand_cuff: int | None = None,
    wall_contact: np.ndarray | None = None,
    coulomb_smoothing_rad_s: float = 0.01,
    joint_names: Sequence[str] | None = None,
) -> dict:
    """The ``metrics.json`` of a coupled run (keys exactly as documented in the README).

    ``robot_terms`` (:func:`robot_interaction_terms`) adds the work and
    compensation-share keys; ``limits_rad`` the joint-limit keys;
    ``wall_contact`` (bool per tick: the hand past the plane of the
    scenario's wall, whether or not the variant renders it, so that every
    variant is measured over the same stretch of the movement) leaves those
    ticks out of the felt mass, of the compensation shares and of
    ``interaction_force_free_rms_N``; ``coulomb_smoothing_rad_s`` is the
    plant's (:class:`sim.physics.plant.PlantParams`), for the friction columns
    of :func:`compensation_shares`; ``joint_names`` (the robot's) name the joint of a
    safety trip (:func:`safety_metrics`; without them, its index); the others default as documented.
    """
    n = len(arrays["t"])
    wall = float(np.sum(tick_times_s))
    effort = human_effort_rms_Nm(arrays["tau_human"])
    w_h = arrays["cuff_wrench_human"]
    limits = dict(BODY_REGION_FORCE_LIMITS_N if force_limits_N is None else force_limits_N)
    cuffs = cuff_force_metrics(w_h, cuff_names)
    for name, c in cuffs.items():
        lim = limits.get(name)
        c["force_limit_N"] = lim
        c["force_limit_ratio"] = c["force_peak_N"] / lim if lim else None
    hand = hand_cuff_index(cuff_names) if hand_cuff is None else hand_cuff
    torque = interaction_torque_norm_Nm(w_h)
    mass = apparent_mass_fit(_derived_column(arrays, "cuff_force_human_world")[:, hand], arrays["p_hand_human"],
                             dt_s, exclude=wall_contact)
    out = {
        "sim_duration_s": n * dt_s,
        "interaction_force_rms_N": interaction_force_rms_N(w_h),
        "interaction_force_free_rms_N": interaction_force_free_rms_N(w_h, wall_contact),
        "interaction_force_peak_N": interaction_force_peak_N(w_h),
        "interaction_torque_rms_Nm": float(np.sqrt(np.mean(torque * torque))) if n else 0.0,
        "interaction_torque_peak_Nm": float(torque.max()) if n else 0.0,
        "cuffs": cuffs,
        "interaction_work_J": None,
        "interaction_power_peak_W": None,
        "apparent_mass_hand_kg": mass.mass_kg,
        "apparent_mass_hand_r2": mass.r2,
        "apparent_mass_hand_ci95_kg": mass.ci95_kg,
        "apparent_mass_hand_note": mass.reason,
        "gravity_share_left": None,
        "inertia_share_left": None,
        "human_effort_rms_Nm": effort,
        "human_effort_ratio": None,
        "path_deviation_rms_rad": None,
        "torque_saturation_fraction": torque_saturation_fraction(arrays["saturated"]),
        "torque_saturated_ticks": int(np.count_nonzero(np.any(np.asarray(arrays["saturated"], bool), axis=-1))),
        "joint_limit_violation_count": None,
        "joint_limit_excursion_max_rad": None,
        "force_limit_exceed_count": force_limit_exceed_count(w_h, cuff_names, limits),
        "tick_time_median_us": float(np.median(tick_times_s) * 1e6) if len(tick_times_s) else 0.0,
        "tick_time_p99_us": float(np.percentile(tick_times_s, 99) * 1e6) if len(tick_times_s) else 0.0,
        "realtime_factor": (n * dt_s / wall) if wall > 0 else None,
    }
    out |= solver_metrics(timing or {}, arrays.get("diag_fallback"), arrays.get("diag_qp_solves"))
    out |= safety_metrics(arrays, cuff_names, joint_names, dt_s)
    if robot_terms is not None:
        P = interaction_power_W(_derived_column(arrays, "cuff_wrench_exo"), robot_terms["cuff_twist"])
        out["interaction_work_J"] = interaction_work_J(P, dt_s)
        out["interaction_power_peak_W"] = float(np.abs(P).max()) if n else 0.0
        out["gravity_share_left"], out["inertia_share_left"] = compensation_shares(
            robot_terms["tau_interaction"], robot_terms["tau_gravity"], robot_terms["tau_inertia"],
            tau_coriolis=robot_terms.get("tau_coriolis"), dq=arrays.get("dq_exo"),
            coulomb_smoothing_rad_s=coulomb_smoothing_rad_s, exclude=wall_contact)
        share = out["gravity_share_left"]
        if share is not None and share > 0.5:
            # most of the robot's weight is left to the wearer: that posture-dependent force is confounded with
            # inertia on out-and-back paths, and the fit of apparent_mass_fit means nothing (see its docstring)
            out["apparent_mass_hand_kg"] = None
            out["apparent_mass_hand_note"] = (
                f"most of the robot's weight is left to the wearer (gravity_share_left = {share:.2f} > 0.5): a "
                "weight that varies with the posture passes for inertia" + (f"; also {mass.reason}" if mass.reason
                                                                             else ""))
    if limits_rad is not None:
        lo, hi = limits_rad
        out["joint_limit_violation_count"] = joint_limit_violation_count(arrays["q_exo"], lo, hi)
        out["joint_limit_excursion_max_rad"] = joint_limit_excursion_max_rad(arrays["q_exo"], lo, hi)
    if baseline is not None:
        base = human_effort_rms_Nm(baseline["tau_human"])
        out["human_effort_ratio"] = effort / base if base > 0 else None
        out["path_deviation_rms_rad"] = path_deviation_rms_rad(arrays["q_human"], baseline["q_human"])
    return out


# -- the key registry ---------------------------------------------------------------------------
@dataclass(frozen=True)
class MetricInfo:
    """What a metric key means for a comparison.

    ``better``: ``"lower"``, ``"higher"``, ``"zero"`` (closest to 0), ``"one"``
    (closest to 1), ``"commanded"`` (closest to the commanded value, the key
    ``reference`` of the same run) or None (no better side).  ``summary``:
    shown in sweep summaries.
    """

    unit: str
    better: str | None
    label: str
    summary: bool = False
    reference: str | None = None

    def __post_init__(self):
        if (self.better == "commanded") != (self.reference is not None):
            raise ValueError(f"MetricInfo {self.label!r}: better='commanded' needs a reference key, and a reference "
                             f"key needs better='commanded'; got better={self.better!r}, reference={self.reference!r}")


#: Every top-level scalar key of ``metrics.json``, in the order tables show them (all numbers or None but
#: ``apparent_mass_hand_note``, a string or None).
METRICS: Mapping[str, MetricInfo] = MappingProxyType({
    "interaction_force_rms_N": MetricInfo("N", "lower", "interaction force, RMS", True),
    "interaction_force_free_rms_N": MetricInfo("N", "lower", "interaction force outside the wall, RMS", True),
    "interaction_force_peak_N": MetricInfo("N", "lower", "interaction force, peak", True),
    "interaction_torque_rms_Nm": MetricInfo("N m", "lower", "interaction torque, RMS"),
    "interaction_torque_peak_Nm": MetricInfo("N m", "lower", "interaction torque, peak"),
    "interaction_work_J": MetricInfo("J", "zero", "net work of the human on the robot", True),
    "interaction_power_peak_W": MetricInfo("W", "lower", "interaction power, peak"),
    "apparent_mass_hand_kg": MetricInfo("kg", "zero", "felt mass at the hand", True),
    "apparent_mass_hand_r2": MetricInfo("-", None, "felt mass at the hand, R² of its fit"),
    "apparent_mass_hand_ci95_kg": MetricInfo("kg", None, "felt mass at the hand, 95 % half-width"),
    "apparent_mass_hand_note": MetricInfo("", None, "felt mass at the hand, why it is null"),
    "gravity_share_left": MetricInfo("-", "zero", "share of robot gravity left to the human", True),
    "inertia_share_left": MetricInfo("-", "zero", "share of robot inertia left to the human", True),
    "human_effort_rms_Nm": MetricInfo("N m", "lower", "human joint effort, RMS"),
    "human_effort_ratio": MetricInfo("-", "one", "human effort / human alone", True),
    "path_deviation_rms_rad": MetricInfo("rad", "lower", "path deviation from human alone, RMS", True),
    "wall_stiffness_commanded_N_per_m": MetricInfo("N/m", None, "wall stiffness, commanded"),
    "wall_stiffness_rendered_N_per_m": MetricInfo("N/m", "commanded", "wall stiffness at the hand", True,
                                                  reference="wall_stiffness_commanded_N_per_m"),
    "wall_stiffness_rendered_robot_N_per_m": MetricInfo("N/m", "commanded", "wall stiffness at the robot",
                                                        reference="wall_stiffness_commanded_N_per_m"),
    "wall_damping_commanded_N_s_per_m": MetricInfo("N s/m", None, "wall damping, commanded"),
    "wall_damping_rendered_N_s_per_m": MetricInfo("N s/m", "commanded", "wall damping at the hand",
                                                  reference="wall_damping_commanded_N_s_per_m"),
    "wall_penetration_max_m": MetricInfo("m", "lower", "wall penetration, max", True),
    "wall_energy_returned_J": MetricInfo("J", "lower", "wall energy returned, worst cycle", True),
    "wall_bounce_count": MetricInfo("-", "lower", "wall contact bounces"),
    "wall_contact_count": MetricInfo("-", None, "wall contacts"),
    "torque_saturation_fraction": MetricInfo("-", "lower", "ticks with a saturated joint", True),
    "torque_saturated_ticks": MetricInfo("-", "lower", "saturated ticks"),
    "drive_model": MetricInfo("", None, "drive model (ideal, lag, series_elastic)"),
    "torque_tracking_rms_Nm": MetricInfo("N m", "lower", "commanded less delivered joint torque, RMS"),
    "torque_bandwidth_Hz": MetricInfo("Hz", "higher", "torque bandwidth per joint, output locked (-3 dB)"),
    "motor_saturation_fraction": MetricInfo("-", "lower", "ticks with a motor torque at its limit"),
    "joint_limit_violation_count": MetricInfo("-", "lower", "ticks past a joint limit", True),
    "joint_limit_excursion_max_rad": MetricInfo("rad", "lower", "joint-limit excursion, max"),
    "force_limit_exceed_count": MetricInfo("-", "lower", "ticks above a body-region force limit", True),
    "hqp_solve_median_us": MetricInfo("us", "lower", "HQP solve time, median", True),
    "hqp_solve_p99_us": MetricInfo("us", "lower", "HQP solve time, 99th percentile"),
    "hqp_fallback_count": MetricInfo("-", "lower", "fallback ticks", True),
    "hqp_fallback_fraction": MetricInfo("-", "lower", "share of fallback ticks"),
    "safety_trip_count": MetricInfo("-", "lower", "safety monitor trips", True),
    "hqp_backend_tick_count": MetricInfo("-", "lower", "ticks needing the QP backend"),
    "tick_time_median_us": MetricInfo("us", "lower", "whole tick, median"),
    "tick_time_p99_us": MetricInfo("us", "lower", "whole tick, 99th percentile"),
    "realtime_factor": MetricInfo("-", "higher", "realtime factor", True),
    "sim_duration_s": MetricInfo("s", None, "simulated time"),
    "fault_count": MetricInfo("-", None, "faults of the scenario"),
    "movement_completion": MetricInfo("-", "one", "share of the intended hand displacement reached", True),
    "time_to_target_s": MetricInfo("s", "lower", "time to the target within 2 cm"),
    "assistance_work_J": MetricInfo("J", None, "positive work of the robot on the wearer", True),
    "assistance_share": MetricInfo("-", None, "robot's share of the positive work on the arm", True),
    "path_error_rms_m": MetricInfo("m", "lower", "hand error from the reference path, RMS", True),
    "assist_stiffness_peak_N_per_m": MetricInfo("N/m", None, "assist-as-needed stiffness, peak"),
    "assist_stiffness_final_N_per_m": MetricInfo("N/m", None, "assist-as-needed stiffness, at the end"),
})

#: Keys that measure this machine's wall clock: they differ between executors and runs; every other key is a
#: function of (scenario, controller, subject, seed) alone.
TIMING_KEYS = frozenset({"hqp_solve_median_us", "hqp_solve_p99_us", "tick_time_median_us", "tick_time_p99_us",
                         "realtime_factor"})


def is_timing_key(key: str) -> bool:
    """Whether a (flat) metric key measures wall-clock time: :data:`TIMING_KEYS` and the per-level solve times."""
    return key in TIMING_KEYS or key.startswith("hqp_levels.")


def flat_metrics(metrics: Mapping) -> dict:
    """Scalar metrics as one flat dict: top-level scalars as they are, per-cuff values as ``cuffs.NAME.KEY``,
    per-level solve times as ``hqp_levels.I.KEY``, per-joint drive bandwidths as ``torque_bandwidth_Hz.JOINT``;
    lists of cycles are left out."""
    out = {}
    for k, v in metrics.items():
        if k == "cuffs" and isinstance(v, Mapping):
            for name, d in v.items():
                for kk, vv in d.items():
                    out[f"cuffs.{name}.{kk}"] = vv
        elif k == "hqp_levels" and isinstance(v, list):
            for d in v:
                for kk, vv in d.items():
                    if kk != "level":
                        out[f"hqp_levels.{d['level']}.{kk}"] = vv
        elif k == "torque_bandwidth_Hz" and isinstance(v, Mapping):
            for joint, f in v.items():
                out[f"torque_bandwidth_Hz.{joint}"] = f
        elif v is None or isinstance(v, (int, float, bool, str)):
            out[k] = v
    return out
