"""Drive figures of a run: how well the drives deliver the commanded torque, and how fast they can.

Pure functions:

* :func:`torque_tracking_rms_Nm`: the commanded (clipped) torque against the delivered one, over the run;
* :func:`torque_frequency_response` / :func:`torque_bandwidth_Hz`: a dedicated simulated frequency response of
  a drive model with its output locked (:math:`q = \\dot q = 0`), commanded at the control rate as in a run,
  and its -3 dB frequency per joint;
* :func:`drive_metrics`: the ``metrics.json`` keys of a run's drives from its log and ``meta.json``.

References
----------
.. [Ogata2010] K. Ogata, *Modern Control Engineering*, 5th ed., Prentice Hall, 2010 (bandwidth: the frequency at
   which the closed loop's magnitude falls 3 dB below its low-frequency value, section 7-5, from memory).
"""

from __future__ import annotations

import functools
import math
from collections.abc import Callable, Mapping, Sequence

import numpy as np

from sim.physics.actuators import ActuatorParams, Actuators, IdealActuatorParams, make_actuators
from sim.physics.sea import SeriesElasticParams

__all__ = ["torque_tracking_rms_Nm", "torque_frequency_response", "torque_bandwidth_Hz", "series_elastic_bandwidth_Hz",
           "drive_params_from_meta",
           "drive_metrics", "BANDWIDTH_AMPLITUDE_FRACTION", "HALF_POWER_GAIN"]

#: The test sine's amplitude as a share of each joint's torque limit (10 %: well inside the linear range, well
#: above the Coulomb friction; common practice for a small-signal frequency response).
BANDWIDTH_AMPLITUDE_FRACTION = 0.1
#: The -3 dB magnitude, :math:`1/\sqrt 2`.
HALF_POWER_GAIN = 1.0 / math.sqrt(2.0)
#: Settling time before a response is measured [s], then this many periods are measured.
_SETTLE_S, _PERIODS = 0.2, 3


def torque_tracking_rms_Nm(tau_cmd: np.ndarray, tau_applied: np.ndarray, limit_Nm: np.ndarray) -> float | None:
    """RMS over ticks of the joint norm of the commanded torque, clipped to the limits, less the delivered one.

    .. math::

        e_{rms} = \\sqrt{\\frac{1}{N-1}\\sum_{k=0}^{N-2}
                  \\lVert \\operatorname{clip}(\\tau_{cmd,k}, \\pm\\tau_{max}) - \\tau_{applied,k+1} \\rVert^2}

    ``tau_applied`` is logged at a tick's start, before that tick's command acts: the command of tick k is
    compared with the torque at the end of its own tick (row k+1), so that an ideal drive without delay tracks
    with zero error.  A control delay (``Scenario.control_delay_ticks``) counts as a tracking error.

    Parameters
    ----------
    tau_cmd, tau_applied : (N, nv) ndarray [N m]
    limit_Nm : (nv,) ndarray [N m]

    Returns
    -------
    float or None
        [N m]; None for a run shorter than two ticks.
    """
    cmd, app = np.asarray(tau_cmd, dtype=float), np.asarray(tau_applied, dtype=float)
    if len(cmd) < 2:
        return None
    lim = np.asarray(limit_Nm, dtype=float)
    e = np.clip(cmd[:-1], -lim, lim) - app[1:]
    return float(np.sqrt(np.mean(np.sum(e * e, axis=1))))


def torque_frequency_response(make: Callable[[], Actuators], freqs_Hz: np.ndarray, amplitude_Nm: np.ndarray, *,
                              control_period_s: float, substeps: int) -> np.ndarray:
    """The magnitude of the delivered over the commanded torque per joint, output locked, by simulation.

    Each joint j is commanded :math:`A_j \\sin(2\\pi f_j t)` at the control ticks (held over each tick, as in a
    run) for 0.2 s of settling and then 3 periods; the delivered torque at the ticks of those periods is fitted by
    least squares with :math:`a\\sin + b\\cos + c`, and the magnitude is :math:`\\sqrt{a^2 + b^2}/A_j`.

    Parameters
    ----------
    make : callable() -> Actuators
        A new drive model, at rest (each call).
    freqs_Hz : (nv,) ndarray [Hz]
        One test frequency per joint (the joints are independent with the output locked).
    amplitude_Nm : (nv,) ndarray [N m]
    control_period_s : float [s]
    substeps : int
        Physics substeps per control tick.

    Returns
    -------
    (nv,) ndarray
        The magnitude per joint [-].
    """
    f = np.asarray(freqs_Hz, dtype=float)
    A = np.asarray(amplitude_Nm, dtype=float)
    T, h = control_period_s, control_period_s / substeps
    start = int(math.ceil(_SETTLE_S / T))
    n = start + int(math.ceil(_PERIODS / (f.min() * T)))
    act = make()
    act.reset(np.zeros(f.shape[0]))
    q = np.zeros(f.shape[0])
    y = np.zeros((n - start, f.shape[0]))
    t = np.arange(n) * T
    cmd = A * np.sin(2.0 * np.pi * f * t[:, None])
    for k in range(n):
        if k >= start:
            y[k - start] = act.delivered_Nm(q, q)
        act.hold(cmd[k])
        for _ in range(substeps):
            act.substep(q, q, h)
    gains = np.empty(f.shape[0])
    tm = t[start:]
    for j in range(f.shape[0]):
        stop = start + int(math.ceil(_PERIODS / (f[j] * T)))  # this joint's own periods
        m = stop - start
        w = 2.0 * np.pi * f[j] * tm[:m]
        X = np.column_stack([np.sin(w), np.cos(w), np.ones(m)])
        (a, b, _), *_ = np.linalg.lstsq(X, y[:m, j], rcond=None)
        gains[j] = math.hypot(a, b) / A[j]
    return gains


def torque_bandwidth_Hz(make: Callable[[], Actuators], limit_Nm: np.ndarray, *, control_period_s: float,
                        substeps: int, f_min_Hz: float = 1.0, iterations: int = 12) -> list[float | None]:
    """The -3 dB frequency of each joint's drive, output locked: the lowest frequency where the magnitude of
    :func:`torque_frequency_response` falls below :math:`1/\\sqrt 2` ([Ogata2010]_).

    Searched on octaves from ``f_min_Hz`` up to a quarter of the control rate, then refined by ``iterations``
    bisections in log frequency (1/4096 octave).  A joint whose magnitude stays above :math:`1/\\sqrt 2` up to
    there gets None; amplitude :data:`BANDWIDTH_AMPLITUDE_FRACTION` of its torque limit.
    """
    lim = np.asarray(limit_Nm, dtype=float)
    nj = lim.shape[0]
    A = BANDWIDTH_AMPLITUDE_FRACTION * lim
    f_max = 0.25 / control_period_s
    grid = [f_min_Hz * 2.0**i for i in range(64) if f_min_Hz * 2.0**i <= f_max]
    gains = np.array([torque_frequency_response(make, np.full(nj, g), A, control_period_s=control_period_s,
                                                substeps=substeps) for g in grid])
    below = gains < HALF_POWER_GAIN
    lo, hi = np.full(nj, np.nan), np.full(nj, np.nan)
    for j in range(nj):
        idx = np.flatnonzero(below[:, j])
        if idx.size and idx[0] > 0:
            lo[j], hi[j] = grid[idx[0] - 1], grid[idx[0]]
    found = np.isfinite(lo)
    if not found.any():
        return [None] * nj
    lo_f, hi_f = np.where(found, lo, 1.0), np.where(found, hi, 1.0)
    for _ in range(iterations):
        mid = np.sqrt(lo_f * hi_f)
        g = torque_frequency_response(make, mid, A, control_period_s=control_period_s, substeps=substeps)
        lo_f, hi_f = np.where(g >= HALF_POWER_GAIN, mid, lo_f), np.where(g >= HALF_POWER_GAIN, hi_f, mid)
    f3 = np.sqrt(lo_f * hi_f)
    return [float(f3[j]) if found[j] else None for j in range(nj)]


def drive_params_from_meta(drives: Mapping | None):
    """The drive parameter object of ``meta.json``'s ``drives`` (None, a run recorded before drives were: the
    default lag model)."""
    if not drives:
        return ActuatorParams()
    model, p = drives.get("model"), dict(drives.get("parameters") or {})
    if model == "ideal":
        return IdealActuatorParams()
    if model == "series_elastic":
        return SeriesElasticParams(**{k: tuple(v) if isinstance(v, list) else v for k, v in p.items()})
    return ActuatorParams(**p)


@functools.lru_cache(maxsize=32)
def series_elastic_bandwidth_Hz(params: SeriesElasticParams, limit_Nm: tuple[float, ...], control_period_s: float,
                                substeps: int) -> tuple[float | None, ...]:
    """:func:`torque_bandwidth_Hz` of series-elastic drives with these (frozen) parameters, remembered per
    process: the runs of a sweep with the same drives measure it once (about a second each time otherwise)."""
    lim = np.asarray(limit_Nm, dtype=float)
    return tuple(torque_bandwidth_Hz(lambda: make_actuators(params, lim), lim, control_period_s=control_period_s,
                                     substeps=substeps))


def drive_metrics(arrays: Mapping[str, np.ndarray], meta: Mapping, limit_Nm: np.ndarray,
                  joint_names: Sequence[str]) -> dict:
    """The drive keys of a run's ``metrics.json``.

    ``drive_model`` (``meta["drives"]["model"]``), ``torque_tracking_rms_Nm``
    (:func:`torque_tracking_rms_Nm`), ``torque_bandwidth_Hz`` (joint name -> -3 dB frequency [Hz] with the output
    locked: the lag model's closed form :math:`1/(2\\pi T)`, the series-elastic drive's by
    :func:`torque_bandwidth_Hz`; None for an ideal source) and ``motor_saturation_fraction`` (share of ticks with a
    motor at its limit; None unless series-elastic).
    """
    params = drive_params_from_meta(meta.get("drives"))
    model = type(params).model
    out = {"drive_model": model,
           "torque_tracking_rms_Nm": torque_tracking_rms_Nm(arrays["tau_cmd"], arrays["tau_applied"], limit_Nm),
           "torque_bandwidth_Hz": None, "motor_saturation_fraction": None}
    names = list(joint_names)
    if model == "lag":
        out["torque_bandwidth_Hz"] = dict.fromkeys(names, 1.0 / (2.0 * math.pi * params.torque_time_constant_s))
    elif model == "series_elastic":
        bw = series_elastic_bandwidth_Hz(params, tuple(float(x) for x in limit_Nm), float(meta["dt_s"]),
                                         int(meta["substeps"]))
        out["torque_bandwidth_Hz"] = dict(zip(names, bw))
        sat = arrays.get("motor_saturated")
        if sat is not None:
            s = np.asarray(sat, dtype=bool)
            out["motor_saturation_fraction"] = float(np.mean(np.any(s, axis=1))) if len(s) else 0.0
    return out
