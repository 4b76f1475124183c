"""The seated reach of ``reach.py`` by a moderately weak wearer: can they do it, and how much help do they get?

The wearer intends the whole reach to the cup and back, but each joint holds only
``Weakness.grade("moderate")`` of a healthy arm's torque (illustrative, not
clinical): too little at the shoulder to lift the arm to the shelf.  Under
``transparent`` the robot carries its own weight and half its inertia, not the
wearer's arm, so the hand stops short (``movement_completion`` under 1,
``time_to_target_s`` null).  ``assist`` and ``tunnel`` follow the therapist's
reference path of ``reach_guided.py`` (the same cup, the same timing): an
assist-as-needed spring that stiffens while the hand lags, or a tube that lets
the hand move freely within 3 cm of the path point.  Compare ``assistance_share``
(the robot's part of the positive work on the arm) and ``path_error_rms_m``
across the three.  Copy this file and change the grade, the joints or the path.
"""

import dataclasses

from reach import SCENARIO as REACH  # a scenario file imports its neighbours in the folder
from reach_guided import reference_path

from sim import Impairment, Weakness


def for_subject(subject):
    """The scenario for another wearer: the same weakness, the path through that wearer's own hand positions."""
    return dataclasses.replace(
        REACH,
        name="reach_weak",
        description="the seated reach by a moderately weak wearer, with the robot transparent or assisting",
        subject=subject,
        controllers=("transparent", "assist", "tunnel", "walls", "gravity", "zero"),
        impairment=Impairment(weakness=Weakness.grade("moderate")),
        reference_path=reference_path(subject),
    )


SCENARIO = for_subject("m50")
