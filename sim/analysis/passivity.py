"""The passivity boundary of a sampled virtual wall (Colgate & Schenkel 1997), with virtual damping and delay.

A device of mass m and physical viscous damping b renders, at period T, the
sampled wall

.. math:: F_k = K x_{k-d} + B \\, (x_{k-d} - x_{k-d-1}) / T,
          \\qquad H(z) = \\left(K + B \\frac{1 - z^{-1}}{T}\\right) z^{-d}

held by a zero-order hold.  It is passive (the operator can never take
energy out of it) if and only if, for every :math:`0 \\le \\omega \\le \\pi/T`,

.. math:: b > \\frac{T}{2} \\,
          \\frac{\\mathrm{Re}\\{(1 - e^{-j\\omega T}) H(e^{j\\omega T})\\}}{1 - \\cos \\omega T}

(Colgate & Schenkel 1997, their condition for a ZOH device with a physical
damper, the worst input being a piecewise-constant velocity).  Closed forms:
:math:`b > KT/2 + |B|` without delay (Colgate & Schenkel 1997; Colgate &
Brown 1994), and :math:`b > KT(2d + 1)/2` for a pure spring delayed by d
samples (Diolaiti et al. 2006, their form quoted from memory).  With B and a
delay together the bound is NOT the sum: K = 2000 N/m, T = 1 ms, B = 0.5
N s/m, d = 1 gives 2.5 N s/m, not 3.5; this module evaluates the condition
numerically on a fine frequency grid.

References
----------
.. [ColgateSchenkel1997] Colgate J.E., Schenkel G.G. (1997), "Passivity of a class of sampled-data systems:
   application to haptic interfaces", Journal of Robotic Systems 14(1):37-47.
.. [ColgateBrown1994] Colgate J.E., Brown J.M. (1994), "Factors affecting the Z-width of a haptic display",
   Proc. IEEE International Conference on Robotics and Automation, 3205-3210.
.. [Diolaiti2006] Diolaiti N., Niemeyer G., Barbagli F., Salisbury J.K. (2006), "Stability of haptic rendering:
   discretization, quantization, time delay, and Coulomb effects", IEEE Transactions on Robotics
   22(2):256-268.
"""

from __future__ import annotations

import math

import numpy as np

from models.errors import ParameterError

__all__ = ["passivity_damping_N_s_per_m", "max_passive_stiffness_N_per_m", "passivity_condition",
           "FREQUENCY_POINTS"]

#: Frequencies in (0, pi/T] at which the condition is evaluated (plus the closed-form limit at 0): fine enough
#: that the maximum is found to far better than 0.1 % for delays up to tens of samples (common practice).
FREQUENCY_POINTS = 20001


def _check(K: float, T: float, B: float, d: int) -> None:
    if not (math.isfinite(K) and K >= 0):
        raise ParameterError(f"stiffness K must be a finite number >= 0 [N/m], got {K!r}")
    if not (math.isfinite(T) and T > 0):
        raise ParameterError(f"period T must be a finite number > 0 [s], got {T!r}")
    if not math.isfinite(B):
        raise ParameterError(f"virtual damping B must be a finite number [N s/m], got {B!r}")
    if isinstance(d, bool) or not isinstance(d, (int, np.integer)) or d < 0:
        raise ParameterError(f"delay_ticks must be an integer >= 0, got {d!r}")


def passivity_condition(K: float, T: float, B: float = 0.0, delay_ticks: int = 0,
                        omega_T: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    """The least physical damping b [N s/m] the condition asks at each normalized frequency :math:`\\omega T`.

    Returns ``(omega_T, b_needed)``: :math:`\\omega T` in (0, pi] [rad] and
    :math:`(T/2)\\,\\mathrm{Re}\\{(1 - e^{-j\\omega T}) H\\}/(1 - \\cos\\omega T)`.
    """
    _check(float(K), float(T), float(B), delay_ticks)
    w = np.linspace(math.pi / FREQUENCY_POINTS, math.pi, FREQUENCY_POINTS) if omega_T is None \
        else np.asarray(omega_T, dtype=float)
    zi = np.exp(-1j * w)  # z^-1 on the unit circle
    H = (K + B * (1.0 - zi) / T) * zi ** int(delay_ticks)
    need = 0.5 * T * np.real((1.0 - zi) * H) / (1.0 - np.cos(w))
    return w, need


def passivity_damping_N_s_per_m(K: float, T: float, B: float = 0.0, delay_ticks: int = 0) -> float:
    """The least physical damping b [N s/m] that keeps the sampled wall passive ([ColgateSchenkel1997]_).

    .. math:: b_{min} = \\max_{0 \\le \\omega \\le \\pi/T} \\frac{T}{2}
              \\frac{\\mathrm{Re}\\{(1 - e^{-j\\omega T}) H(e^{j\\omega T})\\}}{1 - \\cos \\omega T},
              \\quad H(z) = (K + B (1 - z^{-1})/T)\\, z^{-d}

    Closed forms: :math:`KT/2 + |B|` for d = 0; :math:`KT(2d+1)/2` for B = 0
    ([Diolaiti2006]_, from memory).  The limit :math:`\\omega \\to 0` is
    :math:`KT(2d+1)/2 - B` (a first-order expansion), included in the maximum.

    Parameters
    ----------
    K : float [N/m]  virtual stiffness, >= 0.
    T : float [s]    sampling period, > 0.
    B : float [N s/m]  virtual damping (may be negative).
    delay_ticks : int  samples d of delay between the position sample and the force it gives, >= 0.
    """
    _, need = passivity_condition(K, T, B, delay_ticks)
    low = K * T * (2 * int(delay_ticks) + 1) / 2.0 - B  # the omega -> 0 limit
    return float(max(need.max(), low))


def max_passive_stiffness_N_per_m(b: float, T: float, B: float = 0.0, delay_ticks: int = 0) -> float:
    """The largest stiffness K [N/m] that the physical damping b [N s/m] keeps passive (0 if none).

    The condition is linear in K at each frequency, :math:`b \\ge K\\,g(\\omega) + B\\,h(\\omega)`, so
    :math:`K_{max} = \\min_{\\omega: g > 0} (b - B h)/g`, with none if :math:`b < B h` anywhere where
    :math:`g \\le 0` ([ColgateSchenkel1997]_).
    """
    if not (math.isfinite(b) and b >= 0):
        raise ParameterError(f"physical damping b must be a finite number >= 0 [N s/m], got {b!r}")
    w, g = passivity_condition(1.0, T, 0.0, delay_ticks)
    _, h = passivity_condition(0.0, T, B, delay_ticks)
    # the omega -> 0 limits: g -> T(2d+1)/2, h -> -B
    g = np.append(g, T * (2 * int(delay_ticks) + 1) / 2.0)
    h = np.append(h, -B)
    rest = b - h
    if np.any(rest < 0):  # even K = 0 needs more than b somewhere
        return 0.0
    pos = g > 0
    return float(np.min(rest[pos] / g[pos])) if pos.any() else math.inf
