"""Hand to the back of the head: a seated wearer reaches up and behind, as if combing the hair.

Our own clinic-like setting: from the hand resting on the thigh the wearer
raises the arm high in front, brings the elbow across towards the midline and
folds it, so that the hand arrives behind the crown of the head; they hold
there briefly and come back down, 2 s each way.  The largest elevation of the
library: the robot's first shoulder joint travels 137 deg, at up to 2.7 rad/s
(its velocity limit is 3 rad/s).
"""

from sim import JointIntent, Scenario, Via, deg

# joints: gh flexion, gh abduction, gh rotation, elbow flexion, pronation, wrist flexion, wrist deviation
HAND_ON_THIGH = deg(15, 10, 0, 80, 0, 0, 0)
BEHIND_HEAD = deg(108, -32, 24, 130, 0, 0, 0)  # grip 7 cm behind, 12 cm medial, 23 cm above the m50 shoulder

SCENARIO = Scenario(
    name="hand_to_head",
    description="seated hand from thigh to the back of the head and back, 2 s each way",
    subject="m50",
    intent=JointIntent(
        start_rad=HAND_ON_THIGH,
        start_hold_s=0.3,
        vias=(
            Via(BEHIND_HEAD, move_s=2.0, hold_s=0.6),
            Via(HAND_ON_THIGH, move_s=2.0, hold_s=0.4),
        ),
    ),
    duration_s=5.3,
    controllers=("transparent", "gravity", "walls", "zero"),
)
