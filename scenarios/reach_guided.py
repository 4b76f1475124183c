"""Guided reaching: the exercise is the reach to the cup, the wearer means to stop half way.

The therapist's reference path (``reference_path``) takes the hand from beside the lap to the cup on the
shelf of ``reach.py`` and back, with the same timing; the wearer, healthy, intends only half of the reach
(half of every joint's excursion).  Under ``transparent`` the hand stops short, about 17 cm from the cup;
``assist`` stiffens a spring toward the path as long as the hand lags behind it (assist-as-needed);
``tunnel`` leaves the hand free within 3 cm of the path point of the time and pushes it back beyond (the
wearer, who resists, then stays about 2 cm outside).  The path is built from the wearer's own hand positions
at the two postures (``for_subject``), so it starts where each wearer's hand is.  Copy this file and edit it.
"""

import dataclasses

from models.human import hand_position_m
from sim import HandPath, JointIntent, Scenario, Via, deg

# joints: gh flexion, gh abduction, gh rotation, elbow flexion, pronation, wrist flexion, wrist deviation
HAND_BESIDE_LAP = deg(15, 10, 0, 80, 0, 0, 0)
CUP_ON_SHELF = deg(85, 5, 0, 15, 20, 0, 0)
HALF_WAY = tuple((a + b) / 2 for a, b in zip(HAND_BESIDE_LAP, CUP_ON_SHELF))
# the exercise's timing [s]: hold, reach, hold at the cup, return, hold (that of reach.py)
TIMES_S = (0.0, 0.3, 1.3, 1.7, 2.7, 3.1)


def reference_path(subject):
    """The therapist's path: the wearer's hand at the lap, at the cup and back, at TIMES_S (world frame, m)."""
    lap, cup = hand_position_m(subject, HAND_BESIDE_LAP), hand_position_m(subject, CUP_ON_SHELF)
    return HandPath(points_m=(lap, lap, cup, cup, lap, lap), times_s=TIMES_S)


def for_subject(subject):
    """The scenario for another wearer: the same intent, the path through that wearer's own hand positions."""
    return dataclasses.replace(BASE, subject=subject, reference_path=reference_path(subject))


BASE = Scenario(
    name="reach_guided",
    description="reach to a cup guided along the therapist's path, the wearer intending only half of it",
    subject="m50",
    intent=JointIntent(
        start_rad=HAND_BESIDE_LAP,
        start_hold_s=0.3,
        vias=(
            Via(HALF_WAY, move_s=1.0, hold_s=0.4),
            Via(HAND_BESIDE_LAP, move_s=1.0, hold_s=0.4),
        ),
    ),
    duration_s=3.1,
    controllers=("assist", "tunnel", "transparent", "walls", "gravity", "zero"),
)
SCENARIO = for_subject("m50")
