"""Records shared by the simulation and the controllers.

:class:`Measurement` is everything a controller receives.  It holds only
what a real exoskeleton senses (joint encoders, joint torque sensing, the
force/torque sensors at the cuffs) and no field of the human's state: a
controller cannot read what the hardware cannot measure.  Arrays are
read-only so a controller cannot change the sensors' state either.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from types import MappingProxyType

import numpy as np

__all__ = ["Measurement"]


def _frozen(a) -> np.ndarray:
    """``a`` itself if nothing can write to it, else a read-only float64 copy.

    Nothing can write to a read-only float64 array that owns its data, nor to
    a read-only view of such an array (as the sensors return, one or a row of
    one): a view cannot be made writable while its base is read-only.
    """
    if type(a) is np.ndarray and a.dtype == np.float64 and not a.flags.writeable:
        base = a.base
        if base is None or (type(base) is np.ndarray and base.base is None and not base.flags.writeable):
            return a
    arr = np.array(a, dtype=float)
    arr.setflags(write=False)
    return arr


@dataclass(frozen=True)
class Measurement:
    """What the exoskeleton senses at one control tick.

    Attributes
    ----------
    t_s : float
        Time of the tick [s].
    q_rad : (nq,) ndarray
        Encoder joint positions [rad] (quantised).
    dq_rad_s : (nv,) ndarray
        Estimated joint velocities [rad/s].
    tau_Nm : (nv,) ndarray
        Measured joint torques [N m].
    cuff_wrench : mapping str -> (6,) ndarray
        Per cuff, the wrench ``[f; tau]`` [N, N m] the wearer applies to the
        robot, in the sensor frame (the robot-side cuff frame).
    """

    t_s: float
    q_rad: np.ndarray
    dq_rad_s: np.ndarray
    tau_Nm: np.ndarray
    cuff_wrench: Mapping[str, np.ndarray]

    def __post_init__(self) -> None:
        setattr_ = object.__setattr__
        setattr_(self, "t_s", float(self.t_s))
        setattr_(self, "q_rad", _frozen(self.q_rad))
        setattr_(self, "dq_rad_s", _frozen(self.dq_rad_s))
        setattr_(self, "tau_Nm", _frozen(self.tau_Nm))
        cuffs = {}
        for k, v in self.cuff_wrench.items():  # a plain loop: cheaper than a comprehension for a few cuffs
            cuffs[k] = _frozen(v)
        setattr_(self, "cuff_wrench", MappingProxyType(cuffs))
