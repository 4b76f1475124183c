"""What a real exoskeleton senses: joint encoders, joint torque and a 6-axis force/torque sensor.

The controller sees only these measurements, never the simulator's state.

Both sensors use the same first-order low-pass filter with cut-off
:math:`f_c`, time constant :math:`\\tau_f = 1 / (2 \\pi f_c)`, discretised
exactly for a zero-order-hold input over a tick :math:`\\Delta t`:

.. math::
    y_k = y_{k-1} + \\alpha \\, (u_k - y_{k-1}), \\qquad
    \\alpha = 1 - e^{-2 \\pi f_c \\Delta t},

so that a unit step gives :math:`y_k = 1 - e^{-k \\Delta t / \\tau_f}` exactly
(zero-order-hold equivalent of :math:`1 / (\\tau_f s + 1)`; e.g. Franklin,
Powell & Workman, *Digital Control of Dynamic Systems*, 3rd ed., 1998,
the chapter on discrete equivalents; chapter from memory).

Randomness comes only from the ``numpy.random.Generator`` passed in.  A
sensor whose noise standard deviations are all zero never draws from it.  A
force/torque sensor draws its noise :data:`NOISE_BLOCK_TICKS` ticks at a time
(a Generator gives the same numbers in the same order drawn in one block as
drawn one tick at a time), so give each sensor a Generator of its own, as
:class:`sim.loop.simulation.Simulation` does: a stream shared with another consumer
would be read in a different order.

Both sensors keep preallocated internal buffers; every array they return is
new and read-only, and owns its data or is a row of one that does (the
three joint readings of a tick), so a controller cannot change the sensor
state.  The arithmetic of a tick, and the finiteness check of its input, run
as compiled calls (numba, ``cache=True``); the noise is drawn from the
``Generator`` beforehand, so the random stream is that of NumPy.
:class:`ForceSensorBank` measures several force/torque sensors (one per
cuff) in one compiled call, with the same readings as one by one.
"""

from __future__ import annotations

import math
import operator
from collections.abc import Sequence
from dataclasses import dataclass

import numba
import numpy as np

from models.checks import nonnegative, positive, vector
from models.errors import ParameterError

__all__ = ["EncoderParams", "JointSensing", "ForceSensorParams", "ForceTorqueSensor", "ForceSensorBank",
           "NOISE_BLOCK_TICKS", "MAX_DELAY_TICKS", "lowpass_alpha", "first_nonfinite"]


#: Ticks of noise a force/torque sensor draws from its Generator at once (the same stream as one draw a tick).
NOISE_BLOCK_TICKS = 128


def lowpass_alpha(cutoff_Hz: float, dt_s: float) -> float:
    """Gain :math:`\\alpha = 1 - e^{-2 \\pi f_c \\Delta t}` of the exactly discretised first-order low-pass.

    Parameters
    ----------
    cutoff_Hz : float [Hz]
        Cut-off frequency :math:`f_c`, > 0.
    dt_s : float [s]
        Sample period :math:`\\Delta t`, > 0.

    Returns
    -------
    float
        :math:`\\alpha \\in (0, 1]`.
    """
    return -math.expm1(-2.0 * math.pi * cutoff_Hz * dt_s)


def _check_rng(owner: str, rng: object) -> np.random.Generator:
    if not isinstance(rng, np.random.Generator):
        raise ParameterError(f"{owner}.rng must be a numpy.random.Generator (np.random.default_rng(seed)), got {rng!r}")
    return rng


def _check_signal(owner: str, name: str, value: object, shape: tuple[int, ...]) -> np.ndarray:
    """``value`` as a C-ordered finite float64 array of ``shape``, or a ParameterError naming ``owner.name``."""
    arr = np.asarray(value, dtype=float)
    if arr.shape != shape:
        raise ParameterError(f"{owner}.{name} must have shape {shape}, got {arr.shape}")
    if not np.all(np.isfinite(arr)):
        raise ParameterError(f"{owner}.{name} must be finite, got {arr!r}")
    return np.ascontiguousarray(arr)


def _is_c_float(value: object, shape: tuple[int, ...]) -> bool:
    """Whether ``value`` can go to a kernel as it is: a C-ordered float64 ndarray of ``shape``."""
    return type(value) is np.ndarray and value.dtype == np.float64 and value.shape == shape and value.flags.c_contiguous


@numba.njit(cache=True)
def first_nonfinite(a):
    """Index of the first non-finite entry of the 1-d array ``a``, or -1."""
    for i in range(a.shape[0]):
        if not math.isfinite(a[i]):
            return i
    return -1


@numba.njit(cache=True)
def _first_nonfinite_row(a):
    """Index of the first row of the 2-d array ``a`` with a non-finite entry, or -1."""
    for i in range(a.shape[0]):
        for j in range(a.shape[1]):
            if not math.isfinite(a[i, j]):
                return i
    return -1


@numba.njit(cache=True)
def _encoder_tick(q, tau, resolution, dt, alpha, state, out):
    """One encoder tick: ``out[0] = r rint(q / r)``, the low-passed backward difference, ``out[2] = tau``.

    :math:`\\hat{\\dot q}_k = \\hat{\\dot q}_{k-1} + \\alpha ((q^m_k - q^m_{k-1}) / \\Delta t - \\hat{\\dot q}_{k-1})`
    (:class:`JointSensing`); ``rint`` rounds ties to even, as ``numpy.round``.  ``state`` (2, n) holds the
    previous reading :math:`q^m_{k-1}` and the estimate, updated in place; ``out`` (3, n) gets the reading, a copy
    of the new estimate and ``tau``.  Returns 0, or 1 if ``q`` and 2 if ``tau`` holds a non-finite value, in
    which case nothing is written.
    """
    n = q.shape[0]
    for i in range(n):
        if not math.isfinite(q[i]):
            return 1
    for i in range(n):
        if not math.isfinite(tau[i]):
            return 2
    for i in range(n):
        qm = np.rint(q[i] / resolution) * resolution
        state[1, i] += ((qm - state[0, i]) / dt - state[1, i]) * alpha
        state[0, i] = qm
        out[0, i] = qm
        out[1, i] = state[1, i]
        out[2, i] = tau[i]
    return 0


@numba.njit(cache=True)
def _force_tick(w, bias, noise, std, alpha, filtered, noisy, y, line, delay, state, out):
    """One force/torque tick in place (:class:`ForceTorqueSensor`): sample, low-pass, delay line.

    :math:`u = w + b + \\sigma \\circ n` with n the row ``pos`` of the block of draws ``noise``.  ``state`` is
    ``[head, started, pos]``: the first tick after a reset (``started`` 0) starts the filter and fills the delay
    line with u; later ticks filter :math:`y \\mathrel{+}= \\alpha (u - y)`, or pass u unfiltered if
    ``filtered`` is false.  The delay line is the first ``delay`` rows of ``line``.  ``out`` gets the output:
    the delay line's oldest entry (row ``head``, then replaced by y), or y when ``delay`` is 0.  A ``noisy``
    sensor moves on to the next row of draws; returns whether the block is used up.
    """
    head = state[0]
    started = state[1] != 0
    r = state[2]
    for i in range(6):
        u = (w[i] + bias[i]) + noise[r, i] * std[i]
        if not started:
            y[i] = u
            for j in range(delay):
                line[j, i] = u
        elif not filtered:
            y[i] = u
        else:
            y[i] += (u - y[i]) * alpha
        if delay == 0:
            out[i] = y[i]
        else:
            out[i] = line[head, i]
            line[head, i] = y[i]
    state[1] = 1
    if delay > 0:
        state[0] = (head + 1) % delay
    if noisy:
        state[2] = r + 1
        return r + 1 >= noise.shape[0]
    return False


@numba.njit(cache=True)
def _force_bank_tick(w, gains, noise, settings, y, line, state, out):
    """:func:`_force_tick` for each row k of the stacked arrays (:class:`ForceSensorBank`), in row order.

    ``gains[k]`` (2, 6) holds the bias and the noise standard deviations of sensor k, ``settings[k]`` its
    alpha, filtered (1 or 0), noisy (1 or 0) and delay (a whole number of ticks).  First checks every row
    of ``w``: returns -1 - i, having written nothing, if row i holds a NaN or an infinity.  Otherwise
    returns 1 if a sensor has used up its block of draws, else 0.
    """
    for k in range(w.shape[0]):
        for i in range(6):
            if not math.isfinite(w[k, i]):
                return -1 - k
    used_up = 0
    for k in range(w.shape[0]):
        if _force_tick(w[k], gains[k, 0], noise[k], gains[k, 1], settings[k, 0], settings[k, 1] != 0.0,
                       settings[k, 2] != 0.0, y[k], line[k], int(settings[k, 3]), state[k], out[k]):
            used_up = 1
    return used_up


@dataclass(frozen=True)
class EncoderParams:
    """Joint encoders and joint torque sensing.

    Attributes
    ----------
    resolution_rad : float [rad]
        Quantisation step, > 0.  Default: a 17-bit absolute encoder,
        :math:`2 \\pi / 2^{17} \\approx 4.79 \\cdot 10^{-5}` rad (common practice).
    velocity_cutoff_Hz : float [Hz]
        Cut-off of the first-order low-pass applied to the finite-difference
        velocity, > 0.  Default 100 Hz (common practice).
    torque_noise_std_Nm : float [N m]
        Standard deviation of the white Gaussian noise added to the joint
        torque, >= 0.  Default 0 (ideal torque sensing).
    """

    resolution_rad: float = 2.0 * math.pi / 2**17
    velocity_cutoff_Hz: float = 100.0
    torque_noise_std_Nm: float = 0.0

    def __post_init__(self) -> None:
        o = "EncoderParams"
        object.__setattr__(self, "resolution_rad", positive(o, "resolution_rad", self.resolution_rad, "rad"))
        object.__setattr__(
            self, "velocity_cutoff_Hz", positive(o, "velocity_cutoff_Hz", self.velocity_cutoff_Hz, "Hz")
        )
        object.__setattr__(
            self, "torque_noise_std_Nm", nonnegative(o, "torque_noise_std_Nm", self.torque_noise_std_Nm, "N m")
        )


class JointSensing:
    """Quantised joint positions, a filtered finite-difference velocity and noisy joint torques.

    At tick k, with resolution r, tick :math:`\\Delta t` and the gain
    :math:`\\alpha` of the module docstring:

    .. math::
        q^m_k = r \\, \\mathrm{round}(q_k / r), \\qquad
        \\hat{\\dot q}_k = \\hat{\\dot q}_{k-1}
            + \\alpha \\Big( \\frac{q^m_k - q^m_{k-1}}{\\Delta t} - \\hat{\\dot q}_{k-1} \\Big), \\qquad
        \\tau^m_k = \\tau_k + \\sigma_\\tau \\, n_k,

    a mid-tread quantiser (ties round to even, as ``numpy.round``), a
    backward difference low-passed at ``velocity_cutoff_Hz``, and
    :math:`n_k \\sim \\mathcal N(0, 1)` drawn from ``rng``.

    Parameters
    ----------
    params : EncoderParams
    n_joints : int
        Number of joints n, >= 1.
    dt_s : float [s]
        Control tick, > 0.
    rng : numpy.random.Generator
        Source of the torque noise.

    Notes
    -----
    :meth:`reset` sets the velocity estimate to 0 and stores the quantised
    reset posture as :math:`q^m_{-1}` for the first difference.  If
    :meth:`measure` is called before any :meth:`reset`, it first resets at
    the posture it is given (so the first velocity estimate is 0).
    """

    def __init__(self, params: EncoderParams, n_joints: int, dt_s: float, rng: np.random.Generator) -> None:
        o = "JointSensing"
        if not isinstance(params, EncoderParams):
            raise ParameterError(f"{o}.params must be an EncoderParams, got {params!r}")
        try:
            n = operator.index(n_joints)
        except TypeError as e:
            raise ParameterError(f"{o}.n_joints must be an integer >= 1, got {n_joints!r}") from e
        if n < 1 or isinstance(n_joints, bool):
            raise ParameterError(f"{o}.n_joints must be an integer >= 1, got {n_joints!r}")
        self.params = params
        self.n_joints = n
        self.dt_s = positive(o, "dt_s", dt_s, "s")
        self._rng = _check_rng(o, rng)
        self._alpha = lowpass_alpha(params.velocity_cutoff_Hz, self.dt_s)
        self._state = np.zeros((2, n))  # the previous quantised reading and the velocity estimate
        self._q_prev, self._dq = self._state
        self._noise = np.zeros(n)
        self._started = False

    def _quantise(self, q: np.ndarray, out: np.ndarray) -> np.ndarray:
        r = self.params.resolution_rad
        np.divide(q, r, out=out)
        np.round(out, out=out)
        np.multiply(out, r, out=out)
        return out

    def reset(self, q_true: Sequence[float] | np.ndarray) -> None:
        """Start a new run at posture ``q_true`` (n,) [rad]: velocity estimate 0, previous reading q(reset)."""
        q = _check_signal("JointSensing", "reset q_true", q_true, (self.n_joints,))
        self._quantise(q, self._q_prev)
        self._dq.fill(0.0)
        self._started = True

    def measure(
        self, q_true: Sequence[float] | np.ndarray, tau_joint_Nm: Sequence[float] | np.ndarray
    ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """One tick of sensing.

        Parameters
        ----------
        q_true : (n,) array_like [rad]
            True joint positions.
        tau_joint_Nm : (n,) array_like [N m]
            True joint torques.

        Returns
        -------
        q_meas : (n,) ndarray [rad]
            Quantised positions.
        dq_est : (n,) ndarray [rad/s]
            Low-passed backward-difference velocity.
        tau_meas : (n,) ndarray [N m]
            Joint torques plus noise.

        All three are read-only rows of one new array that owns its data and
        is read-only too, so nothing can write to them (a row cannot be made
        writable while its base is read-only).
        """
        n = (self.n_joints,)
        q, tau = q_true, tau_joint_Nm
        if not (self._started and _is_c_float(q, n) and _is_c_float(tau, n)):  # the kernel checks finiteness
            q = _check_signal("JointSensing", "measure q_true", q, n)
            tau = _check_signal("JointSensing", "measure tau_joint_Nm", tau, n)
            if not self._started:
                self.reset(q)
        out = np.empty((3, self.n_joints))  # the three readings, one row each
        if _encoder_tick(q, tau, self.params.resolution_rad, self.dt_s, self._alpha, self._state, out):
            _check_signal("JointSensing", "measure q_true", q, n)  # raises, naming the non-finite input
            _check_signal("JointSensing", "measure tau_joint_Nm", tau, n)
        std = self.params.torque_noise_std_Nm
        if std > 0.0:
            self._rng.standard_normal(out=self._noise)
            self._noise *= std
            out[2] += self._noise
        out.setflags(write=False)
        return out[0], out[1], out[2]


#: Largest delay line of a force sensor [ticks]: 1 s at 100 kHz, 4.8 MB of state (a project bound; a scenario
#: further limits the delay to 1 s at its own control period).
MAX_DELAY_TICKS = 100_000


@dataclass(frozen=True)
class ForceSensorParams:
    """A 6-axis force/torque sensor: bias, white noise, a first-order low-pass and a pure delay.

    Attributes
    ----------
    noise_std_N : float [N]
        Standard deviation of the white Gaussian noise on each force axis, >= 0.
    noise_std_Nm : float [N m]
        Standard deviation on each torque axis, >= 0.  Defaults 0.3 N and
        0.01 N m: a small 6-axis F/T sensor (common practice, from memory).
    bias_N : (3,) tuple of float [N]
        Constant offset of the force reading, in the sensor frame.
    bias_Nm : (3,) tuple of float [N m]
        Constant offset of the torque reading, in the sensor frame.
    cutoff_Hz : float or None [Hz]
        Cut-off of the first-order low-pass, > 0; ``None`` means no filter
        (0 and inf are rejected, so "no filter" has one spelling).
        Default 200 Hz (common practice).
    delay_ticks : int
        Pure transport delay, in control ticks, >= 0.  Default 1.
    """

    noise_std_N: float = 0.3
    noise_std_Nm: float = 0.01
    bias_N: tuple[float, float, float] = (0.0, 0.0, 0.0)
    bias_Nm: tuple[float, float, float] = (0.0, 0.0, 0.0)
    cutoff_Hz: float | None = 200.0
    delay_ticks: int = 1

    def __post_init__(self) -> None:
        o = "ForceSensorParams"
        object.__setattr__(self, "noise_std_N", nonnegative(o, "noise_std_N", self.noise_std_N, "N"))
        object.__setattr__(self, "noise_std_Nm", nonnegative(o, "noise_std_Nm", self.noise_std_Nm, "N m"))
        object.__setattr__(self, "bias_N", vector(o, "bias_N", self.bias_N, 3))
        object.__setattr__(self, "bias_Nm", vector(o, "bias_Nm", self.bias_Nm, 3))
        if self.cutoff_Hz is not None:
            object.__setattr__(
                self, "cutoff_Hz", positive(o, "cutoff_Hz", self.cutoff_Hz, "Hz (or None for no filter)")
            )
        d = self.delay_ticks
        try:
            di = operator.index(d)
        except TypeError as e:
            raise ParameterError(f"{o}.delay_ticks must be an integer >= 0, got {d!r}") from e
        if di < 0 or isinstance(d, bool):
            raise ParameterError(f"{o}.delay_ticks must be an integer >= 0, got {d!r}")
        if di > MAX_DELAY_TICKS:
            raise ParameterError(f"{o}.delay_ticks must be at most {MAX_DELAY_TICKS} (1 s at 100 kHz), got {d!r}")
        object.__setattr__(self, "delay_ticks", di)


class ForceTorqueSensor:
    """A 6-axis force/torque sensor sampled every control tick.

    With the true wrench :math:`w_k = [f; \\tau]` in the sensor frame, bias
    b, noise standard deviations :math:`\\sigma` (per axis) and
    :math:`n_k \\sim \\mathcal N(0, I_6)` drawn from ``rng``:

    .. math::
        u_k = w_k + b + \\sigma \\circ n_k, \\qquad
        y_k = y_{k-1} + \\alpha (u_k - y_{k-1}), \\qquad
        \\text{output}_k = y_{k - d},

    with the gain :math:`\\alpha` of the module docstring (:math:`y_k = u_k`
    when ``cutoff_Hz`` is None) and d = ``delay_ticks``.

    Parameters
    ----------
    params : ForceSensorParams
    dt_s : float [s]
        Control tick, > 0.
    rng : numpy.random.Generator
        Source of the noise, drawn :data:`NOISE_BLOCK_TICKS` ticks ahead: the
        sensor's own.

    Notes
    -----
    Start-up: on the first tick after :meth:`reset` the filter state is set
    to that tick's noisy sample :math:`u_0` (a real sensor has been running
    long before the first reading, so no transient from zero), i.e.
    :math:`y_0 = u_0`, and the delay line is filled with it: for
    :math:`k < d` the output is :math:`y_0`.
    """

    def __init__(self, params: ForceSensorParams, dt_s: float, rng: np.random.Generator) -> None:
        o = "ForceTorqueSensor"
        if not isinstance(params, ForceSensorParams):
            raise ParameterError(f"{o}.params must be a ForceSensorParams, got {params!r}")
        self.params = params
        self.dt_s = positive(o, "dt_s", dt_s, "s")
        self._rng = _check_rng(o, rng)
        self._alpha = 1.0 if params.cutoff_Hz is None else lowpass_alpha(params.cutoff_Hz, self.dt_s)  # unused if None
        self._bias = np.array(params.bias_N + params.bias_Nm)
        self._std = np.array((params.noise_std_N,) * 3 + (params.noise_std_Nm,) * 3)
        self._noisy = bool(np.any(self._std > 0.0))
        self._filtered = params.cutoff_Hz is not None
        self._delay = params.delay_ticks
        # the draws of NOISE_BLOCK_TICKS ticks at a time (one row a tick), drawn when the previous block is used up
        self._noise = np.zeros((NOISE_BLOCK_TICKS, 6))
        self._y = np.zeros(6)
        self._line = np.zeros((params.delay_ticks, 6))  # its first delay_ticks rows are the delay line
        # [head of the delay line, started, next row of draws]; no draws yet: the first tick draws a block
        self._state = np.array([0, 0, NOISE_BLOCK_TICKS if self._noisy else 0], dtype=np.int64)
        self._bank: ForceSensorBank | None = None
        self.reset()

    def reset(self) -> None:
        """Forget the filter state and the delay line; the next sample restarts them."""
        self._y.fill(0.0)
        self._line.fill(0.0)
        self._state[:2] = 0  # the draws go on where they were: a reset does not rewind the stream

    def measure(self, wrench_true: Sequence[float] | np.ndarray) -> np.ndarray:
        """One tick of sensing.

        Parameters
        ----------
        wrench_true : (6,) array_like [N, N m]
            True wrench ``[f; tau]`` in the sensor frame.

        Returns
        -------
        (6,) ndarray [N, N m]
            The measured wrench, a new read-only array that owns its data.
        """
        w = wrench_true
        if not _is_c_float(w, (6,)) or first_nonfinite(w) >= 0:
            w = _check_signal("ForceTorqueSensor", "measure wrench_true", w, (6,))
        if self._noisy and self._state[2] >= NOISE_BLOCK_TICKS:
            self._draw()
        out = np.empty(6)
        _force_tick(w, self._bias, self._noise, self._std, self._alpha, self._filtered, self._noisy, self._y,
                    self._line, self._delay, self._state, out)
        if self._bank is not None:
            self._bank._check_draws = True  # this sensor may have used up its block between the bank's ticks
        out.setflags(write=False)
        return out

    def _draw(self) -> None:
        """The next block of draws, n ~ N(0, I), in the order of the stream."""
        self._rng.standard_normal(out=self._noise)
        self._state[2] = 0


class ForceSensorBank:
    """Several :class:`ForceTorqueSensor` (one per cuff) measured together, in one compiled call per tick.

    Each sensor keeps its parameters and its own ``Generator``, drawn from in
    the same way as by :meth:`ForceTorqueSensor.measure`, so a tick of the
    bank gives, row by row, exactly the readings of the sensors measured one
    by one.  The bank keeps the sensors' state (filter, delay line, block of
    noise draws) in stacked arrays and the sensors keep views of them: a sensor
    can still be measured or reset on its own and the bank carries on from
    there.  A sensor belongs to at most one bank.

    Parameters
    ----------
    sensors : sequence of ForceTorqueSensor
        Distinct sensors (none gives an empty bank); row i of every tick is ``sensors[i]``.
    """

    def __init__(self, sensors: Sequence[ForceTorqueSensor]) -> None:
        o = "ForceSensorBank"
        try:
            sensors = tuple(sensors)
        except TypeError as e:
            raise ParameterError(f"{o}.sensors must be a sequence of ForceTorqueSensor, got {sensors!r}") from e
        for i, s in enumerate(sensors):
            if not isinstance(s, ForceTorqueSensor):
                raise ParameterError(f"{o}.sensors[{i}] must be a ForceTorqueSensor, got {s!r}")
            if s._bank is not None:
                raise ParameterError(f"{o}.sensors[{i}] already belongs to a ForceSensorBank")
            if any(s is t for t in sensors[:i]):
                raise ParameterError(f"{o}.sensors[{i}] is given twice; each sensor is measured once per tick")
        n = len(sensors)
        d_max = max((s._delay for s in sensors), default=0)
        self.sensors = sensors
        # per sensor, bias and noise standard deviations; alpha, filtered, noisy, delay (see _force_bank_tick)
        self._gains = np.array([(s._bias, s._std) for s in sensors]).reshape(n, 2, 6)
        self._settings = np.array([(s._alpha, s._filtered, s._noisy, s._delay) for s in sensors],
                                  dtype=float).reshape(n, 4)
        self._noise = np.array([s._noise for s in sensors]).reshape(n, NOISE_BLOCK_TICKS, 6)
        self._y = np.array([s._y for s in sensors]).reshape(n, 6)
        self._line = np.zeros((n, d_max, 6))
        self._state = np.array([s._state for s in sensors], dtype=np.int64).reshape(n, 3)
        for i, s in enumerate(sensors):  # from now on the sensors' state lives here
            self._line[i, :s._delay] = s._line
            s._noise, s._y, s._line, s._state = self._noise[i], self._y[i], self._line[i], self._state[i]
            s._bank = self
        self._noisy_sensors = [s for s in sensors if s._noisy]
        self._check_draws = bool(self._noisy_sensors)  # whether a sensor may need its next block of draws

    def reset(self) -> None:
        """:meth:`ForceTorqueSensor.reset` of every sensor."""
        for s in self.sensors:
            s.reset()

    def measure(self, wrenches_true: Sequence[Sequence[float]] | np.ndarray) -> np.ndarray:
        """One tick of every sensor.

        Parameters
        ----------
        wrenches_true : (n, 6) array_like [N, N m]
            Row i: the true wrench ``[f; tau]`` at ``sensors[i]``, in its frame.

        Returns
        -------
        (n, 6) ndarray [N, N m]
            Row i: what ``sensors[i].measure(wrenches_true[i])`` returns.  A
            new read-only array that owns its data.
        """
        shape = (len(self.sensors), 6)
        w = wrenches_true
        # the kernel checks finiteness before it writes anything; a tick that draws checks it before the draws
        if not _is_c_float(w, shape) or (self._check_draws and _first_nonfinite_row(w) >= 0):
            w = self._checked(w, shape)
        if self._check_draws:
            for s in self._noisy_sensors:
                if s._state[2] >= NOISE_BLOCK_TICKS:
                    s._draw()
        out = np.empty(shape)
        done = _force_bank_tick(w, self._gains, self._noise, self._settings, self._y, self._line, self._state, out)
        if done < 0:
            self._checked(w, shape)  # raises, naming the row
        self._check_draws = done == 1
        out.setflags(write=False)
        return out

    @staticmethod
    def _checked(w: object, shape: tuple[int, int]) -> np.ndarray:
        """``w`` as a C-ordered finite float64 array of ``shape``, or a ParameterError naming the bad row."""
        w = np.asarray(w, dtype=float)
        if w.shape != shape:
            raise ParameterError(f"ForceSensorBank.measure wrenches_true must have shape {shape}, got {w.shape}")
        bad = np.flatnonzero(~np.all(np.isfinite(w), axis=1))
        if bad.size:
            i = int(bad[0])
            raise ParameterError(f"ForceSensorBank.measure wrenches_true[{i}] must be finite, got {w[i]!r}")
        return np.ascontiguousarray(w)
