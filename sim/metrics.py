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
