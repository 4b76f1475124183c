"""The safety monitor at work: a variant with far too stiff a posture task trips it, and it recovers.

The wearer holds the forearm level and does not move.  The variant ``pushy``
drives the robot towards another posture (elbow nearly straight, shoulder
raised) with a joint-space PD of 6 Hz at the highest priority, a gain no one
should put on a robot strapped to an arm: the robot pulls the arm until a cuff
force passes its body-region limit or a joint its speed limit (here the
elbow passes twice its rated 4 rad/s within about 30 ms).  The monitor
then switches to gravity compensation with joint damping, waits until the
quantity that tripped it stays under half its limit for 0.3 s, and hands back
to ``pushy``, which trips it again as long as it pulls.  Under
``transparent`` nothing trips.  Copy this file and edit it: try
``safe_state="stop"`` or ``release="never"``.

    exosandbox run scenarios/demos/safety_trip.py --controller pushy
"""

from sim import JointIntent, SafetyParams, Scenario, deg

# joints: gh flexion, gh abduction, gh rotation, elbow flexion, pronation, wrist flexion, wrist deviation
HOLDING_TRAY = deg(20, 10, 0, 90, 0, 0, 0)
ARM_RAISED = deg(70, 10, 0, 20, 0, 0, 0)

SCENARIO = Scenario(
    name="safety_trip",
    description="a far too stiff posture task trips the safety monitor, which releases and trips again",
    subject="m50",
    intent=JointIntent(start_rad=HOLDING_TRAY, vias=(), start_hold_s=3.0),
    duration_s=3.0,
    controllers=("pushy", "transparent"),
    variants={"pushy": [[("posture", {"posture_rad": ARM_RAISED, "frequency_Hz": 6.0, "weight": 1.0})],
                        ["damping"]]},
    safety=SafetyParams(safe_state="damp", release="hold", release_fraction=0.5, release_hold_s=0.3),
)
