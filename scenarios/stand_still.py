"""A long stand-still: a seated wearer holds the forearm level for 25 s, as if carrying a tray.

Our own clinic-like setting: a holding exercise.  The wearer keeps the upper
arm slightly forward and the elbow at a right angle, forearm level, and does
not move for 25 s.  Nothing should happen: the run checks that the controller
neither drifts nor feeds the force sensors' noise back as motion the wearer
would feel (the sensors have 0.3 N and 0.01 N m of noise by default).
"""

from sim import JointIntent, Scenario, deg

# joints: gh flexion, gh abduction, gh rotation, elbow flexion, pronation, wrist flexion, wrist deviation
HOLDING_TRAY = deg(20, 10, 0, 90, 0, 0, 0)

SCENARIO = Scenario(
    name="stand_still",
    description="hold the forearm level for 25 s without moving",
    subject="m50",
    intent=JointIntent(start_rad=HOLDING_TRAY, vias=(), start_hold_s=25.0),
    duration_s=25.0,
    controllers=("transparent", "walls", "gravity", "zero"),
)
