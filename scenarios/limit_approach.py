"""Approaching a joint stop at speed: a seated wearer curls the forearm up fast, right to the robot's elbow stop.

Our own clinic-like setting: a quick biceps curl.  From a forearm lowered in
front of the body (elbow at 60 deg) the wearer folds the elbow in 0.5 s, at a
peak of about 5.5 rad/s, to half a degree short of the robot's elbow stop
(145 deg by default; the wearer's own range goes to 150), holds, and lowers the
forearm again.  Under the ``walls`` variant the joint-limit task must brake the
elbow early enough to keep it inside its range; the other variants leave the
robot to follow the wearer all the way.
"""

import math

from models.exo import EXO_JOINTS, ExoParams
from sim import JointIntent, Scenario, Via, deg

ELBOW = EXO_JOINTS.index("exo_elbow")  # shares its axis and sign with the wearer's elbow flexion
ELBOW_STOP_RAD = ExoParams().limits_rad()[1][ELBOW]  # the fitted robot keeps the default stops
SHORT_OF_STOP_RAD = math.radians(0.5)

# joints: gh flexion, gh abduction, gh rotation, elbow flexion, pronation, wrist flexion, wrist deviation
FOREARM_DOWN = deg(20, 5, 0, 60, 0, 0, 0)
CURLED = FOREARM_DOWN[:ELBOW] + (ELBOW_STOP_RAD - SHORT_OF_STOP_RAD,) + FOREARM_DOWN[ELBOW + 1:]

SCENARIO = Scenario(
    name="limit_approach",
    description="fast elbow curl (0.5 s, about 5.5 rad/s peak) to just short of the robot's elbow stop, and back",
    subject="m50",
    intent=JointIntent(
        start_rad=FOREARM_DOWN,
        start_hold_s=0.3,
        vias=(
            Via(CURLED, move_s=0.5, hold_s=0.8),
            Via(FOREARM_DOWN, move_s=0.8, hold_s=0.4),
        ),
    ),
    duration_s=2.8,
    controllers=("walls", "transparent", "gravity", "zero"),
)
