"""Pushing into a virtual wall: a seated wearer presses the hand toward a target behind a plane.

Our own clinic-like setting: a vertical virtual plane stands in front of the
wearer, a little closer than arm's length, as a boundary a therapist might set
so that a reach stops short of a table edge.  The wearer pushes the hand toward
a point behind it, holds, and releases, three times: slowly, fast and at a
medium pace.  Under the ``walls`` variant the robot renders the plane as a
spring-damper on the hand point; the other variants let the hand pass.

The plane scales with the wearer: for the median man (m50) it stands 0.52 m in
front of the shoulder centre; for another wearer at the same fraction of the
hand's forward reach at BEHIND_WALL (``for_subject``), so every wearer meets it.
"""

import dataclasses

from models.cuffs import CuffParams
from models.human import hand_position_m
from sim import JointIntent, Scenario, Via, deg

READY = deg(60, 0, 0, 80, 0, 0, 0)  # hand 5-6 cm in front of the wall
BEHIND_WALL = deg(80, 0, 0, 25, 0, 0, 0)  # hand target 7-9 cm behind it

WALL_X_M50_M = 0.52  # plane x in front of the m50 shoulder centre [m], normal pointing forward
WALL_STIFFNESS_N_PER_M = 600.0
WALL_DAMPING_N_S_PER_M = 5.0
# along-limb stiffness of the hand cuff: the wall is rendered at the wearer's hand, not the robot's
HAND_CUFF_STIFFNESS = CuffParams().stiffness_N_per_m


def wall_x_m(subject):
    """Plane position [m]: 0.52 m scaled by the wearer's forward reach at BEHIND_WALL (exactly 0.52 for m50)."""
    return float(WALL_X_M50_M * hand_position_m(subject, BEHIND_WALL)[0] / hand_position_m("m50", BEHIND_WALL)[0])


def for_subject(subject):
    """The scenario for another wearer: the same movement, the plane placed relative to their hand."""
    return dataclasses.replace(
        BASE, subject=subject,
        walls=(
            ("wall_plane", {
                "point_m": (wall_x_m(subject), 0.0, 0.0), "normal": (1.0, 0.0, 0.0),
                "law": (WALL_STIFFNESS_N_PER_M, WALL_DAMPING_N_S_PER_M),
                "cuff_stiffness_N_per_m": HAND_CUFF_STIFFNESS,
            }),
        ),
    )


BASE = Scenario(
    name="wall_push",
    description="push the hand into a virtual plane and release, slow, fast and medium",
    subject="m50",
    intent=JointIntent(
        start_rad=READY,
        start_hold_s=0.5,
        vias=(
            Via(BEHIND_WALL, move_s=1.2, hold_s=1.0),
            Via(READY, move_s=1.0, hold_s=0.5),
            Via(BEHIND_WALL, move_s=0.5, hold_s=1.0),
            Via(READY, move_s=0.5, hold_s=0.5),
            Via(BEHIND_WALL, move_s=0.8, hold_s=1.0),
            Via(READY, move_s=0.8, hold_s=0.3),
        ),
    ),
    duration_s=9.6,
    controllers=("walls", "transparent", "gravity", "zero"),
)
SCENARIO = for_subject("m50")
