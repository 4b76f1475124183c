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
    if type(a) is np.ndarray and a.dtype == np.float64 and not a.flags.writeable and a.base is None:
        return a  # already a read-only array that owns its data (as the sensors return): nothing can change it
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
        object.__setattr__(self, "t_s", float(self.t_s))
        for f in ("q_rad", "dq_rad_s", "tau_Nm"):
            object.__setattr__(self, f, _frozen(getattr(self, f)))
        object.__setattr__(self, "cuff_wrench",
                           MappingProxyType({k: _frozen(v) for k, v in self.cuff_wrench.items()}))
