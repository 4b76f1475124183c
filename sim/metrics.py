"""Run metrics: pure functions of logged arrays, one per metric.

Notation: :math:`f_{c}(t_k)` is the force part of cuff c's wrench on the
human at tick k, :math:`\\tau_h(t_k)` the human's joint torques, N the number
of ticks.  Every function takes the arrays of :func:`sim.runlog.load_run`.
The keys of :func:`run_metrics` are a contract: they keep their names and
meaning.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence

import numpy as np

__all__ = [
    "interaction_force_norm_N",
    "interaction_force_rms_N",
    "interaction_force_peak_N",
    "cuff_force_metrics",
    "human_effort_rms_Nm",
    "path_deviation_rms_rad",
    "torque_saturation_fraction",
    "run_metrics",
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


def interaction_force_peak_N(cuff_wrench: np.ndarray) -> float:
    """:math:`\\max_k F(t_k)` [N]."""
    F = interaction_force_norm_N(cuff_wrench)
    return float(F.max()) if F.size else 0.0


def cuff_force_metrics(cuff_wrench: np.ndarray, names: Sequence[str]) -> dict[str, dict[str, float]]:
    """Per cuff: ``force_rms_N`` and ``force_peak_N`` of :math:`\\lVert f_c(t_k) \\rVert` [N]."""
    f = np.linalg.norm(np.asarray(cuff_wrench)[..., :3], axis=-1)
    return {
        name: {"force_rms_N": float(np.sqrt(np.mean(f[:, i] ** 2))), "force_peak_N": float(f[:, i].max())}
        for i, name in enumerate(names)
    }


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


def run_metrics(
    arrays: Mapping[str, np.ndarray],
    *,
    cuff_names: Sequence[str],
    baseline: Mapping[str, np.ndarray] | None,
    dt_s: float,
    tick_times_s: np.ndarray,
) -> dict:
    """The ``metrics.json`` of a coupled run (keys exactly as documented in the README)."""
    n = len(arrays["t"])
    wall = float(np.sum(tick_times_s))
    effort = human_effort_rms_Nm(arrays["tau_human"])
    out = {
        "sim_duration_s": n * dt_s,
        "interaction_force_rms_N": interaction_force_rms_N(arrays["cuff_wrench_human"]),
        "interaction_force_peak_N": interaction_force_peak_N(arrays["cuff_wrench_human"]),
        "cuffs": cuff_force_metrics(arrays["cuff_wrench_human"], cuff_names),
        "human_effort_rms_Nm": effort,
        "human_effort_ratio": None,
        "path_deviation_rms_rad": None,
        "torque_saturation_fraction": torque_saturation_fraction(arrays["saturated"]),
        "torque_saturated_ticks": int(np.count_nonzero(np.any(np.asarray(arrays["saturated"], bool), axis=-1))),
        "tick_time_median_us": float(np.median(tick_times_s) * 1e6) if len(tick_times_s) else 0.0,
        "realtime_factor": (n * dt_s / wall) if wall > 0 else None,
    }
    if baseline is not None:
        base = human_effort_rms_Nm(baseline["tau_human"])
        out["human_effort_ratio"] = effort / base if base > 0 else None
        out["path_deviation_rms_rad"] = path_deviation_rms_rad(arrays["q_human"], baseline["q_human"])
    return out


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


def joint_limit_violation_count(q: np.ndarray, lower: np.ndarray, upper: np.ndarray, tol_rad: float = 1e-9) -> int:
    """Number of ticks in which any joint is outside ``[lower - tol, upper + tol]``."""
    q = np.asarray(q)
    return int(np.count_nonzero(np.any((q < np.asarray(lower) - tol_rad) | (q > np.asarray(upper) + tol_rad), axis=-1)))


def wall_metrics(arrays: Mapping[str, np.ndarray], *, point_m, normal, stiffness_N_per_m: float,
                 hand_cuff: int, dt_s: float, lower, upper) -> dict:
    """The wall keys of ``metrics.json`` for a plane wall.

    The force the human feels is the hand cuff's force on the human along
    :math:`-n` (the wall pushes back); the penetration is the human hand
    point's (``wall_stiffness_rendered_N_per_m``) or the robot hand point's
    (``wall_stiffness_rendered_robot_N_per_m``).
    """
    n = np.asarray(normal, dtype=float)
    n = n / np.linalg.norm(n)
    felt = -(np.asarray(arrays["cuff_force_human_world"])[:, hand_cuff, :] @ n)
    pen_h = plane_penetration_m(arrays["p_hand_human"], point_m, n)
    pen_r = plane_penetration_m(arrays["p_hand_exo"], point_m, n)
    return {
        "wall_stiffness_commanded_N_per_m": float(stiffness_N_per_m),
        "wall_stiffness_rendered_N_per_m": rendered_wall_stiffness_N_per_m(felt, pen_h, dt_s),
        "wall_stiffness_rendered_robot_N_per_m": rendered_wall_stiffness_N_per_m(felt, pen_r, dt_s),
        "wall_penetration_max_m": float(max(0.0, pen_h.max())),
        "joint_limit_violation_count": joint_limit_violation_count(arrays["q_exo"], lower, upper),
    }
