"""The seated reach of ``reach.py`` with things going wrong: a hand sensor that sticks, a drifting bias, a
cuff that slips and a sudden jerk of the wearer.

Each fault is active for start_s <= t < end_s and the run goes on through all
of them; the log's ``fault_active`` column, the report's "Faults" section and
the replay's caption show when.  Copy this file and edit the faults (the kinds
are listed in the README, "Faults").
"""

from sim import CuffSlip, JointIntent, Scenario, SensorBiasDrift, SensorDropout, Via, WearerJerk, deg

# joints: gh flexion, gh abduction, gh rotation, elbow flexion, pronation, wrist flexion, wrist deviation
HAND_BESIDE_LAP = deg(15, 10, 0, 80, 0, 0, 0)
CUP_ON_SHELF = deg(85, 5, 0, 15, 20, 0, 0)

SCENARIO = Scenario(
    name="sensor_faults",
    description="the seated reach with a stuck hand sensor, a bias drift, a slipping cuff and a jerk",
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
    faults=(
        SensorDropout(name="hand sensor sticks", cuff="hand", mode="stuck", start_s=0.8, end_s=1.1),
        SensorBiasDrift(name="forearm sensor drifts", cuff="forearm", rate_N_per_s=(4.0, 0.0, 0.0),
                        start_s=1.3, end_s=2.0),
        CuffSlip(name="upper-arm cuff slips", cuff="upper_arm", factor=0.3, start_s=1.6, end_s=2.2),
        WearerJerk(name="elbow jerk", joint="human_elbow_flexion", torque_Nm=4.0, start_s=2.5, end_s=2.55),
    ),
)
