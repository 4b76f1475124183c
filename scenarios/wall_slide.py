"""Sliding the hand along a virtual board: a seated wearer presses lightly down and wipes forward and back.

Our own clinic-like setting: a virtual horizontal sliding board stands at about
chest height in front of the wearer.  The hand hovers above it, comes down and
presses lightly into it (the intent lies 3 cm below the board's top), slides
forward about 16 cm as the elbow opens, slides back, and lifts off.  Under the
``walls`` variant the robot renders the board as a spring-damper on the hand
point, so the hand rides on it; the other variants let the hand sink through.

The board scales with the wearer (``for_subject``): its top is the highest
point of the wearer's intended slide, raised by ``PRESS_DEPTH_M``, so every
wearer presses into it by at least that much all along the slide.
"""


import numpy as np

from models.cuffs import CuffParams
from models.human import hand_position_m
from sim import JointIntent, Scenario, Via, deg

# joints: gh flexion, gh abduction, gh rotation, elbow flexion, pronation, wrist flexion, wrist deviation
HOVER = deg(25, 5, 0, 112, 0, 0, 0)  # hand 3-4 cm above the board
NEAR = deg(25, 5, 0, 95, 0, 0, 0)  # on the board, close to the body
FAR = deg(60, 5, 0, 40, 0, 0, 0)  # on the board, 16 cm further forward (m50); hand height within 1 cm of NEAR

INTENT = JointIntent(
    start_rad=HOVER,
    start_hold_s=0.4,
    vias=(
        Via(NEAR, move_s=0.6, hold_s=0.4),
        Via(FAR, move_s=1.5, hold_s=0.3),
        Via(NEAR, move_s=1.5, hold_s=0.3),
        Via(HOVER, move_s=0.6, hold_s=0.4),
    ),
)
SLIDE_S = (1.0, 4.6)  # from the arrival at NEAR to the return to NEAR [s]

PRESS_DEPTH_M = 0.03  # least depth of the intended hand path below the board's top [m]
BOARD_STIFFNESS_N_PER_M = 400.0
BOARD_DAMPING_N_S_PER_M = 5.0
# along-limb stiffness of the hand cuff: the board is rendered at the wearer's hand, not the robot's
HAND_CUFF_STIFFNESS = CuffParams().stiffness_N_per_m


def board_top_m(subject):
    """Height of the board's top above the shoulder centre [m] for this wearer (negative: below)."""
    postures = INTENT.sample(np.linspace(*SLIDE_S, 21))[0]
    return float(max(hand_position_m(subject, q)[2] for q in postures)) + PRESS_DEPTH_M


def for_subject(subject):
    """The scenario for another wearer: the same movement, the board placed relative to their hand."""
    return Scenario(
        name="wall_slide",
        description="press lightly into a virtual board at chest height and slide forward and back along it",
        subject=subject,
        intent=INTENT,
        duration_s=6.0,
        controllers=("walls", "transparent", "gravity", "zero"),
        walls=(
            ("wall_plane", {
                "point_m": (0.0, 0.0, board_top_m(subject)), "normal": (0.0, 0.0, -1.0),
                "law": (BOARD_STIFFNESS_N_PER_M, BOARD_DAMPING_N_S_PER_M),
                "cuff_stiffness_N_per_m": HAND_CUFF_STIFFNESS,
            }),
        ),
    )


SCENARIO = for_subject("m50")
