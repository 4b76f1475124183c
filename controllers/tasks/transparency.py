"""Force-feedback transparency: the robot moves under the wearer's cuff wrenches as a lighter robot would.

Rows in x = [q̈; τ] through the public :class:`~controllers.tasks.base.Task` API.

References
----------
.. [Khatib1987] O. Khatib, "A unified approach for motion and force control of robot manipulators: the
   operational space formulation", IEEE J. Robotics and Automation 3(1):43-53, 1987.
"""

from __future__ import annotations

from models.checks import in_range, positive

from .base import Task, q_rows
from .state import TickState

__all__ = ["Transparency"]


class Transparency(Task):
    """Force-feedback transparency normalised by the mass matrix.

    The robot should move under the wearer's measured cuff wrenches as if its
    inertia were a fraction :math:`\\alpha = 1 - c` of the real one, gravity
    being compensated:

    .. math:: \\alpha M(q)\\,\\ddot q = \\sum_c J_c^T w_c

    With the dynamics :math:`M\\ddot q + h = \\tau + \\sum_c J_c^T w_c` this is
    the torque :math:`\\tau = h + \\tfrac{1-\\alpha}{\\alpha} \\sum_c J_c^T w_c`:
    force feedback whose gain, expressed through M, is the same in every
    posture and for every wearer (the joint-space form of the operational-space
    normalisation of Khatib 1987, see References).
    ``inertia_compensation`` c = 0.5 halves the felt inertia.
    """

    name, kind = "transparency", "eq"

    def __init__(self, inertia_compensation: float = 0.5, weight: float = 1.0) -> None:
        self.c = in_range("Transparency", "inertia_compensation", inertia_compensation, 0.0, 0.9)
        self.inertia_compensation = self.c  # the argument, by name (Task.params)
        self.weight = positive("Transparency", "weight", weight)

    def rows(self, state: TickState):
        return q_rows(state.nv, (1.0 - self.c) * state.M), state.cuff_force.copy()
