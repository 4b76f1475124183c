"""Hand to the opposite hip: a seated wearer reaches down and across the body, as if to a trouser pocket.

Our own clinic-like setting: from the hand resting on the right thigh the
wearer swings the hand across the belly to the left hip (shoulder slightly
extended and strongly turned inward, elbow at about 70 deg), holds there and
returns.  Internal rotation is what this activity needs most, and the
robot's humeral-rotation joint comes within about 8 deg of its stop.
"""

from sim import JointIntent, Scenario, Via, deg

# joints: gh flexion, gh abduction, gh rotation, elbow flexion, pronation, wrist flexion, wrist deviation
HAND_ON_THIGH = deg(15, 10, 0, 80, 0, 0, 0)
AT_LEFT_HIP = deg(-22, -6, 48, 70, 30, 0, 0)  # grip 28 cm medial and 43 cm below the m50 shoulder

SCENARIO = Scenario(
    name="hand_to_hip",
    description="seated hand from the right thigh across to the left hip and back, 1 s each way",
    subject="m50",
    intent=JointIntent(
        start_rad=HAND_ON_THIGH,
        start_hold_s=0.3,
        vias=(
            Via(AT_LEFT_HIP, move_s=1.0, hold_s=0.6),
            Via(HAND_ON_THIGH, move_s=1.0, hold_s=0.4),
        ),
    ),
    duration_s=3.3,
    controllers=("transparent", "gravity", "walls", "zero"),
)
