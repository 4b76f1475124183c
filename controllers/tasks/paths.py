"""The exercise's reference hand path, as a therapist sets it: timed via points, minimum-jerk between them.

A :class:`HandPath` is part of the exercise, not of the wearer: it is given to the controller before the run
(``Scenario.reference_path``) and never derived from the simulated wearer's intent.  Tasks that follow it
(:class:`controllers.tasks.AssistAsNeeded`, :class:`controllers.tasks.GuidanceTunnel`) read the path point of the
tick's measured time.

References
----------
.. [FlashHogan1985] T. Flash, N. Hogan, "The coordination of arm movements: an experimentally confirmed
   mathematical model", J. Neurosci. 5(7):1688-1703, 1985.
"""

from __future__ import annotations

import math
from bisect import bisect_right
from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np

from models.errors import ParameterError
from models.motion import minimum_jerk_at, minimum_jerk_profile

__all__ = ["HandPath"]


@dataclass(frozen=True)
class HandPath:
    """Timed via points of a hand point in the world frame [m], a minimum-jerk move between each two.

    The hand point is at ``points_m[i]`` at rest at time ``times_s[i]``; between two via points it follows the
    minimum-jerk move (Flash & Hogan 1985, :func:`models.motion.minimum_jerk`)

    .. math::
        p(t) = p_i + (p_{i+1} - p_i)\\,(10\\tau^3 - 15\\tau^4 + 6\\tau^5), \\qquad
        \\tau = \\frac{t - t_i}{t_{i+1} - t_i},

    so that position, velocity and acceleration are continuous.  A hold is two equal points in a row.  Before
    ``times_s[0]`` the path is at its first point, after ``times_s[-1]`` at its last, at rest.

    Attributes
    ----------
    points_m : tuple of (x, y, z) [m]
        Via points in the world frame (the frame of :func:`models.human.hand_position_m`), at least one.
    times_s : tuple of float [s]
        Time of each via point, strictly increasing, from the start of the run.

    Examples
    --------
    A reach from the lap to a cup and back, built from the wearer's postures (a scenario file)::

        lap, cup = hand_position_m("m50", HAND_BESIDE_LAP), hand_position_m("m50", CUP_ON_SHELF)
        path = HandPath(points_m=(lap, lap, cup, cup, lap), times_s=(0.0, 0.3, 1.3, 1.7, 2.7))
    """

    points_m: tuple[tuple[float, float, float], ...]
    times_s: tuple[float, ...]

    def __post_init__(self) -> None:
        try:
            pts = np.array(self.points_m, dtype=float)
            times = np.array(self.times_s, dtype=float)
        except (TypeError, ValueError) as e:
            raise ParameterError(f"HandPath.points_m must be (x, y, z) points [m] and times_s numbers [s]: {e}") from e
        if pts.ndim != 2 or pts.shape[1] != 3 or pts.shape[0] < 1:
            raise ParameterError(f"HandPath.points_m must be a sequence of (x, y, z) points [m], got shape {pts.shape}")
        if not np.all(np.isfinite(pts)):
            raise ParameterError("HandPath.points_m must be finite")
        if times.shape != (pts.shape[0],):
            raise ParameterError(f"HandPath.times_s must have one time per point ({pts.shape[0]}), got shape "
                                 f"{times.shape}")
        if not np.all(np.isfinite(times)):
            raise ParameterError(f"HandPath.times_s must be finite, got {self.times_s!r}")
        if np.any(np.diff(times) <= 0.0):
            i = int(np.flatnonzero(np.diff(times) <= 0.0)[0])
            raise ParameterError(f"HandPath.times_s must be strictly increasing, got {times[i]:g} then "
                                 f"{times[i + 1]:g} s at points {i} and {i + 1}")
        object.__setattr__(self, "points_m", tuple(tuple(float(x) for x in p) for p in pts))
        object.__setattr__(self, "times_s", tuple(float(t) for t in times))
        # per move: start point and amplitude (writable, for the compiled rows of minimum_jerk_at)
        object.__setattr__(self, "_from", [pts[i].copy() for i in range(len(pts) - 1)])
        object.__setattr__(self, "_amplitude", [pts[i + 1] - pts[i] for i in range(len(pts) - 1)])
        object.__setattr__(self, "_first", pts[0].copy())
        object.__setattr__(self, "_last", pts[-1].copy())

    @property
    def duration_s(self) -> float:
        """Time of the last via point [s]."""
        return self.times_s[-1]

    def at(self, t_s: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Path point [m], velocity [m/s] and acceleration [m/s^2] at time ``t_s`` [s]: three new (3,) arrays."""
        t = float(t_s)
        if not math.isfinite(t):
            raise ParameterError(f"HandPath.at t_s must be finite, got {t_s!r}")
        times = self.times_s
        if t <= times[0] or t >= times[-1]:
            p = self._first if t <= times[0] else self._last
            return p.copy(), np.zeros(3), np.zeros(3)
        i = bisect_right(times, t) - 1
        return minimum_jerk_at(self._from[i], self._amplitude[i], times[i + 1] - times[i], t - times[i])

    def sample(self, t_s) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """:meth:`at` on a 1-D grid of finite times [s], vectorised: three (m, 3) arrays."""
        t = np.asarray(t_s, dtype=float)
        if t.ndim != 1 or not np.all(np.isfinite(t)):
            raise ParameterError(f"HandPath.sample t_s must be a finite 1-D array [s], got shape {t.shape}")
        P, V, A = np.empty((len(t), 3)), np.zeros((len(t), 3)), np.zeros((len(t), 3))
        times = np.asarray(self.times_s)
        P[t <= times[0]] = self._first
        P[t >= times[-1]] = self._last
        inside = (t > times[0]) & (t < times[-1])
        idx = np.searchsorted(times, t, side="right") - 1
        for i in np.unique(idx[inside]):
            mask = inside & (idx == i)
            P[mask], V[mask], A[mask] = minimum_jerk_profile(self._from[i], self._amplitude[i],
                                                             times[i + 1] - times[i], t[mask] - times[i])
        return P, V, A

    def describe(self) -> dict:
        """The path as plain JSON values (``meta.json``'s ``reference_path``); :meth:`from_dict` reads it back."""
        return {"points_m": [list(p) for p in self.points_m], "times_s": list(self.times_s)}

    @classmethod
    def from_dict(cls, d: Mapping) -> HandPath:
        """The path of :meth:`describe`'s dict."""
        if not isinstance(d, Mapping) or "points_m" not in d or "times_s" not in d:
            raise ParameterError(f"HandPath.from_dict needs a mapping with points_m and times_s, got {d!r}")
        return cls(points_m=tuple(tuple(p) for p in d["points_m"]), times_s=tuple(d["times_s"]))
