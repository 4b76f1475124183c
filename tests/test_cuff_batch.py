"""The stacked cuff law used by the plant against the one-cuff law it restates.

:func:`models.cuffs.cuff_wrench` is itself checked against Hooke's law, the
torsion spring, the energy gradient, a closed-path work integral and
Newton's third law (tests/test_cuffs.py); :func:`models.cuffs.cuff_wrenches`
must give the same wrenches, energies and powers to rounding (1e-12
relative) for every cuff of a stack.
"""

from __future__ import annotations

import numpy as np
import pinocchio as pin
import pytest

from models import CuffParams
from models.cuffs import cuff_wrench, cuff_wrenches


def test_stacked_cuff_law_equals_the_one_cuff_law_for_each_cuff():
    rng = np.random.default_rng(11)
    params = [CuffParams(), CuffParams.with_damping_ratio(0.2, 1.5, (0.01, 0.01, 0.002)), CuffParams()]
    oMa = [pin.SE3(pin.exp3(rng.normal(size=3)), rng.normal(size=3)) for _ in params]
    oMb = [a * pin.exp6(pin.Motion(rng.normal(scale=0.05, size=6))) for a in oMa]
    v_a, v_b = rng.normal(size=(3, 6)), rng.normal(size=(3, 6))
    w_a, w_b, energy, power = cuff_wrenches([a.actInv(b) for a, b in zip(oMa, oMb)], v_a, v_b,
                                            np.array([p.k_diag for p in params]),
                                            np.array([p.d_diag for p in params]))
    for i, p in enumerate(params):
        ref = cuff_wrench(oMa[i], oMb[i], v_a[i], v_b[i], p)
        scale = max(1.0, np.abs(ref.on_b).max())
        np.testing.assert_allclose(w_a[i], ref.on_a, rtol=0, atol=1e-12 * scale)
        np.testing.assert_allclose(w_b[i], ref.on_b, rtol=0, atol=1e-12 * scale)
        assert energy[i] == pytest.approx(ref.energy_J, rel=1e-12, abs=1e-12)
        assert power[i] == pytest.approx(ref.power_W, rel=1e-12, abs=1e-12)

