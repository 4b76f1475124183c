"""Free reaching: a seated wearer lifts the hand from beside the lap to a cup on a shelf in front.

Our own clinic-like setting: the wearer sits upright in the exoskeleton, the
right hand resting beside the thigh.  They reach forward to a point in front of
the shoulder at shoulder height (where a cup stands on a shelf), pause, and
bring the hand back, about one second each way.  Copy this file and edit it.
"""

from sim import JointIntent, Scenario, Via, deg

# joints: gh flexion, gh abduction, gh rotation, elbow flexion, pronation, wrist flexion, wrist deviation
HAND_BESIDE_LAP = deg(15, 10, 0, 80, 0, 0, 0)
CUP_ON_SHELF = deg(85, 5, 0, 15, 20, 0, 0)

SCENARIO = Scenario(
    name="reach",
    description="seated forward reach to shoulder height and back, about 1 s each way",
    subject="m50",
    intent=JointIntent(
        start_rad=HAND_BESIDE_LAP,
        start_hold_s=0.3,
        vias=(
            Via(CUP_ON_SHELF, move_s=1.0, hold_s=0.4),
            Via(HAND_BESIDE_LAP, move_s=1.0, hold_s=0.4),
        ),
    ),
    duration_s=3.1,
    controllers=("gravity", "zero", "transparent", "walls"),
)
