"""The wall push of ``wall_push.py`` with series-elastic drives in place of the torque sources.

Each joint's motor now winds a spring whose deflection is the joint-torque
reading, and an inner torque loop tracks the controller's command
(``SeriesElasticParams``, README "Drives").  Compare the rendered wall and the
transparency with those of ``wall_push.py``: the drives' bandwidth, not only
the controller, sets what the wearer feels: the inner torque loop lags the
command by about 2 zeta / omega_n (10 ms at the shoulder and elbow, against
2 ms for the default drives), and a wall spring rendered late loses damping,
so expect less wall damping than with ``wall_push.py``.  Copy this file and
edit the drive parameters (spring stiffness, loop gains, loop rate).
"""

import dataclasses

import wall_push  # a scenario file imports its neighbours in the folder

from sim import SeriesElasticParams

DRIVES = SeriesElasticParams()


def for_subject(subject):
    """The shipped wall push for another wearer (the plane placed relative to their hand), with these drives."""
    return dataclasses.replace(wall_push.for_subject(subject), name="wall_push_sea", actuators=DRIVES,
                               description="the wall push with series-elastic drives")


SCENARIO = for_subject("m50")
