"""The impedance felt at a point: H1 estimate, mass-damper-spring fit, transparency bandwidth.

The mechanical impedance of a port is :math:`Z(j\\omega) = F(j\\omega) / V(j\\omega)`, the force applied to it
over its velocity [N s/m].  From records of force ``f`` and velocity ``v`` it is estimated with the H1
estimator

.. math::  \\hat Z_1(f) = \\frac{S_{vf}(f)}{S_{vv}(f)}, \\qquad
           \\gamma^2(f) = \\frac{|S_{vf}(f)|^2}{S_{vv}(f) S_{ff}(f)},

with Welch-averaged cross- and auto-spectra (``scipy.signal.csd`` and ``scipy.signal.welch``) and the ordinary
coherence :math:`\\gamma^2` (Bendat & Piersol 2010, ch. 9).  H1 is unbiased by noise on the force (the output
here) and biased low by noise on the velocity (the input).

The fitted model is a mass, a damper and a spring in parallel,

.. math::  Z(s) = m s + b + k / s, \\qquad
           \\operatorname{Re} Z(j\\omega) = b, \\quad \\operatorname{Im} Z(j\\omega) = m \\omega - k / \\omega,

linear in (m, b, k): a weighted linear least-squares fit over the frequencies whose coherence reaches a
minimum, each point weighted by :math:`1 / |\\hat Z|` (relative error, so that no decade dominates).

References
----------
J. S. Bendat and A. G. Piersol, *Random Data: Analysis and Measurement Procedures*, 4th ed., Wiley, 2010.
P. D. Welch, "The use of fast Fourier transform for the estimation of power spectra", IEEE Transactions on
Audio and Electroacoustics 15(2):70-73, 1967.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import signal

from models.errors import ParameterError

__all__ = ["h1_impedance", "ImpedanceFit", "fit_impedance", "transparency_bandwidth_Hz",
           "DEFAULT_THRESHOLD_N_S_PER_M", "model_impedance"]

#: Default transparency threshold on the felt impedance |Z| [N s/m]: the impedance of a 1 kg mass at 2 Hz
#: (2 pi x 2 Hz x 1 kg = 12.6 N s/m, rounded to 12.5).  Our choice (no standard gives one): voluntary arm
#: movements of daily life lie mostly below 2 Hz (common practice), and a felt mass of 1 kg is of the order
#: of the wearer's own forearm and hand (about 1.6 kg for a 75 kg man, 2.2 % of body mass, from memory: Winter,
#: *Biomechanics and Motor Control of Human Movement*, 4th ed., 2009, table 4.1), so the robot then adds
#: less than the wearer's own forearm to what the wearer moves.
DEFAULT_THRESHOLD_N_S_PER_M = 12.5


def _series(name: str, x) -> np.ndarray:
    a = np.asarray(x, dtype=float)
    if a.ndim != 1 or a.size < 8 or not np.all(np.isfinite(a)):
        raise ParameterError(f"{name} must be a finite 1-D series of at least 8 samples, got shape "
                             f"{a.shape}" + ("" if np.all(np.isfinite(a)) else " with non-finite values"))
    return a


def h1_impedance(force_N, velocity_m_s, fs_Hz: float, *, segment_s: float = 4.0, overlap: float = 0.5,
                 window: str = "hann") -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The H1 estimate of the impedance Z = F / V and its coherence.

    Parameters
    ----------
    force_N : (n,) array [N]
        The force applied to the port along the direction of motion.
    velocity_m_s : (n,) array [m/s]
        The port's velocity along the same direction.
    fs_Hz : float
        The sampling rate [Hz].
    segment_s : float
        Welch segment length [s] (frequency resolution 1 / segment_s).
    overlap : float
        Fraction of a segment shared with the next, in [0, 1).
    window : str
        ``scipy.signal.get_window`` name ("hann"; "boxcar" for a periodic excitation whose period divides
        the segment).

    Returns
    -------
    freq_Hz : (m,) ndarray [Hz]
    Z : (m,) complex ndarray [N s/m]
        :math:`S_{vf} / S_{vv}` (NaN where the velocity has no power).
    coherence : (m,) ndarray
        :math:`|S_{vf}|^2 / (S_{vv} S_{ff})` in [0, 1].
    """
    f = _series("force_N", force_N)
    v = _series("velocity_m_s", velocity_m_s)
    if f.shape != v.shape:
        raise ParameterError(f"force_N and velocity_m_s must have the same length, got {f.size} and {v.size}")
    if not (isinstance(fs_Hz, (int, float)) and math.isfinite(fs_Hz) and fs_Hz > 0):
        raise ParameterError(f"fs_Hz must be a finite sampling rate > 0 [Hz], got {fs_Hz!r}")
    if not (0 <= overlap < 1):
        raise ParameterError(f"overlap must be in [0, 1), got {overlap!r}")
    nper = int(round(segment_s * fs_Hz))
    if not (8 <= nper <= f.size):
        raise ParameterError(f"segment_s = {segment_s} s must span 8 samples to the whole record "
                             f"({f.size / fs_Hz:g} s at {fs_Hz:g} Hz)")
    kw = dict(fs=fs_Hz, window=window, nperseg=nper, noverlap=int(round(overlap * nper)), detrend="constant")
    freq, s_vf = signal.csd(v, f, **kw)  # conj(V) F, averaged
    _, s_vv = signal.welch(v, **kw)
    _, s_ff = signal.welch(f, **kw)
    with np.errstate(divide="ignore", invalid="ignore"):
        Z = np.where(s_vv > 0, s_vf / s_vv, np.nan + 0j)
        coh = np.where((s_vv > 0) & (s_ff > 0), np.abs(s_vf) ** 2 / (s_vv * s_ff), 0.0)
    return freq, Z, np.clip(coh, 0.0, 1.0)


@dataclass(frozen=True)
class ImpedanceFit:
    """The mass-damper-spring model :math:`Z(s) = m s + b + k / s` fitted to an impedance estimate.

    Attributes
    ----------
    mass_kg, damping_N_s_per_m, stiffness_N_per_m : float
        m, b, k.  ``mass_kg`` is the felt mass.
    r2 : float
        The coefficient of determination of the fit over the fitted points, on the complex values:
        :math:`1 - \\sum |Z - \\hat Z|^2 / \\sum |Z - \\bar Z|^2`.
    n_points : int
        Frequencies used (coherence at least ``min_coherence``, inside the band).
    band_Hz : (float, float)
        The lowest and highest fitted frequency [Hz].
    coherence_range : (float, float)
        The least and greatest coherence over the fitted points.
    """

    mass_kg: float
    damping_N_s_per_m: float
    stiffness_N_per_m: float
    r2: float
    n_points: int
    band_Hz: tuple[float, float]
    coherence_range: tuple[float, float]

    def impedance(self, freq_Hz) -> np.ndarray:
        """The model's Z(j 2 pi f) [N s/m] at ``freq_Hz``."""
        return model_impedance(freq_Hz, self.mass_kg, self.damping_N_s_per_m, self.stiffness_N_per_m)


def model_impedance(freq_Hz, mass_kg: float, damping_N_s_per_m: float, stiffness_N_per_m: float) -> np.ndarray:
    """:math:`Z(j\\omega) = j \\omega m + b + k / (j \\omega)` [N s/m] at ``freq_Hz`` (> 0)."""
    w = 2 * np.pi * np.asarray(freq_Hz, dtype=float)
    return damping_N_s_per_m + 1j * (w * mass_kg - stiffness_N_per_m / w)


def _selected(freq_Hz, Z, coherence, min_coherence: float, band_Hz) -> np.ndarray:
    freq, Z, coh = np.asarray(freq_Hz, dtype=float), np.asarray(Z, dtype=complex), np.asarray(coherence, float)
    if not (freq.shape == Z.shape == coh.shape and freq.ndim == 1):
        raise ParameterError(f"freq_Hz, Z and coherence must be 1-D of one length, got {freq.shape}, {Z.shape}, "
                             f"{coh.shape}")
    if not (0 <= min_coherence <= 1):
        raise ParameterError(f"min_coherence must be in [0, 1], got {min_coherence!r}")
    lo, hi = (0.0, math.inf) if band_Hz is None else (float(band_Hz[0]), float(band_Hz[1]))
    return (freq > 0) & (freq >= lo) & (freq <= hi) & np.isfinite(Z) & (coh >= min_coherence)


def fit_impedance(freq_Hz, Z, coherence, min_coherence: float = 0.9,
                  band_Hz: tuple[float, float] | None = None) -> ImpedanceFit:
    """Fit :math:`Z(s) = m s + b + k / s` to the points with coherence >= ``min_coherence`` (in ``band_Hz``).

    Weighted linear least squares (weights :math:`1 / |\\hat Z|`): b from the real parts, (m, k) from the
    imaginary parts, :math:`\\operatorname{Im} Z = m \\omega - k / \\omega`.

    Raises
    ------
    ParameterError
        With fewer than 3 usable points (naming the coherence threshold).
    """
    freq, Zc, coh = np.asarray(freq_Hz, dtype=float), np.asarray(Z, dtype=complex), np.asarray(coherence, float)
    sel = _selected(freq, Zc, coh, min_coherence, band_Hz)
    if sel.sum() < 3:
        raise ParameterError(f"fit_impedance: {int(sel.sum())} frequencies with coherence >= {min_coherence} "
                             f"in the band; at least 3 expected (raise the excitation or lower min_coherence)")
    f, z, c = freq[sel], Zc[sel], coh[sel]
    w = 2 * np.pi * f
    weight = 1.0 / np.maximum(np.abs(z), 1e-12)
    b = float(np.sum(weight ** 2 * z.real) / np.sum(weight ** 2))
    A = np.column_stack((w, -1.0 / w)) * weight[:, None]
    (m, k), *_ = np.linalg.lstsq(A, z.imag * weight, rcond=None)
    zhat = model_impedance(f, m, b, k)
    ss_tot = float(np.sum(np.abs(z - z.mean()) ** 2))
    r2 = 1.0 - float(np.sum(np.abs(z - zhat) ** 2)) / ss_tot if ss_tot > 0 else float("nan")
    return ImpedanceFit(float(m), b, float(k), r2, int(sel.sum()), (float(f[0]), float(f[-1])),
                        (float(c.min()), float(c.max())))


def transparency_bandwidth_Hz(freq_Hz, Z, coherence, threshold_N_s_per_m: float = DEFAULT_THRESHOLD_N_S_PER_M,
                              min_coherence: float = 0.9, band_Hz: tuple[float, float] | None = None) -> float:
    """The frequency [Hz] up to which the felt impedance stays below a threshold.

    Over the reliable points (coherence >= ``min_coherence``, inside ``band_Hz``) in increasing frequency:
    the last frequency before the first point with :math:`|Z| \\ge` ``threshold_N_s_per_m``; the highest
    reliable frequency if |Z| never reaches it (a lower bound: the bandwidth lies above the band); 0.0 if
    the lowest reliable point already reaches it.  Default threshold: :data:`DEFAULT_THRESHOLD_N_S_PER_M`.
    """
    if not (isinstance(threshold_N_s_per_m, (int, float)) and math.isfinite(threshold_N_s_per_m)
            and threshold_N_s_per_m > 0):
        raise ParameterError(f"threshold_N_s_per_m must be a finite impedance > 0 [N s/m], got "
                             f"{threshold_N_s_per_m!r}")
    freq, Zc = np.asarray(freq_Hz, dtype=float), np.asarray(Z, dtype=complex)
    sel = _selected(freq, Zc, coherence, min_coherence, band_Hz)
    f, mag = freq[sel], np.abs(Zc[sel])
    if f.size == 0:
        raise ParameterError(f"transparency_bandwidth_Hz: no frequency with coherence >= {min_coherence} "
                             "in the band")
    above = np.flatnonzero(mag >= threshold_N_s_per_m)
    if above.size == 0:
        return float(f[-1])
    return 0.0 if above[0] == 0 else float(f[above[0] - 1])
