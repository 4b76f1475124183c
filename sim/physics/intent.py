"""The human's joint-space movement intent: minimum-jerk moves between held postures.

A :class:`JointIntent` starts at a posture, may hold it, then moves through a
sequence of :class:`Via` postures.  Each move is a minimum-jerk
point-to-point movement (Flash & Hogan 1985; the polynomial is :mod:`models.motion`); each hold keeps the posture
with zero velocity and acceleration.  Position and velocity are continuous at
every segment boundary (a minimum-jerk move starts and ends at rest);
acceleration is continuous too, since it is zero at both ends of a move.

References
----------
.. [1] Flash T., Hogan N. (1985), "The coordination of arm movements: an
   experimentally confirmed mathematical model", *J. Neurosci.* 5(7):1688-1703.
"""

from __future__ import annotations

import math
from bisect import bisect_right
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from models.checks import nonnegative, positive, vector
from models.errors import ParameterError
from models.motion import minimum_jerk, minimum_jerk_at, minimum_jerk_profile

__all__ = ["minimum_jerk", "Via", "JointIntent"]


def _posture(owner: str, field: str, value: Sequence[float]) -> tuple[float, ...]:
    """Return ``value`` as a non-empty tuple of finite floats [rad]."""
    try:
        n = len(value)
    except TypeError as e:
        raise ParameterError(f"{owner}.{field} must be a sequence of numbers [rad], got {value!r}") from e
    if n == 0:
        raise ParameterError(f"{owner}.{field} must have at least one joint, got {value!r}")
    return vector(owner, field, value, n)


@dataclass(frozen=True)
class Via:
    """A posture to move to, and how long to hold it.

    Attributes
    ----------
    posture_rad : tuple of float [rad]
        Target joint posture, one entry per joint.
    move_s : float [s]
        Duration of the minimum-jerk move into this posture, > 0.
    hold_s : float [s]
        Time spent at the posture after arriving, >= 0.
    """

    posture_rad: tuple[float, ...]
    move_s: float
    hold_s: float = 0.0

    def __post_init__(self) -> None:
        o = "Via"
        object.__setattr__(self, "posture_rad", _posture(o, "posture_rad", self.posture_rad))
        object.__setattr__(self, "move_s", positive(o, "move_s", self.move_s, "s"))
        object.__setattr__(self, "hold_s", nonnegative(o, "hold_s", self.hold_s, "s"))


@dataclass(frozen=True)
class JointIntent:
    """A piecewise joint-space intent: hold, then minimum-jerk moves through vias with holds.

    The timeline is ``start_hold_s`` at ``start_rad``, then for each via a
    move of ``move_s`` into ``posture_rad`` followed by a hold of ``hold_s``.
    Before t = 0 the intent is the start posture, after :attr:`duration_s`
    the last posture, both at rest.

    Attributes
    ----------
    start_rad : tuple of float [rad]
        Initial posture (n joints).
    vias : tuple of Via
        Postures visited in order; each must have n joints.  May be empty (a
        pure hold).
    start_hold_s : float [s]
        Hold at the start posture before the first move, >= 0.

    Notes
    -----
    Segment start times are precomputed, so :meth:`at` costs one bisection
    and one polynomial evaluation (it runs every control tick; its joint
    rows are one compiled call, :func:`models.motion.minimum_jerk_at`, checked against the
    Python reference :func:`models.motion.minimum_jerk_profile` that :meth:`sample` uses).  A hold is
    evaluated as a minimum-jerk "move" of zero amplitude, which is constant.
    """

    start_rad: tuple[float, ...]
    vias: tuple[Via, ...]
    start_hold_s: float = 0.0

    def __post_init__(self) -> None:
        o = "JointIntent"
        start = _posture(o, "start_rad", self.start_rad)
        object.__setattr__(self, "start_rad", start)
        object.__setattr__(self, "start_hold_s", nonnegative(o, "start_hold_s", self.start_hold_s, "s"))
        try:
            vias = tuple(self.vias)
        except TypeError as e:
            raise ParameterError(f"{o}.vias must be a sequence of Via, got {self.vias!r}") from e
        n = len(start)
        for i, v in enumerate(vias):
            if not isinstance(v, Via):
                raise ParameterError(f"{o}.vias[{i}] must be a Via, got {v!r}")
            if len(v.posture_rad) != n:
                raise ParameterError(
                    f"{o}.vias[{i}].posture_rad must have {n} entries (the length of start_rad), "
                    f"got {len(v.posture_rad)}"
                )
        object.__setattr__(self, "vias", vias)
        self._build_segments()

    def _build_segments(self) -> None:
        """Precompute (start time, duration, start posture, amplitude) of every non-empty segment."""
        starts: list[float] = []
        durations: list[float] = []
        q_from: list[np.ndarray] = []
        amplitude: list[np.ndarray] = []
        t = 0.0
        q = np.array(self.start_rad)
        zero = np.zeros_like(q)

        def add(dur: float, q_a: np.ndarray, d: np.ndarray) -> None:
            nonlocal t
            if dur > 0.0:
                starts.append(t)
                durations.append(dur)
                q_from.append(q_a)
                amplitude.append(d)
                t += dur

        add(self.start_hold_s, q, zero)
        for v in self.vias:
            target = np.array(v.posture_rad)
            add(v.move_s, q, target - q)
            add(v.hold_s, target, zero)
            q = target
        # writable copies for the compiled rows of at() (numba: a read-only array is another, slower signature)
        object.__setattr__(self, "_q_from_rows", [a.copy() for a in q_from])
        object.__setattr__(self, "_amplitude_rows", [a.copy() for a in amplitude])
        for arr in (*q_from, *amplitude, q):
            arr.setflags(write=False)
        object.__setattr__(self, "_starts", starts)
        object.__setattr__(self, "_durations", durations)
        object.__setattr__(self, "_q_from", q_from)
        object.__setattr__(self, "_amplitude", amplitude)
        object.__setattr__(self, "_q_start", np.array(self.start_rad))
        object.__setattr__(self, "_q_end", q)
        object.__setattr__(self, "_end_s", t)

    @property
    def n_joints(self) -> int:
        """Number of joints n."""
        return len(self.start_rad)

    @property
    def duration_s(self) -> float:
        """Total duration [s]: ``start_hold_s`` plus every via's ``move_s + hold_s``."""
        return self._end_s

    def at(self, t_s: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Intended posture, velocity and acceleration at time ``t_s``.

        Parameters
        ----------
        t_s : float [s]
            Time since the start of the intent (finite; may be < 0 or past the end).

        Returns
        -------
        q, dq, ddq : (n,) ndarray
            Position [rad], velocity [rad/s] and acceleration [rad/s^2]; new
            arrays on every call.
        """
        t = float(t_s)
        if not math.isfinite(t):
            raise ParameterError(f"JointIntent.at t_s must be finite, got {t_s!r}")
        if t >= self._end_s or t < 0.0:
            q = self._q_end if t >= self._end_s else self._q_start
            z = np.zeros(q.shape)
            return q.copy(), z, z.copy()
        i = bisect_right(self._starts, t) - 1
        return minimum_jerk_at(self._q_from_rows[i], self._amplitude_rows[i], self._durations[i], t - self._starts[i])

    def sample(self, t_s: Sequence[float] | np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Evaluate :meth:`at` on a time grid, vectorised.

        Parameters
        ----------
        t_s : (m,) array_like [s]
            Finite times, in any order.

        Returns
        -------
        Q, dQ, ddQ : (m, n) ndarray
            Positions [rad], velocities [rad/s] and accelerations [rad/s^2].
        """
        t = np.asarray(t_s, dtype=float)
        if t.ndim != 1 or not np.all(np.isfinite(t)):
            raise ParameterError(f"JointIntent.sample t_s must be a finite 1-D array [s], got shape {t.shape}")
        m, n = t.shape[0], self.n_joints
        Q = np.empty((m, n))
        dQ = np.zeros((m, n))
        ddQ = np.zeros((m, n))
        Q[t < 0.0] = self._q_start
        Q[t >= self._end_s] = self._q_end
        inside = (t >= 0.0) & (t < self._end_s)
        idx = np.searchsorted(self._starts, t, side="right") - 1
        for i in np.unique(idx[inside]):
            mask = inside & (idx == i)
            Q[mask], dQ[mask], ddQ[mask] = minimum_jerk_profile(
                self._q_from[i], self._amplitude[i], self._durations[i], t[mask] - self._starts[i]
            )
        return Q, dQ, ddQ
