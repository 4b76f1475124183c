"""The seated reach of ``reach.py`` with things going wrong: a hand sensor that sticks, a drifting bias, a
cuff that slips and a sudden jerk of the wearer.

Each fault is active for start_s <= t < end_s and the run goes on through all
of them; the log's ``fault_active`` column, the report's "Faults" section and
the replay's caption show when.  Copy this file and edit the faults (the kinds
are listed in the README, "Faults").
"""

import dataclasses

from reach import SCENARIO as REACH  # a scenario file imports its neighbours in the folder

from sim import CuffSlip, SensorBiasDrift, SensorDropout, WearerJerk

SCENARIO = dataclasses.replace(
    REACH,
    name="sensor_faults",
    description="the seated reach with a stuck hand sensor, a bias drift, a slipping cuff and a jerk",
    faults=(
        SensorDropout(name="hand sensor sticks", cuff="hand", mode="stuck", start_s=0.8, end_s=1.1),
        SensorBiasDrift(name="forearm sensor drifts", cuff="forearm", rate_N_per_s=(4.0, 0.0, 0.0),
                        start_s=1.3, end_s=2.0),
        CuffSlip(name="upper-arm cuff slips", cuff="upper_arm", factor=0.3, start_s=1.6, end_s=2.2),
        WearerJerk(name="elbow jerk", joint="human_elbow_flexion", torque_Nm=4.0, start_s=2.5, end_s=2.55),
    ),
)
