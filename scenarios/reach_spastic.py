"""The seated reach of ``reach.py`` by a wearer with a spastic elbow: first slowly, then fast.

The same postures as the shipped reach, out and back twice: 2 s each way,
then 0.5 s each way.  Reaching out extends the elbow, which stretches its
flexors; their spasticity (``Spasticity.grade("moderate")``: illustrative, not
clinical) resists only above a threshold speed, after a reflex delay, so the
slow reach meets no resistance and the fast one does.  The log's
``tau_human_impairment`` column holds the resisting torque; the report's
"Wearer" section states the impairment and whether the reach was completed.
Copy this file and change the grade, the joints or the speeds.
"""

import dataclasses

from reach import CUP_ON_SHELF, HAND_BESIDE_LAP  # a scenario file imports its neighbours in the folder
from reach import SCENARIO as REACH

from sim import Impairment, JointIntent, Spasticity, Via

SLOW_MOVE_S, FAST_MOVE_S, HOLD_S = 2.0, 0.5, 0.4

SCENARIO = dataclasses.replace(
    REACH,
    name="reach_spastic",
    description="the seated reach with a spastic elbow (moderate), slowly (2 s each way) then fast (0.5 s)",
    intent=JointIntent(
        start_rad=HAND_BESIDE_LAP,
        start_hold_s=0.3,
        vias=(
            Via(CUP_ON_SHELF, move_s=SLOW_MOVE_S, hold_s=HOLD_S),
            Via(HAND_BESIDE_LAP, move_s=SLOW_MOVE_S, hold_s=HOLD_S),
            Via(CUP_ON_SHELF, move_s=FAST_MOVE_S, hold_s=HOLD_S),
            Via(HAND_BESIDE_LAP, move_s=FAST_MOVE_S, hold_s=HOLD_S),
        ),
    ),
    duration_s=6.9,  # 0.3 s + the slow reach out and back (2 x 2.4 s) + the fast one (2 x 0.9 s)
    impairment=Impairment(spasticity=Spasticity.grade("moderate")),
)
