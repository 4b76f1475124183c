"""Records shared by the simulation and the controllers.

:class:`Measurement` is everything a controller receives.  It holds only
what a real exoskeleton senses (joint encoders, joint torque sensing, the
force/torque sensors at the cuffs) and no field of the human's state: a
controller cannot read what the hardware cannot measure.  Arrays are
read-only so a controller cannot change the sensors' state either.

The constructor checks and converts what it is given (see
:class:`Measurement`).  The simulation loop, whose sensors already return
arrays nothing can write to, builds it with :meth:`Measurement._from_frozen`,
which skips those checks; everyone else uses the constructor.
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

    @classmethod
    def _from_frozen(cls, t_s: float, q_rad: np.ndarray, dq_rad_s: np.ndarray, tau_Nm: np.ndarray,
                     cuff_wrench: dict[str, np.ndarray]) -> Measurement:
        """The Measurement of these fields, kept as they are: no check, no conversion, no copy.

        For the simulation loop only (:class:`sim.loop.simulation.Simulation`), whose
        sensors return exactly what the constructor would keep as it is: a
        float ``t_s``, and float64 arrays that nothing can write to (read-only
        arrays owning their data, or read-only views of one, as
        :class:`sim.physics.sensors.JointSensing` and
        :class:`sim.physics.sensors.ForceSensorBank` return).  ``cuff_wrench`` must be
        a new dict that the caller does not keep: it is wrapped, not copied.
        The result then equals the constructor's, field by field, without its
        checks (which cost about as much as a sensor reading each tick).
        Anything else must go through the constructor.
        """
        m = object.__new__(cls)
        fields = m.__dict__
        fields["t_s"] = t_s
        fields["q_rad"] = q_rad
        fields["dq_rad_s"] = dq_rad_s
        fields["tau_Nm"] = tau_Nm
        fields["cuff_wrench"] = MappingProxyType(cuff_wrench)
        return m
