"""Hand to mouth: a seated wearer lifts the hand from the thigh to the mouth, as if taking a sip.

Our own clinic-like setting: the wearer sits upright in the exoskeleton, the
right hand resting on the thigh.  They bring the hand up to the mouth (shoulder
flexed and turned inward, elbow flexed well past a right angle, forearm half
pronated), pause for a sip, and lower it again, a little over a second each
way.  A body-proximal activity of daily living: the elbow works near the top
of its range while the hand stays close to the face.
"""

from sim import JointIntent, Scenario, Via, deg

# joints: gh flexion, gh abduction, gh rotation, elbow flexion, pronation, wrist flexion, wrist deviation
HAND_ON_THIGH = deg(15, 10, 0, 80, 0, 0, 0)
AT_MOUTH = deg(50, -8, 40, 135, 30, 0, 0)  # grip about 16 cm medial and 13 cm above the m50 shoulder

SCENARIO = Scenario(
    name="hand_to_mouth",
    description="seated hand from thigh to mouth and back, about 1.1 s each way",
    subject="m50",
    intent=JointIntent(
        start_rad=HAND_ON_THIGH,
        start_hold_s=0.3,
        vias=(
            Via(AT_MOUTH, move_s=1.1, hold_s=0.6),
            Via(HAND_ON_THIGH, move_s=1.1, hold_s=0.4),
        ),
    ),
    duration_s=3.5,
    controllers=("transparent", "gravity", "walls", "zero"),
)
