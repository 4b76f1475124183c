"""Measurement: what a controller receives cannot be changed, by it or by anyone holding the inputs.

Source: NumPy's documented semantics of ``ndarray.flags.writeable`` /
``ndarray.setflags`` (writing to a read-only array raises ValueError; the
WRITEABLE flag of a view can be set only while its base is writeable).
"""

from __future__ import annotations

import numpy as np
import pytest

from models.records import Measurement


def _read_only(a: np.ndarray) -> np.ndarray:
    a.setflags(write=False)
    return a


def test_read_only_arrays_owning_their_data_and_rows_of_one_are_kept_as_they_are():
    # models/records.py: nothing can write to them (NumPy setflags semantics), so no copy is needed.
    q, dq, tau = (_read_only(np.arange(3.0) + k) for k in range(3))
    wrenches = _read_only(np.arange(12.0).reshape(2, 6).copy())
    m = Measurement(0.5, q, dq, tau, dict(zip(("a", "b"), wrenches)))
    assert m.q_rad is q and m.dq_rad_s is dq and m.tau_Nm is tau
    assert m.cuff_wrench["a"].base is wrenches and m.cuff_wrench["b"].base is wrenches
    with pytest.raises(ValueError):
        m.cuff_wrench["b"].setflags(write=True)


def test_writable_inputs_and_read_only_views_of_writable_arrays_are_copied():
    # A read-only view of a writable array changes with it, so the Measurement keeps its own copy.
    q = np.array([0.1, 0.2])
    owner = np.zeros((2, 6))
    view = owner[1]
    view.setflags(write=False)
    flat = np.arange(12.0)
    reshaped = _read_only(flat.reshape(2, 6))  # read-only, but its base (flat) is not
    m = Measurement(0.0, q, [0.0, 1.0], np.zeros(2), {"hand": view, "forearm": [1.0] * 6, "upper_arm": reshaped[0]})
    q[0] = 9.0
    owner[1] = 9.0
    flat[0] = 9.0
    assert np.array_equal(m.q_rad, [0.1, 0.2]) and np.array_equal(m.cuff_wrench["hand"], np.zeros(6))
    assert np.array_equal(m.cuff_wrench["upper_arm"], np.arange(6.0))
    for arr in (m.q_rad, m.dq_rad_s, m.tau_Nm, *m.cuff_wrench.values()):
        assert arr.dtype == np.float64 and not arr.flags.writeable
        with pytest.raises(ValueError):
            arr[0] = 1.0
    with pytest.raises(TypeError):
        m.cuff_wrench["hand"] = np.zeros(6)  # a read-only mapping
    assert type(m.t_s) is float


def test_integer_arrays_are_converted_to_float():
    m = Measurement(1, _read_only(np.array([1, 2])), np.zeros(2), np.zeros(2), {"hand": _read_only(np.ones(6, int))})
    assert m.q_rad.dtype == np.float64 and m.cuff_wrench["hand"].dtype == np.float64
    assert np.array_equal(m.q_rad, [1.0, 2.0]) and m.t_s == 1.0


def test_loop_constructor_keeps_what_the_checked_one_keeps_for_sensor_readings():
    # models/records.py Measurement._from_frozen: on what the sensors return (new read-only arrays, read-only rows
    # of one, NumPy setflags semantics) the checked constructor keeps every array as it is, so skipping the checks
    # gives the same fields.
    from sim.physics.sensors import EncoderParams, ForceSensorBank, ForceSensorParams, ForceTorqueSensor, JointSensing

    rng = np.random.default_rng(7)
    joints = JointSensing(EncoderParams(torque_noise_std_Nm=0.1), 3, 1e-3, rng)
    bank = ForceSensorBank([ForceTorqueSensor(ForceSensorParams(), 1e-3, np.random.default_rng(s)) for s in (1, 2)])
    q, dq, tau = joints.measure(np.array([0.1, -0.2, 0.3]), np.array([1.0, 2.0, 3.0]))
    wrenches = bank.measure(np.arange(12.0).reshape(2, 6))
    checked = Measurement(0.25, q, dq, tau, dict(zip(("a", "b"), wrenches)))
    fast = Measurement._from_frozen(0.25, q, dq, tau, dict(zip(("a", "b"), wrenches)))
    assert checked.q_rad is fast.q_rad is q and checked.dq_rad_s is fast.dq_rad_s and checked.tau_Nm is fast.tau_Nm
    assert type(fast.t_s) is float and fast.t_s == checked.t_s
    assert list(fast.cuff_wrench) == list(checked.cuff_wrench) == ["a", "b"]
    for name in ("a", "b"):
        assert np.array_equal(fast.cuff_wrench[name], checked.cuff_wrench[name])
        assert fast.cuff_wrench[name].base is checked.cuff_wrench[name].base is wrenches
    for arr in (fast.q_rad, fast.dq_rad_s, fast.tau_Nm, *fast.cuff_wrench.values()):
        with pytest.raises(ValueError):
            arr[0] = 1.0
    with pytest.raises(TypeError):
        fast.cuff_wrench["a"] = np.zeros(6)  # a read-only mapping, as the constructor's
