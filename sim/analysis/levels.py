"""Per-level activity of an HQP controller over a run, from its logged diagnostics.

The HQP controller (:class:`controllers.hqp.HQPController`) logs per tick and per priority level i the columns
``diag_active_i`` (the level had rows), ``diag_binding_i`` (an equality row of the level is not met, or an
inequality row sits at its bound, within the controller's ``binding_tol``) and ``diag_qp_i`` (the QP backend
solved the level), NaN on a fallback tick. This module turns them into shares of ticks and boolean series
for the reports; it draws nothing.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np

__all__ = ["LevelActivity", "level_activity"]


@dataclass(frozen=True)
class LevelActivity:
    """One level's activity over a run.

    Attributes
    ----------
    level : int
        Priority level, 0 the highest.
    active, binding, qp : (n,) bool ndarray
        Per tick: the level had rows; it was binding; the QP backend solved it (False on a fallback tick).
    solved_ticks : int
        Ticks with a solve (no fallback): the denominator of the shares.
    """

    level: int
    active: np.ndarray
    binding: np.ndarray
    qp: np.ndarray
    solved_ticks: int

    def share(self, which: str) -> float | None:
        """Share [-] of the solved ticks on which the level was ``which`` (``"active"``, ``"binding"``,
        ``"qp"``); None without a solved tick."""
        if self.solved_ticks == 0:
            return None
        return float(np.count_nonzero(getattr(self, which))) / self.solved_ticks


def level_activity(arrays: Mapping[str, np.ndarray]) -> list[LevelActivity]:
    """Every level's :class:`LevelActivity` from a run's columns (``diag_active_0``, ``diag_binding_0``,
    ``diag_qp_0``, ... as the HQP controller logs them); empty for a run logged without them."""
    out = []
    i = 0
    while all(f"diag_{kind}_{i}" in arrays for kind in ("active", "binding", "qp")):
        cols = [np.asarray(arrays[f"diag_{kind}_{i}"], dtype=float) for kind in ("active", "binding", "qp")]
        solved = np.isfinite(cols[0])
        out.append(LevelActivity(i, *(solved & (c > 0.5) for c in cols), int(np.count_nonzero(solved))))
        i += 1
    return out
