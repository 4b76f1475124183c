"""Scenarios for another wearer: ``load_scenario(path, subject=...)`` and ``models.human.hand_position_m``."""

from __future__ import annotations

import math

import numpy as np
import pytest
from _scenario_files import write_scenario

from models.errors import ParameterError
from models.human import HumanParams, hand_position_m
from sim.loop.scenario import ScenarioError, load_scenario


@pytest.mark.parametrize("subject", ["f5", "m95"])
def test_hand_position_straight_arm_is_sum_of_lengths(subject):
    """A straight serial chain (textbook forward kinematics): the hanging hand is the segment lengths below the
    shoulder; flexed 90 deg at the shoulder, the same distance in front of it (+x forward, +z up)."""
    hp = HumanParams(subject)
    reach = hp.length_m("upper_arm") + hp.length_m("forearm") + hp.grip_distance_m
    np.testing.assert_allclose(hand_position_m(hp, np.zeros(7)), [0.0, 0.0, -reach], atol=1e-12)
    flexed = np.zeros(7)
    flexed[0] = math.pi / 2
    np.testing.assert_allclose(hand_position_m(hp, flexed), [reach, 0.0, 0.0], atol=1e-12)


def test_hand_position_rejects_wrong_posture_length():
    with pytest.raises(ParameterError, match="q_rad must have 7 entries"):
        hand_position_m("m50", np.zeros(5))


def test_subject_replaces_the_wearer(tmp_path):
    path = write_scenario(tmp_path / "s.py")
    base = load_scenario(path)
    other = load_scenario(path, subject="f5")
    assert other.human.subject.stature_m < base.human.subject.stature_m
    assert (other.name, other.duration_s, other.intent) == (base.name, base.duration_s, base.intent)


def test_for_subject_is_used_when_defined(tmp_path):
    path = write_scenario(tmp_path / "s.py")
    path.write_text(path.read_text() + "\n\ndef for_subject(subject):\n"
                    "    import dataclasses\n"
                    "    return dataclasses.replace(SCENARIO, subject=subject, duration_s=0.123)\n")
    s = load_scenario(path, subject="m95")
    assert s.duration_s == 0.123 and s.human.subject.stature_m > 1.8


def test_unknown_subject_names_file_and_subject(tmp_path):
    path = write_scenario(tmp_path / "s.py")
    with pytest.raises(ScenarioError, match=r"s\.py: subject 'x9'.*built-in subjects are"):
        load_scenario(path, subject="x9")


def test_for_subject_returning_garbage_is_reported(tmp_path):
    path = write_scenario(tmp_path / "s.py")
    path.write_text(path.read_text() + "\n\ndef for_subject(subject):\n    return 42\n")
    with pytest.raises(ScenarioError, match=r"for_subject\('m50'\) must return a Scenario, got int"):
        load_scenario(path, subject="m50")
