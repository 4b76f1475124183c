"""A fast overhand toss: a seated wearer cocks the hand beside the ear and throws a soft ball forward.

Our own clinic-like setting: late in rehabilitation, the wearer tosses a foam
ball to a therapist sitting opposite.  They lift the hand to beside the head
(shoulder flexed 110 deg, elbow folded), then sweep the arm forward and down in
0.45 s, extending the elbow and pronating the forearm, and let the arm settle
before bringing it back to the thigh.  The sweep asks for joint speeds (about
5 rad/s at the shoulder, 6.5 rad/s at the elbow) above the robot's own velocity
limits (3 and 4 rad/s): a stress test of transparency at speed, and of what the
``walls`` variant's velocity limits do to a wearer who moves faster.
"""

from sim import JointIntent, Scenario, Via, deg

# joints: gh flexion, gh abduction, gh rotation, elbow flexion, pronation, wrist flexion, wrist deviation
HAND_ON_THIGH = deg(15, 10, 0, 80, 0, 0, 0)
COCKED = deg(110, 10, 10, 120, 0, -20, 0)  # hand above the shoulder, wrist extended
FOLLOW_THROUGH = deg(40, -5, 20, 30, 30, 20, 0)  # arm forward and down, elbow nearly straight

SCENARIO = Scenario(
    name="throw",
    description="seated overhand toss: slow wind-up, 0.45 s sweep forward and down, slow return",
    subject="m50",
    intent=JointIntent(
        start_rad=HAND_ON_THIGH,
        start_hold_s=0.3,
        vias=(
            Via(COCKED, move_s=0.9, hold_s=0.3),
            Via(FOLLOW_THROUGH, move_s=0.45, hold_s=0.4),
            Via(HAND_ON_THIGH, move_s=1.0, hold_s=0.3),
        ),
    ),
    duration_s=3.65,
    controllers=("transparent", "gravity", "walls", "zero"),
)
