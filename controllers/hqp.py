r"""Strict-priority (lexicographic) hierarchical least squares with inequalities.

A hierarchy is a list of :class:`Level` objects, highest priority first, above
which sit hard constraints (rigid-body dynamics, torque limits, bounds) that
must hold exactly. :func:`solve_hierarchy` solves one QP per level (Kanoun,
Lamiraux & Wieber 2011). Level :math:`k` minimises its own weighted squared
error while every higher level keeps the optimum it found:

.. math::

    \min_{x,\,v_k} \;\; & \tfrac12 \sum_i w_{k,i} \|A_{k,i} x - b_{k,i}\|^2
                         + \tfrac12 \sum_j \omega_{k,j} \|v_{k,j}\|^2 \\
    \text{s.t.} \;\;     & C_{k,j} x - d_{k,j} \le v_{k,j}
                           \quad \text{(own inequality rows, slack } v_k) \\
                         & A_l x - b_l = e_l^\star, \quad
                           C_l x - d_l \le v_l^\star \quad (l < k)
                           \quad \text{(higher levels frozen)} \\
                         & A_H x = b_H, \quad C_H x \le d_H, \quad lb \le x \le ub
                           \quad \text{(hard, slack } 0)

where :math:`e_l^\star` and :math:`v_l^\star` are the optimal slacks of level
:math:`l`. Both are unique (the cost is strictly convex in :math:`(A_l x,
v_l)`), so freezing them keeps exactly the optimal set of level :math:`l`: a
satisfied inequality row stays satisfied, a violated one stays at its least
violation.

Higher equality rows are not passed to the solver as constraints: they are
eliminated exactly (Escande, Mansard & Wieber 2014). With :math:`x_{k-1}` the
solution of level :math:`k-1` and :math:`N_{k-1}` an orthonormal basis of the
null space of the stacked hard and higher equality rows, level :math:`k`
searches :math:`x = x_{k-1} + N_{k-1} z`. After the solve, the singular value
decomposition of :math:`W_k^{1/2} A_k N_{k-1}` gives
:math:`N_k = N_{k-1} V_2` (the right singular vectors of zero singular value),
so rank-deficient levels and levels that contradict a higher one stay exact:
what a level cannot change is simply not in its search space.

Two kinds of inequality rows hold with equality at *every* optimum of level
:math:`k`, and are eliminated the same way instead of being frozen as
inequalities (which would leave lower levels with degenerate QPs whose active
rows are dependent, where both DAQP and OSQP were seen to fail):

* a violated row of level :math:`k`: its slack :math:`v^\star > 0` is unique,
  so :math:`C x = d + v^\star` on the whole optimal set;
* a frozen, hard or bound row with a positive multiplier at the level's
  optimum: complementary slackness holds for every optimal primal-dual pair,
  so every optimal point keeps it active (the same reasoning by which the
  active set of Escande et al. 2014 enters the null-space basis).

The thresholds that tell "positive" from solver noise are
:attr:`HQPParams.slack_tol` and :attr:`HQPParams.multiplier_tol`; below them a
row stays a frozen inequality, which is always correct.

A level whose only constraints are satisfied by its unconstrained least-squares
point (the minimum-norm :math:`z` from the same SVD) is solved in closed form,
without the QP backend; that point is then optimal for the QP too (the
equality cost is at its minimum and every slack is zero). Otherwise the level
is a QP in :math:`(z, v_k)` handed to a backend of
:mod:`controllers.qp_backends`; before that, a few active-set iterations
from the least-squares point are tried and kept only when the level's KKT
conditions hold (:meth:`_Solver._working_set_step`).

**Compiled path.** Without box bounds, the closed-form and active-set levels
of a whole hierarchy are solved in one call of a numba kernel
(:mod:`controllers._hqp_kernels`) with the same arithmetic, and only the
levels that need the backend return to Python; ``HQPParams(compiled=False)``
solves every level in Python (the reference the tests compare it with). The
kernel takes every level's rows stacked: a :class:`LevelStack` (what a
controller builds once per tick) goes to it as it is, a list of
:class:`Level` is stacked first.

**Regularization.** With ``regularization > 0`` a last level
:math:`\min \tfrac12\|x\|^2` over the freedom that remains makes ``x``
unique; it cannot change any level's optimum. For the equality-only case this
gives the minimum-norm solution of the classical recursive projection
(Siciliano & Slotine 1991). The same number ε is the proximal weight that
backends needing a strictly convex Hessian (DAQP) use on levels whose
cost does not involve every variable: they iterate
:math:`y_{j+1} = \arg\min f(y) + \tfrac{\varepsilon}{2}\|y - y_j\|^2` to a fixed
point, which is an exact minimiser of :math:`f`; a single such step would be
suboptimal by at most :math:`\tfrac{\varepsilon}{2}\,\mathrm{dist}(y_j,
Y^\star)^2` (proximal-point method, Rockafellar 1976). No damping term stays
in any level's answer.

References
----------
.. [Kanoun2011] O. Kanoun, F. Lamiraux, P.-B. Wieber, "Kinematic control of
   redundant manipulators: generalizing the task-priority framework to
   inequality tasks", IEEE Trans. Robotics 27(4):785-792, 2011.
.. [Escande2014] A. Escande, N. Mansard, P.-B. Wieber, "Hierarchical quadratic
   programming: fast online humanoid-robot motion generation", Int. J.
   Robotics Research 33(7):1006-1028, 2014.
.. [Siciliano1991] B. Siciliano, J.-J. E. Slotine, "A general framework for
   managing multiple tasks in highly redundant robotic systems", Proc. 5th
   ICAR, Pisa, 1991.
.. [Rockafellar1976] R. T. Rockafellar, "Monotone operators and the proximal
   point algorithm", SIAM J. Control and Optimization 14(5):877-898, 1976.
"""

from __future__ import annotations

import math
import time
from collections.abc import Sequence
from dataclasses import dataclass, field
from functools import lru_cache

import numpy as np

from models.errors import ParameterError, SandboxError

from . import _hqp_kernels as _kernels
from .qp_backends import DEFAULT_BACKEND, QPSolveError, QPTolerances, get_backend

__all__ = [
    "Level",
    "LevelStack",
    "HierarchyResult",
    "HQPParams",
    "HQPInfeasibleError",
    "QPSolveError",
    "HierarchySolver",
    "solve_hierarchy",
]


class HQPInfeasibleError(SandboxError, RuntimeError):
    """The hard constraints (hard level, bounds) cannot all hold."""


# --------------------------------------------------------------------------------------------
# Levels


def _read_only(arr: np.ndarray) -> np.ndarray:
    arr.flags.writeable = False
    return arr


def _level_label(name: str) -> str:
    return f"Level {name!r}" if name else "Level (unnamed)"


_EMPTY = np.zeros(0)
_EMPTY.flags.writeable = False


def _check_entry(label: str, kind: str, i: int, entry) -> tuple[np.ndarray, np.ndarray, float]:
    where = f"{label}: {kind}[{i}]"
    if not isinstance(entry, (tuple, list)) or len(entry) not in (2, 3):
        raise ParameterError(f"{where} must be a pair (M, v) or a triple (M, v, w), got {type(entry).__name__}")
    try:
        M = np.asarray(entry[0], dtype=float)
        v = np.asarray(entry[1], dtype=float)
    except (TypeError, ValueError) as e:
        raise ParameterError(f"{where} must hold numeric arrays: {e}") from e
    if M.ndim == 1:
        M = M.reshape(1, -1)
    if v.ndim == 0:
        v = v.reshape(1)
    if M.ndim != 2:
        raise ParameterError(f"{where} matrix must be 2-D (m, n), got shape {M.shape}")
    if v.shape != (M.shape[0],):
        raise ParameterError(f"{where} vector must have shape ({M.shape[0]},) to match its matrix {M.shape}, "
                             f"got {v.shape}")
    if not np.isfinite(M.sum() + v.sum()):  # cheap test first; locate the culprit only if it fails
        if not np.isfinite(M).all():
            r, c = np.argwhere(~np.isfinite(M))[0]
            raise ParameterError(f"{where} matrix must be finite, got {M[r, c]} at [{r}, {c}]")
        if not np.isfinite(v).all():
            r = int(np.flatnonzero(~np.isfinite(v))[0])
            raise ParameterError(f"{where} vector must be finite, got {v[r]} at [{r}]")
    w = 1.0
    if len(entry) == 3:
        w = entry[2]
        if isinstance(w, bool) or not isinstance(w, (int, float, np.integer, np.floating)) or not (
            np.isfinite(w) and w > 0
        ):
            raise ParameterError(f"{where} weight must be a finite scalar > 0, got {w!r}")
    return M, v, float(w)


@lru_cache(maxsize=32)
def _no_rows(n: int) -> np.ndarray:
    return _read_only(np.zeros((0, n)))


def _stack(label: str, kind: str, entries):
    """Checked entries stacked into read-only (M, v, w per row); entries become views of them."""
    if type(entries) not in (list, tuple) and (
        isinstance(entries, (np.ndarray, str)) or not isinstance(entries, Sequence)
    ):
        raise ParameterError(f"{label}: {kind} must be a list of (M, v[, w]) entries, got {type(entries).__name__}")
    if not entries:
        return (), None, _EMPTY, _EMPTY, (0,), None
    checked = [_check_entry(label, kind, i, e) for i, e in enumerate(entries)]
    n = checked[0][0].shape[1]
    for i, (M, _, _) in enumerate(checked):
        if M.shape[1] != n:
            raise ParameterError(f"{label}: {kind}[{i}] matrix has {M.shape[1]} columns, earlier entries have {n}")
    if len(checked) == 1:
        M0, v0, w0 = checked[0]
        M, v = np.array(M0), np.array(v0)  # own copies: callers may reuse their buffers
        w = np.full(M.shape[0], w0)
        starts = (0, M.shape[0])
    else:
        M = np.vstack([c[0] for c in checked])
        v = np.concatenate([c[1] for c in checked])
        w = np.concatenate([np.full(c[0].shape[0], c[2]) for c in checked])
        starts = (0, *np.cumsum([c[0].shape[0] for c in checked]).tolist())
    M.flags.writeable = v.flags.writeable = w.flags.writeable = False
    views = tuple((M[starts[i] : starts[i + 1]], v[starts[i] : starts[i + 1]], c[2]) for i, c in enumerate(checked))
    return views, M, v, w, starts, n


@lru_cache(maxsize=256)
def _weight_vector(m: int, w: float) -> np.ndarray:
    return _read_only(np.full(m, w))


def _stack_unchecked(entries):
    """(M, v, w per row, entries, starts, n) of trusted (M, v, w) entries (see :meth:`Level.unchecked`)."""
    if not entries:
        return None, _EMPTY, _EMPTY, (), (0,), None
    if len(entries) == 1:
        M, v, w0 = entries[0]
        w0 = float(w0)
        return M, v, _weight_vector(M.shape[0], w0), ((M, v, w0),), (0, M.shape[0]), M.shape[1]
    mats = tuple(e[0] for e in entries)
    weights = tuple(float(e[2]) for e in entries)
    M = np.concatenate(mats)
    w = np.concatenate([_weight_vector(a.shape[0], wk) for a, wk in zip(mats, weights)])
    starts, k = [0], 0
    for a in mats:
        k += a.shape[0]
        starts.append(k)
    v = np.concatenate([e[1] for e in entries])
    views = tuple((M[starts[i]: starts[i + 1]], v[starts[i]: starts[i + 1]], weights[i]) for i in range(len(mats)))
    return M, v, w, views, tuple(starts), M.shape[1]


@dataclass(frozen=True, eq=False)
class Level:
    r"""One priority level: weighted equality and inequality tasks.

    Parameters
    ----------
    eq : sequence of (A, b) or (A, b, w)
        Equality tasks :math:`A x \approx b`, ``A`` (m, n), ``b`` (m,); a 1-D
        ``A`` (n,) is one row. The level's equality cost is
        :math:`\sum_i w_i \|A_i x - b_i\|^2` (weighted least squares).
    ineq : sequence of (C, d) or (C, d, w)
        Inequality tasks :math:`C x \le d`, ``C`` (m, n), ``d`` (m,). A row
        that cannot hold costs :math:`w_j \|v_j\|^2` with
        :math:`v_j = \max(C_j x - d_j, 0)` (weighted slack norm).
    name : str
        Shown in error messages and diagnostics.

    Weights ``w`` are finite scalars > 0, default 1. They rank tasks only
    within this level; between levels priority is strict. In the ``hard``
    level of :func:`solve_hierarchy` weights are meaningless: any weight
    other than 1 is rejected there. After construction ``eq`` and ``ineq``
    hold ``(M, v, w)`` triples of read-only arrays, so
    ``Level(eq=level.eq, ineq=level.ineq)`` rebuilds the same level.

    Attributes
    ----------
    A : (m_e, n) ndarray
        The equality rows of all entries, stacked (read-only).
    b : (m_e,) ndarray
    weights_eq : (m_e,) ndarray
        The weight of each equality row.
    C : (m_i, n) ndarray
        The inequality rows, stacked (read-only).
    d : (m_i,) ndarray
    weights_ineq : (m_i,) ndarray
    n_cols : int or None
        Number of columns, ``None`` for a level without rows.

    Raises
    ------
    ParameterError
        Naming the level, the entry (``eq[1]``) and what is wrong with it.
    """

    eq: Sequence = ()
    ineq: Sequence = ()
    name: str = ""
    A: np.ndarray = field(init=False, repr=False)
    b: np.ndarray = field(init=False, repr=False)
    weights_eq: np.ndarray = field(init=False, repr=False)
    C: np.ndarray = field(init=False, repr=False)
    d: np.ndarray = field(init=False, repr=False)
    weights_ineq: np.ndarray = field(init=False, repr=False)
    n_cols: int | None = field(init=False, repr=False)
    _eq_starts: tuple = field(init=False, repr=False)
    _ineq_starts: tuple = field(init=False, repr=False)
    _weighted: bool = field(init=False, repr=False)
    _unit_eq: bool = field(init=False, repr=False)

    def __post_init__(self) -> None:
        if not isinstance(self.name, str):
            raise ParameterError(f"Level.name must be a str, got {self.name!r}")
        label = _level_label(self.name)
        eq, A, b, we, eq_starts, n_eq = _stack(label, "eq", self.eq)
        ineq, C, d, wi, in_starts, n_in = _stack(label, "ineq", self.ineq)
        if n_eq is not None and n_in is not None and n_eq != n_in:
            raise ParameterError(f"{label}: ineq matrices have {n_in} columns, eq matrices have {n_eq}")
        n = n_eq if n_eq is not None else n_in
        if A is None:
            A = _no_rows(n or 0)
        if C is None:
            C = _no_rows(n or 0)
        weighted = any(w != 1.0 for *_, w in (*eq, *ineq))
        for key, value in (
            ("eq", eq), ("ineq", ineq), ("A", A), ("b", b), ("weights_eq", we), ("C", C), ("d", d),
            ("weights_ineq", wi), ("n_cols", n), ("_eq_starts", eq_starts), ("_ineq_starts", in_starts),
            ("_weighted", weighted), ("_unit_eq", all(w == 1.0 for *_, w in eq)),
        ):
            object.__setattr__(self, key, value)

    @classmethod
    def unchecked(cls, eq: Sequence = (), ineq: Sequence = (), name: str = "") -> Level:
        """A level from ``(M, v, w)`` triples, without the entry checks of the constructor.

        For a caller that builds its rows itself every control tick: each
        ``M`` is a 2-D float array (m, n), ``v`` a 1-D float array (m,) and
        ``w`` a float > 0, every ``M`` with the same n. The arrays are used
        as given (the caller must not change them while the level is in use).
        Nothing is validated, not even finiteness: use the constructor to
        find what is wrong with a suspicious entry.
        """
        self = object.__new__(cls)
        A, b, we, eq_entries, eq_starts, n_eq = _stack_unchecked(eq)
        C, d, wi, in_entries, in_starts, n_in = _stack_unchecked(ineq)
        n = n_eq if n_eq is not None else n_in
        unit_eq = True
        for e in eq_entries:
            if e[2] != 1.0:
                unit_eq = False
        weighted = not unit_eq
        for e in in_entries:
            if e[2] != 1.0:
                weighted = True
        self.__dict__.update(
            eq=eq_entries, ineq=in_entries, name=name, A=_no_rows(n or 0) if A is None else A, b=b, weights_eq=we,
            C=_no_rows(n or 0) if C is None else C, d=d, weights_ineq=wi, n_cols=n, _eq_starts=eq_starts,
            _ineq_starts=in_starts, _weighted=weighted, _unit_eq=unit_eq)
        return self

    def row_label(self, kind: str, row: int) -> str:
        """``"eq[1] row 2"``: the entry and row of stacked row ``row`` of ``kind`` ("eq" or "ineq")."""
        starts = self._eq_starts if kind == "eq" else self._ineq_starts
        entry = int(np.searchsorted(starts, row, side="right")) - 1
        return f"{kind}[{entry}] row {row - starts[entry]}"

    def slack(self, x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        r"""Slacks at ``x``: :math:`(A x - b,\; \max(C x - d, 0))`, shapes (m_e,), (m_i,)."""
        if self.n_cols is None:
            return np.zeros(0), np.zeros(0)
        x = np.asarray(x, dtype=float)
        return self.A @ x - self.b, np.maximum(self.C @ x - self.d, 0.0)

    def residual(self, x: np.ndarray) -> float:
        r"""Weighted squared error at ``x``: :math:`\sum w_i e_i^2 + \sum \omega_j v_j^2` (slacks of :meth:`slack`)."""
        e, v = self.slack(x)
        return float(self.weights_eq @ (e * e) + self.weights_ineq @ (v * v))


def _gather(entries, mats: list, rhs: list, weights: list, layout: list, m: int) -> tuple[int, bool]:
    """Append trusted (M, v, w) entries to the lists of :meth:`LevelStack.from_entries`; rows so far, any w != 1."""
    weighted = False
    for M, v, w in entries:
        k = M.shape[0]
        mats.append(M)
        rhs.append(v)
        weights.append((k, w))
        layout.append((m, m + k, w))
        m += k
        if w != 1.0:
            weighted = True
    return m, weighted


class LevelStack(Sequence):
    r"""The levels of a hierarchy with all their rows already stacked.

    :func:`solve_hierarchy` takes a ``LevelStack`` in place of a list of
    :class:`Level` and hands its arrays to the compiled kernel as they are;
    a controller that builds its rows every control tick builds one stack
    (:meth:`from_entries`) instead of one :class:`Level` per priority level.
    Indexing gives level ``k`` as a :class:`Level` (built when first asked
    for: for a level that needs the QP backend, for a message, for the
    Python path), so a stack is a sequence of levels like any other.

    Attributes
    ----------
    A, b : (m_e, n), (m_e,) ndarray
        The equality rows of every level, highest level first.
    sw : (m_e,) ndarray
        The square root of each equality row's weight.
    eq_off : (p + 1,) int64 ndarray
        Level k's equality rows are ``A[eq_off[k]:eq_off[k + 1]]``.
    unit_eq : (p,) bool ndarray
        Whether every equality weight of level k is 1.
    C, d, wi, in_off
        The same for the inequality rows ``C x <= d`` (weights ``wi``).
    n_cols : int or None
        Number of columns (``None`` when no level has rows).
    names : tuple of str
        The level names.
    """

    __slots__ = ("A", "b", "sw", "eq_off", "unit_eq", "C", "d", "wi", "in_off", "n_cols", "names", "_layout",
                 "_levels")

    def __len__(self) -> int:
        return len(self.names)

    def __getitem__(self, k):
        if isinstance(k, slice):
            return [self[i] for i in range(*k.indices(len(self)))]
        level = self._levels[k]
        if level is None:
            eq_entries, in_entries = self._layout[k]
            level = self._levels[k] = Level.unchecked(
                eq=[(self.A[s:e], self.b[s:e], w) for s, e, w in eq_entries],
                ineq=[(self.C[s:e], self.d[s:e], w) for s, e, w in in_entries], name=self.names[k])
        return level

    @classmethod
    def from_entries(cls, levels: Sequence, n: int, names: Sequence[str]) -> LevelStack:
        """A stack from trusted ``(eq, ineq)`` pairs, one per level, of ``(M, v, w)`` triples.

        The entries follow the contract of :meth:`Level.unchecked` (2-D float
        ``M`` with ``n`` columns, 1-D float ``v``, float ``w > 0``; nothing is
        validated, not even finiteness); every ``M`` is copied into the stack.
        """
        self = object.__new__(cls)
        mats_e, rhs_e, mats_i, rhs_i, layout = [], [], [], [], []
        weights_e, weights_i = [], []
        eq_off, in_off, unit = [0], [0], []
        m_e = m_i = 0
        weighted_e = weighted_i = False
        for eq, ineq in levels:
            eq_entries, in_entries = [], []
            m_e, w_e = _gather(eq, mats_e, rhs_e, weights_e, eq_entries, m_e)
            m_i, w_i = _gather(ineq, mats_i, rhs_i, weights_i, in_entries, m_i)
            weighted_e, weighted_i = weighted_e or w_e, weighted_i or w_i
            eq_off.append(m_e)
            in_off.append(m_i)
            unit.append(not w_e)
            layout.append((eq_entries, in_entries))
        self.A = np.concatenate(mats_e) if m_e else np.zeros((0, n))
        self.b = np.concatenate(rhs_e) if m_e else np.zeros(0)
        self.C = np.concatenate(mats_i) if m_i else np.zeros((0, n))
        self.d = np.concatenate(rhs_i) if m_i else np.zeros(0)
        self.sw = (np.sqrt(np.concatenate([np.full(m, w) for m, w in weights_e])) if weighted_e else np.ones(m_e))
        self.wi = np.concatenate([np.full(m, w) for m, w in weights_i]) if weighted_i else np.ones(m_i)
        self.eq_off = np.array(eq_off, dtype=np.int64)
        self.in_off = np.array(in_off, dtype=np.int64)
        self.unit_eq = np.array(unit, dtype=np.bool_)
        self.n_cols = n if (m_e or m_i) else None
        self.names = tuple(names)
        self._layout = layout
        self._levels = [None] * len(layout)
        return self

    @classmethod
    def from_arrays(cls, A: np.ndarray, b: np.ndarray, sw: np.ndarray, eq_off: np.ndarray, unit_eq: np.ndarray,
                    C: np.ndarray, d: np.ndarray, wi: np.ndarray, in_off: np.ndarray, n: int, names: Sequence[str],
                    layout: Sequence) -> LevelStack:
        """A stack over rows already stacked by the caller, without a copy (see the class attributes).

        For a caller that writes every level's rows into its own buffers each
        control tick: the arrays are used as they are (C-ordered float64,
        ``eq_off``/``in_off`` int64, ``unit_eq`` bool), so they must not change
        while the stack is in use. ``layout`` holds, per level, the pair of
        lists ``(eq, ineq)`` of ``(first row, end row, weight)`` of each entry,
        which indexing uses to rebuild the level's entries. Nothing is
        validated, not even finiteness.
        """
        self = object.__new__(cls)
        self.A, self.b, self.sw, self.eq_off, self.unit_eq = A, b, sw, eq_off, unit_eq
        self.C, self.d, self.wi, self.in_off = C, d, wi, in_off
        self.n_cols = n if (A.shape[0] or C.shape[0]) else None
        self.names = tuple(names)
        self._layout = layout
        self._levels = [None] * len(layout)
        return self

    @classmethod
    def from_levels(cls, levels: Sequence[Level], n: int) -> LevelStack:
        """The stack of the given levels (checked or not); indexing returns these very levels."""
        self = object.__new__(cls)
        p = len(levels)
        eq_off, in_off = np.zeros(p + 1, dtype=np.int64), np.zeros(p + 1, dtype=np.int64)
        As, bs, ws, Cs, ds, wis = [], [], [], [], [], []
        unit = np.empty(p, dtype=np.bool_)
        m_e = m_i = 0
        for k, level in enumerate(levels):
            if level.n_cols is not None:
                As.append(level.A)
                bs.append(level.b)
                ws.append(level.weights_eq)
                Cs.append(level.C)
                ds.append(level.d)
                wis.append(level.weights_ineq)
                m_e += level.A.shape[0]
                m_i += level.C.shape[0]
            eq_off[k + 1], in_off[k + 1] = m_e, m_i
            unit[k] = level._unit_eq
        self.A = np.concatenate(As) if m_e else np.zeros((0, n))
        self.C = np.concatenate(Cs) if m_i else np.zeros((0, n))
        self.b = np.concatenate(bs) if m_e else np.zeros(0)
        self.d = np.concatenate(ds) if m_i else np.zeros(0)
        self.sw = np.sqrt(np.concatenate(ws)) if m_e else np.zeros(0)
        self.wi = np.concatenate(wis) if m_i else np.zeros(0)
        self.eq_off, self.in_off, self.unit_eq = eq_off, in_off, unit
        self.n_cols = n if (m_e or m_i) else None
        self.names = tuple(level.name for level in levels)
        self._layout = None
        self._levels = list(levels)
        return self


# --------------------------------------------------------------------------------------------
# Parameters and result


@dataclass(frozen=True)
class HQPParams:
    r"""Numerical parameters of :func:`solve_hierarchy`.

    Attributes
    ----------
    tolerances : QPTolerances
        Passed to the QP backend (explicit solver tolerances).
    rank_tol : float, default 1e-10
        A singular value of :math:`W_k^{1/2} A_k N_{k-1}` counts as zero when
        it is at most ``rank_tol`` times the Frobenius norm of
        :math:`W_k^{1/2} A_k` (scale-free). Directions below it are left to
        lower levels; they can change level :math:`k`'s error by at most
        that singular value times the step.
    feasibility_tol : float, default 1e-9
        Tolerance on hard and frozen constraints when accepting a
        closed-form level and when checking the returned point, relative to
        ``1 + `` the largest magnitude among the hard right-hand sides and
        finite bounds (OSQP's primal tolerance is relative in the same way);
        hard equalities are checked against ``feasibility_tol * (1 + max|b|)``.
    slack_tol : float, default 1e-7
        An inequality row whose optimal slack exceeds ``slack_tol * (1 +
        |d|)`` is violated at every optimum of its level, so it is frozen as
        an equality (eliminated with the equality rows); rows below it stay
        frozen inequalities :math:`C x \le d + v^\star`. Above the
        backends' accuracy, so noise is not mistaken for a violation.
    multiplier_tol : float, default 1e-6
        A frozen, hard or bound row whose multiplier at a level's optimum
        exceeds ``multiplier_tol`` times the largest multiplier (at least 1)
        is active at every optimum of that level (complementary slackness), so
        it too is frozen as an equality; smaller multipliers are treated as
        zero and the row stays an inequality.
    closed_form : bool, default True
        Solve a level without the backend when its unconstrained
        least-squares point satisfies every constraint (exact; see the module
        docstring). False sends every level with freedom left to the backend.
    working_set_step : bool, default True
        Before calling the backend on a level whose least-squares point
        violates rows, try one active-set step with the violated rows held
        as equalities and keep it only if it satisfies the level's optimality
        conditions (:meth:`_Solver._working_set_step`); exact when kept.
    compiled : bool, default True
        Take the closed-form and active-set paths of the levels in a compiled
        kernel (:mod:`controllers._hqp_kernels`, numba) when there are no box
        bounds ``lb``/``ub``; the same arithmetic as the Python path, which
        False selects (and which every level needing the backend takes).
    """

    tolerances: QPTolerances = field(default_factory=QPTolerances)
    rank_tol: float = 1e-10
    feasibility_tol: float = 1e-9
    slack_tol: float = 1e-7
    multiplier_tol: float = 1e-6
    closed_form: bool = True
    working_set_step: bool = True
    compiled: bool = True

    def __post_init__(self) -> None:
        if not isinstance(self.tolerances, QPTolerances):
            raise ParameterError(f"HQPParams.tolerances must be a QPTolerances, got {self.tolerances!r}")
        for name in ("rank_tol", "feasibility_tol", "slack_tol", "multiplier_tol"):
            value = getattr(self, name)
            if not (isinstance(value, (int, float)) and np.isfinite(value) and 0 < value < 1):
                raise ParameterError(f"HQPParams.{name} must be in (0, 1), got {value!r}")
        for name in ("closed_form", "working_set_step", "compiled"):
            if not isinstance(getattr(self, name), bool):
                raise ParameterError(f"HQPParams.{name} must be a bool, got {getattr(self, name)!r}")


_DEFAULT_PARAMS = HQPParams()


@dataclass(frozen=True, eq=False)
class HierarchyResult:
    """The solution of a hierarchy.

    Attributes
    ----------
    x : (n,) ndarray
        The lexicographic optimum (minimum norm among them if
        ``regularization > 0``).
    level_residuals : (p,) ndarray
        One float per level, :meth:`Level.residual` at ``x``: weighted
        squared equality error plus weighted squared inequality violation.
    level_slacks : tuple of p pairs of ndarray
        Each level's optimal slacks ``(e*, v*)``, shapes (m_e,), (m_i,), as
        frozen for the levels below (:meth:`slack`).
    found : bool
        True: a failed solve raises instead of returning.
    solve_time_s : float
        Wall time of the whole call [s].
    level_times_s : (p,) ndarray
        Wall time per level [s].
    solver : str
        Name of the QP backend used.
    level_methods : tuple of str
        Per level: ``"closed-form"``, ``"working-set"`` (one checked active-set
        step, :attr:`HQPParams.working_set_step`), ``"qp"``, ``"no freedom"`` (nothing
        left to move, or nothing in the level depends on what is left) or
        ``"empty"`` (a level without rows).
    free_dims : tuple of int
        Dimension of the freedom left after each level.
    level_x : tuple of (n,) ndarray
        The solution after each level; a later call uses it to warm-start
        the same level.
    qp_solves : int
        Number of backend calls.
    """

    x: np.ndarray
    level_residuals: np.ndarray
    level_slacks: tuple
    found: bool
    solve_time_s: float
    level_times_s: np.ndarray
    solver: str
    level_methods: tuple = ()
    free_dims: tuple = ()
    level_x: tuple = ()
    qp_solves: int = 0

    def slack(self, level: int) -> tuple[np.ndarray, np.ndarray]:
        """Optimal slacks ``(e*, v*)`` of level ``level`` (its index in ``levels``)."""
        return self.level_slacks[level]


# --------------------------------------------------------------------------------------------
# The solver


class _Constraints:
    """Inequality rows ``G x <= h`` (hard, then frozen levels) and bounds, in x-space.

    The finite bounds are also kept as rows ``B x <= hB`` (``ub`` rows, then
    ``lb`` rows) for when the freedom is a proper subspace.
    """

    def __init__(self, G, h, lb, ub, hard_labels, tol_rel):
        n = G.shape[1]
        self.G, self.h, self.lb, self.ub = G, h, lb, ub
        self.n_hard = G.shape[0]
        self._hard_labels = hard_labels  # callable: names of the hard rows, built only for a message
        self._bound_idx = []
        if lb is None and ub is None:
            self.B, self.hB = _no_rows(n), _EMPTY
        else:
            rows, rhs = [np.zeros((0, n))], [np.zeros(0)]
            for name, bound, sign in (("ub", ub, 1.0), ("lb", lb, -1.0)):
                if bound is not None:
                    idx = np.flatnonzero(np.isfinite(bound))
                    rows.append(sign * np.eye(n)[idx])
                    rhs.append(sign * bound[idx])
                    self._bound_idx.append((name, idx))
            self.B, self.hB = np.vstack(rows), np.concatenate(rhs)
        scale = float(np.abs(h).max()) if h.shape[0] else 0.0
        if self.hB.size:
            scale = max(scale, float(np.abs(self.hB).max()))
        self.tol = tol_rel * (1.0 + scale)  # absolute feasibility tolerance

    def labels(self) -> list[str]:
        """Names of the hard rows, then of the bound rows (``"ub[3]"``)."""
        return self._hard_labels() + [f"{name}[{i}]" for name, idx in self._bound_idx for i in idx]

    def violation(self, x: np.ndarray) -> float:
        worst = float((self.G @ x - self.h).max(initial=0.0)) if self.G.shape[0] else 0.0
        if self.hB.size:
            worst = max(worst, float((self.B @ x - self.hB).max()))
        return worst


def _bounds(name: str, value, n: int, bad: float) -> np.ndarray | None:
    if value is None:
        return None
    arr = np.asarray(value, dtype=float)
    if arr.shape != (n,):
        raise ParameterError(f"solve_hierarchy: {name} must have shape ({n},), got {arr.shape}")
    total = arr.sum()  # NaN or `bad` anywhere makes the sum NaN or `bad`
    if (total != total or total == bad) and (np.isnan(arr).any() or (arr == bad).any()):
        i = int(np.flatnonzero(np.isnan(arr) | (arr == bad))[0])
        raise ParameterError(f"solve_hierarchy: {name}[{i}] must be a number or {-bad}, got {arr[i]}")
    if total == -bad and np.isinf(arr).all():
        return None
    return arr


def _writable(a: np.ndarray) -> np.ndarray:
    """``a`` itself if C-ordered, writable float64, else such a copy (one compiled signature per kernel)."""
    f = a.flags
    return a if f.c_contiguous and f.writeable and a.dtype == np.float64 else np.array(a, dtype=float, order="C")


class _Solver:
    """One call of :func:`solve_hierarchy`: the state carried from level to level.

    The current point is ``x`` and the remaining freedom ``x + N z`` (``N``
    orthonormal, ``None`` for the identity). ``cons`` holds the inequality
    rows that lower levels must keep (hard rows first, then frozen rows).
    """

    def __init__(self, n, backend, solver_name, params, regularization, cons, x_hard, N_hard, hard_label):
        self.n = n
        self.backend = backend
        self.solver_name = solver_name
        self.params = params
        self.regularization = regularization
        self.cons = cons
        self.x = x_hard
        self.N = N_hard
        self.x_hard, self.N_hard, self.hard_label = x_hard, N_hard, hard_label
        self.qp_solves = 0
        # the compiled path (no box bounds): its arrays must be C-ordered and writable, as the kernel was compiled
        self.fast = params.compiled and cons.lb is None and cons.ub is None
        if self.fast:
            cons.G, cons.h, self.x = _writable(cons.G), _writable(cons.h), _writable(x_hard)
            self._no_N = np.zeros((n, 0))

    @property
    def r(self) -> int:
        return self.n if self.N is None else self.N.shape[1]

    def _proj(self, M: np.ndarray) -> np.ndarray:
        return M if self.N is None else M @ self.N

    def _lift(self, z: np.ndarray) -> np.ndarray:
        return self.x + (z if self.N is None else self.N @ z)

    def _feasible(self, x: np.ndarray, C: np.ndarray | None = None, d: np.ndarray | None = None) -> bool:
        tol = self.cons.tol
        if C is not None and C.shape[0] and np.max(C @ x - d) > tol:
            return False
        return self.cons.violation(x) <= tol

    def _eliminate(self, rows: np.ndarray) -> None:
        """Restrict the freedom to the null space of ``rows`` (x-space, (m, n)): N <- N V2."""
        if rows.shape[0] == 0 or self.r == 0:
            return
        unit = rows / np.maximum(np.linalg.norm(rows, axis=1, keepdims=True), 1e-300)
        _, s, Vt = np.linalg.svd(self._proj(unit), full_matrices=True)
        rank = int(np.count_nonzero(s > self.params.rank_tol * np.sqrt(unit.shape[0])))
        V2 = Vt[rank:].T
        self.N = V2 if self.N is None else self.N @ V2

    def _qp_constraints(self):
        """Rows of the frozen/hard inequalities and bounds in z.

        Returns ``(Gz, hz, Gx, lbz, ubz)``: ``Gz z <= hz`` with ``Gx`` the
        same rows in x-space (for the multipliers), and box bounds on z when
        ``N`` is the identity. Rows the null space has made constant are
        left out (they cannot change; the returned point is checked).
        """
        x, N, cons = self.x, self.N, self.cons
        G, h = cons.G, cons.h
        lbz = ubz = None
        if N is None:
            lbz = None if cons.lb is None else cons.lb - x
            ubz = None if cons.ub is None else cons.ub - x
        elif cons.hB.size:
            G, h = np.vstack([G, cons.B]), np.concatenate([h, cons.hB])
        Gz = self._proj(G)
        hz = h - G @ x
        if N is not None and Gz.shape[0]:
            keep = np.abs(Gz).max(axis=1) > self.params.rank_tol * np.maximum(np.abs(G).max(axis=1), 1e-300)
            if not keep.all():
                Gz, hz, G = Gz[keep], hz[keep], G[keep]
        return Gz, hz, G, lbz, ubz

    def _call_backend(self, P, q, G, h, lb, ub, warm, where: str):
        self.qp_solves += 1
        res = self.backend(
            P, q, G if G.shape[0] else None, h if G.shape[0] else None, None, None, lb, ub,
            warm_start=warm, tolerances=self.params.tolerances, regularization=self.regularization,
        )
        if res.found:
            return res
        self._raise_if_hard_infeasible()
        raise QPSolveError(f"QP backend {self.solver_name!r} failed at {where}: status {res.status!r}")

    def _strictly_active(self, res, Gx: np.ndarray, skip: int) -> np.ndarray:
        """x-space rows with a clearly positive multiplier (rows ``skip:`` of G, then the box)."""
        lam = res.z[skip:] if res.z is not None else np.zeros(0)
        box = np.abs(res.z_box[: self.n]) if res.z_box is not None else np.zeros(0)
        thr = self.params.multiplier_tol * max(1.0, float(lam.max(initial=0.0)), float(box.max(initial=0.0)))
        rows = Gx[lam > thr] if lam.size else np.zeros((0, self.n))
        if box.size and (box > thr).any():
            rows = np.vstack([rows, np.eye(self.n)[box > thr]])
        return rows

    # -- levels ---------------------------------------------------------------------------

    def solve_level(self, level: Level, label: str, warm_x: np.ndarray | None, cheap: bool = True):
        """Solve one level; return (method, e*, v*) and move (x, N) to the level's optimum.

        ``cheap=False`` goes straight to the backend, for a level on which the
        compiled kernel has already tried the closed form and the working set.
        """
        n_eq, n_in = level.A.shape[0], level.C.shape[0]
        if n_eq + n_in == 0:
            return "empty", np.zeros(0), np.zeros(0)
        if self.r == 0:
            e, v = level.slack(self.x)
            return "no freedom", e, v
        z_ls = np.zeros(self.r)
        V1 = s1 = c1 = V2 = None
        if n_eq:
            # W^1/2 A N = U S V^T, truncated at the rank: the cost is 1/2 ||S1 V1^T z - c1||^2 + const
            err = level.b - level.A @ self.x
            if level._unit_eq:
                Aw = level.A
            else:
                sw = np.sqrt(level.weights_eq)
                Aw, err = level.A * sw[:, None], sw * err
            U, s, Vt = np.linalg.svd(self._proj(Aw), full_matrices=True)
            rank = int(np.count_nonzero(s > self.params.rank_tol * np.linalg.norm(Aw)))
            V1, s1, V2 = Vt[:rank].T, s[:rank], Vt[rank:].T
            c1 = U[:, :rank].T @ err
            z_ls = V1 @ (c1 / s1)
        x_ls = self._lift(z_ls)
        active = np.zeros((0, self.n))
        if cheap and self.params.closed_form and self._feasible(x_ls, level.C if n_in else None, level.d):
            method, x_new = "closed-form", x_ls
        elif n_in == 0 and (V1 is None or V1.shape[1] == 0):
            method, x_new = "no freedom", self.x  # nothing here depends on the remaining freedom
        else:
            guess = (self._working_set_step(level, V1, s1, c1, z_ls) if cheap and self.params.working_set_step
                     else None)
            if guess is not None:
                method, (x_new, active) = "working-set", guess
            else:
                method = "qp"
                x_new, active = self._level_qp(level, label, V1, s1, c1, warm_x)
        e, v = level.slack(x_new)
        self.x = x_new
        # Freeze the level's optimum for the levels below. Rows that hold with equality at every
        # optimum are eliminated through the null space, together with the equality rows:
        # a violated row (its slack v* > 0 is unique) and a row with a positive multiplier
        # (complementary slackness holds for every optimal primal-dual pair).
        if V2 is not None:  # the equality rows: null space from the SVD above
            self.N = V2 if self.N is None else self.N @ V2
        if n_in:
            tight = v > self.params.slack_tol * (1.0 + np.abs(level.d))
            if tight.any():
                active = np.vstack([level.C[tight], active])
            keep = ~tight
            if keep.any():
                self.cons.G = np.vstack([self.cons.G, level.C[keep]])
                self.cons.h = np.concatenate([self.cons.h, level.d[keep] + v[keep]])
        if active.shape[0]:  # then, within it, the rows that are tight at every optimum
            self._eliminate(active)
        return method, e, v

    def _working_set_step(self, level, V1, s1, c1, z_ls):
        r"""Active-set steps from the least-squares point, kept only if the result is provably optimal.

        The rows violated at the unconstrained point :math:`z_{ls}` form a
        working set W, held with equality. An inequality-only level is then
        at its optimum (slack 0) at any point that satisfies every row, so the
        minimum-norm correction onto W is kept if it is feasible. A level with
        equality rows solves its KKT system with W,

        .. math:: \begin{bmatrix} H_S & G_W^T \\ G_W & 0 \end{bmatrix}
                  \begin{bmatrix} z \\ \lambda \end{bmatrix} =
                  \begin{bmatrix} g_S \\ h_W \end{bmatrix},
                  \qquad H_S = V_1 S_1^2 V_1^T + C_S^T \Omega_S C_S,
                  \quad g_S = V_1 S_1 c_1 + C_S^T \Omega_S d_S,

        where S is the set of the level's own inequality rows taken as
        violated (their weighted squared slack :math:`\omega (C_i z - d_i)^2`
        joins the cost; at first those violated at :math:`z_{ls}`). It then
        adds the most violated row of the frozen and hard ones to W, or else a
        row of the level's own that the point violates to S, or else drops
        from S a row the point satisfies, or else drops from W the row of the
        most negative multiplier, and solves again (the working-set updates of
        the primal active-set method, without its step-length rule; Nocedal &
        Wright, *Numerical Optimization*, 2nd ed., 2006, Algorithm 16.3), at
        most :func:`_working_set_iterations` times. The point is kept once it
        satisfies every frozen and hard row with :math:`\lambda \ge 0`, every
        row of S reaches or passes its bound and every other row of the level
        holds: the KKT conditions of the level's QP (its slacks are then
        :math:`v = \max(C z - d, 0)`, and the cost's gradient is the one the
        system solved), so it is an optimum whatever path led there. Rows with
        a clearly positive multiplier are returned for elimination, as after a
        backend solve. Anything else (bounds on the free variables, no
        verified point within the iterations) returns None and the level goes
        to the backend.
        """
        n_eq, n_in = level.A.shape[0], level.C.shape[0]
        Gz, hz, Gx, lbz, ubz = self._qp_constraints()
        if lbz is not None or ubz is not None:
            return None
        tol = self.cons.tol
        if not n_eq:  # the level's own rows join the frozen and hard ones; the cost is the slack alone
            Gz = np.vstack([self._proj(level.C), Gz])
            hz = np.concatenate([level.d - level.C @ self.x, hz])
        W = Gz @ z_ls - hz > tol
        if not n_eq:
            if not W.any():
                return None
            GW, hW = Gz[W], hz[W]
            z = z_ls + np.linalg.lstsq(GW, hW - GW @ z_ls, rcond=None)[0]
            if np.max(Gz @ z - hz) > tol:
                return None
            return self._lift(z), np.zeros((0, self.n))
        # the level's own inequality rows, in z: those of S add their weighted squared slack to the cost
        Cz, dz, w = self._proj(level.C), level.d - level.C @ self.x, level.weights_ineq
        S = Cz @ z_ls - dz > tol
        if not (W.any() or S.any()):
            return None
        r = self.r
        H, g = (V1 * s1**2) @ V1.T, V1 @ (s1 * c1)
        mult_tol = self.params.multiplier_tol
        for _ in range(_working_set_iterations(Gz.shape[0] + n_in)):
            GW, hW = Gz[W], hz[W]
            m = GW.shape[0]
            K = np.zeros((r + m, r + m))
            K[:r, :r] = H
            if S.any():
                CwS = Cz[S] * w[S][:, None]
                K[:r, :r] += Cz[S].T @ CwS
                gS = g + CwS.T @ dz[S]
            else:
                gS = g
            K[:r, r:] = GW.T
            K[r:, :r] = GW
            rhs = np.concatenate([gS, hW])
            sol = np.linalg.lstsq(K, rhs, rcond=None)[0]
            scale = 1.0 + float(np.abs(rhs).max())
            if np.abs(K @ sol - rhs).max() > self.params.feasibility_tol * scale:
                return None  # inconsistent working set
            z, lam = sol[:r], sol[r:]
            lam_scale = max(1.0, float(np.abs(lam).max(initial=0.0)))
            viol = Gz @ z - hz
            worst = int(np.argmax(viol)) if viol.size else -1
            if worst >= 0 and viol[worst] > tol:  # a row the step crossed: add it
                W[worst] = True
                continue
            if n_in:
                sv = Cz @ z - dz
                out_of_S = np.where(S, -np.inf, sv)
                i = int(np.argmax(out_of_S))
                if out_of_S[i] > tol:  # a row of the level the point violates: its slack joins the cost
                    S[i] = True
                    continue
                in_S = np.where(S, sv, np.inf)
                i = int(np.argmin(in_S))
                if in_S[i] < -tol:  # a row of S the point satisfies: its slack leaves the cost
                    S[i] = False
                    continue
            if m and lam.min() < -mult_tol * lam_scale:  # a row that pulls the wrong way: drop it
                W[np.flatnonzero(W)[int(np.argmin(lam))]] = False
                continue
            # the KKT conditions hold: the x-space rows of W with a clearly positive multiplier are active
            # at every optimum
            return self._lift(z), Gx[W][lam > mult_tol * lam_scale]
        return None

    def _level_qp(self, level, label, V1, s1, c1, warm_x):
        r, m_i = self.r, level.C.shape[0]
        nv = r + m_i
        P = np.zeros((nv, nv))
        q = np.zeros(nv)
        if V1 is not None and V1.shape[1]:
            # rank-truncated, so directions the level cannot change have exactly zero curvature
            P[:r, :r] = (V1 * s1**2) @ V1.T
            q[:r] = -(V1 @ (s1 * c1))
        Gc, hc, Gx, lbz, ubz = self._qp_constraints()
        if m_i:
            P[r:, r:].flat[:: m_i + 1] = level.weights_ineq
            G = np.zeros((m_i + Gc.shape[0], nv))
            G[:m_i, :r] = self._proj(level.C)
            G[:m_i, r:].flat[:: m_i + 1] = -1.0
            G[m_i:, :r] = Gc
            h = np.concatenate([level.d - level.C @ self.x, hc])
            if lbz is not None:
                lbz = np.concatenate([lbz, np.full(m_i, -np.inf)])
            if ubz is not None:
                ubz = np.concatenate([ubz, np.full(m_i, np.inf)])
        else:
            G, h = Gc, hc
        warm = None
        if warm_x is not None:
            dz = warm_x - self.x
            z0 = dz if self.N is None else self.N.T @ dz
            v0 = np.maximum(level.C @ self._lift(z0) - level.d, 0.0)
            warm = np.concatenate([z0, v0])
        res = self._call_backend(P, q, G, h, lbz, ubz, warm, label)
        return self._lift(res.x[:r]), self._strictly_active(res, Gx, m_i)

    def solve_min_norm(self, warm_x: np.ndarray | None) -> str:
        r"""Final level :math:`\min \frac12\|x\|^2` over :math:`x = x_p + N_p z`."""
        if self.r == 0:
            return "no freedom"
        z_c = -self.x if self.N is None else -(self.N.T @ self.x)
        x_c = self._lift(z_c)
        if self.params.closed_form and self._feasible(x_c):
            self.x = x_c
            return "closed-form"
        G, h, _, lbz, ubz = self._qp_constraints()
        warm = None
        if warm_x is not None:
            dz = warm_x - self.x
            warm = dz if self.N is None else self.N.T @ dz
        res = self._call_backend(np.eye(self.r), -z_c, G, h, lbz, ubz, warm, "the final minimum-norm level")
        self.x = self._lift(res.x)
        return "qp"

    # -- hard constraints -------------------------------------------------------------------

    def _raise_if_hard_infeasible(self) -> None:
        r"""Raise :class:`HQPInfeasibleError` if the hard rows cannot hold together.

        Solves :math:`\min \frac12\|s\|^2` s.t. :math:`G_H (x_H + N_H z) - h_H \le s`
        over the hard inequality rows and bounds, on the hard equalities'
        solution set; rows with :math:`s >` the feasibility tolerance are named.
        """
        cons = self.cons
        G = np.vstack([cons.G[: cons.n_hard], cons.B])
        h = np.concatenate([cons.h[: cons.n_hard], cons.hB])
        labels = cons.labels()
        m = G.shape[0]
        if m == 0:
            return
        x0, N = self.x_hard, self.N_hard
        Gz = G if N is None else G @ N
        r = Gz.shape[1]
        P = np.zeros((r + m, r + m))
        P[r:, r:] = np.eye(m)
        Gs = np.hstack([Gz, -np.eye(m)])
        self.qp_solves += 1
        res = self.backend(
            P, np.zeros(r + m), Gs, h - G @ x0, None, None, None, None,
            tolerances=self.params.tolerances, regularization=max(self.regularization, 1e-8),
        )
        if not res.found:
            raise QPSolveError(
                f"QP backend {self.solver_name!r} failed, and so did the check of the hard constraints "
                f"(status {res.status!r})"
            )
        x = x0 + (res.x[:r] if N is None else N @ res.x[:r])
        s = G @ x - h
        bad = np.flatnonzero(s > cons.tol)
        if bad.size:
            named = ", ".join(f"{labels[i]} (violated by {s[i]:.3g})" for i in bad[:8])
            more = f" and {bad.size - 8} more" if bad.size > 8 else ""
            eq = f" given {self.hard_label} equalities" if self.N_hard is not None else ""
            raise HQPInfeasibleError(
                f"hard constraints cannot all hold{eq}: at the least-violation point {named}{more}"
            )


class _LevelLabels:
    """``labels[k]``: "level k ('name')", the name of a level in messages, built only when asked for."""

    __slots__ = ("_levels",)

    def __init__(self, levels):
        self._levels = levels

    def __getitem__(self, k: int) -> str:
        levels = self._levels
        name = levels.names[k] if type(levels) is LevelStack else levels[k].name
        return f"level {k} ({name!r})" if name else f"level {k}"


_METHOD_CODE = {name: code for code, name in enumerate(_kernels.METHODS)}
_INT_EMPTY = np.zeros(0, dtype=np.int64)


def _solve_compiled(work: _Solver, stack: LevelStack, labels, warm: list):
    """Every level through :func:`controllers._hqp_kernels.solve_levels_fast`, the backend's in Python.

    Returns ``(methods, slacks, times, free_dims, level_x, residuals)`` as the
    per-level loop of :func:`solve_hierarchy` builds them; ``residuals`` are
    each level's weighted squared error at the point after the last level.
    """
    n, p = work.n, len(stack)
    A, b, sw, eq_off, unit, C, d, wi, in_off = (stack.A, stack.b, stack.sw, stack.eq_off, stack.unit_eq, stack.C,
                                               stack.d, stack.wi, stack.in_off)
    m_e, m_i = A.shape[0], C.shape[0]
    codes, free = np.empty(p, dtype=np.int64), np.empty(p, dtype=np.int64)
    X, e_all, v_all = np.empty((p, n)), np.empty(m_e), np.empty(m_i)
    seconds, residuals, clock = np.empty(p), np.empty(p), np.zeros(2, dtype=np.int64)
    prm, cons = work.params, work.cons
    timed = _kernels.HAVE_CLOCK  # the kernel times its levels; else one level per call, timed here
    k = 0
    while True:
        end = p if timed else min(k + 1, p)
        t_level = time.perf_counter()
        stop, x, N, has_N, cons.G, cons.h = _kernels.solve_levels_fast(
            k, end, timed, _writable(work.x), work._no_N if work.N is None else _writable(work.N),
            work.N is not None, _writable(cons.G), _writable(cons.h), A, b, sw, eq_off, unit, C, d, wi, in_off,
            cons.tol, prm.rank_tol, prm.feasibility_tol, prm.slack_tol, prm.multiplier_tol, prm.closed_form,
            prm.working_set_step, codes, X, e_all, v_all, free, seconds, residuals, clock)
        work.x, work.N = x, (N if has_N else None)
        if stop == end:
            if not timed and end > k:
                seconds[k] = time.perf_counter() - t_level
            if end == p:
                break
            k = end
            continue
        t_level = time.perf_counter()  # this level needs the backend: the Python path
        # the kernel has tried the closed form and the working set: straight to the backend
        method, e, v = work.solve_level(stack[stop], labels[stop], warm[stop], cheap=False)
        codes[stop] = _METHOD_CODE[method]
        e_all[eq_off[stop]: eq_off[stop + 1]] = e
        v_all[in_off[stop]: in_off[stop + 1]] = v
        X[stop], free[stop] = work.x, work.r
        seconds[stop] = time.perf_counter() - t_level
        k = stop + 1
    e_all.flags.writeable = v_all.flags.writeable = X.flags.writeable = residuals.flags.writeable = False
    eo, io = eq_off.tolist(), in_off.tolist()
    slacks = [(e_all[eo[k]: eo[k + 1]], v_all[io[k]: io[k + 1]]) for k in range(p)]
    methods = [_kernels.METHODS[c] for c in codes.tolist()]
    return methods, slacks, seconds, free.tolist(), list(X), residuals


def _working_set_iterations(m: int) -> int:
    """Active-set iterations tried on a level with ``m`` constraint rows before the backend takes it.

    At most 8: on 3000 ticks of the reference run (``scenarios/wall_push.py``
    under ``walls``) no verified point needed more than 4, while a level that
    will not verify (dependent rows, cycling) should reach the backend soon.
    """
    return min(2 * m + 2, 8)


def _eliminate_hard_eq(hard: Level, n: int, params: HQPParams, label: str):
    """Minimum-norm solution and null-space basis of the hard equalities, or raise."""
    A, b = hard.A, hard.b
    if A.shape[0] == 0:
        return np.zeros(n), None
    U, s, Vt = np.linalg.svd(A, full_matrices=True)
    rank = int(np.count_nonzero(s > params.rank_tol * np.linalg.norm(A)))
    x0 = Vt[:rank].T @ ((U[:, :rank].T @ b) / s[:rank]) if rank else np.zeros(n)
    res = A @ x0 - b
    tol = params.feasibility_tol * (1.0 + float(np.abs(b).max()))
    bad = np.flatnonzero(np.abs(res) > tol)
    if bad.size:
        named = ", ".join(f"{label}.{hard.row_label('eq', int(i))} (residual {res[i]:.3g})" for i in bad[:8])
        raise HQPInfeasibleError(f"hard equality constraints are inconsistent: least-squares residual at {named}")
    return x0, Vt[rank:].T


def _warm_points(warm_start, n: int, p: int) -> list:
    """The warm-start point of each of the p levels and the final level."""
    if warm_start is None:
        return [None] * (p + 1)
    if isinstance(warm_start, HierarchyResult):
        if warm_start.x.shape != (n,):
            raise ParameterError(f"solve_hierarchy: warm_start result has x of shape {warm_start.x.shape}, "
                                 f"expected ({n},)")
        if len(warm_start.level_x) == p:
            return [*warm_start.level_x, warm_start.x]
        return [warm_start.x] * (p + 1)
    ws = np.asarray(warm_start, dtype=float)
    if ws.shape != (n,) or not np.isfinite(ws).all():
        raise ParameterError(f"solve_hierarchy: warm_start must be a finite ({n},) array or a HierarchyResult, "
                             f"got shape {ws.shape}")
    return [ws] * (p + 1)


def solve_hierarchy(
    levels: Sequence[Level],
    n: int,
    solver: str | None = None,
    *,
    hard: Level | None = None,
    lb: np.ndarray | None = None,
    ub: np.ndarray | None = None,
    regularization: float = 1e-8,
    warm_start: np.ndarray | HierarchyResult | None = None,
    params: HQPParams | None = None,
) -> HierarchyResult:
    r"""Solve a strict-priority hierarchy of levels, one QP per level.

    Level :math:`k` solves the QP of the module docstring,

    .. math::

        \min_{x, v_k} \tfrac12 \|W_k^{1/2}(A_k x - b_k)\|^2 + \tfrac12 \|\Omega_k^{1/2} v_k\|^2
        \;\; \text{s.t.} \;\; C_k x - d_k \le v_k,\;
        A_l x - b_l = e_l^\star,\; C_l x - d_l \le v_l^\star \;(l < k),\;
        \text{hard}

    (Kanoun, Lamiraux & Wieber 2011), with the higher equality rows
    eliminated exactly through a null-space basis (Escande, Mansard & Wieber
    2014).

    Parameters
    ----------
    levels : sequence of Level
        Highest priority first. Each level's matrices have ``n`` columns.
    n : int
        Number of decision variables (e.g. 14 for :math:`x = [\ddot q; \tau]`
        of a 7-DOF arm).
    solver : str or None
        QP backend name (:func:`controllers.qp_backends.get_backend`);
        ``None``: the default backend (daqp if installed, else osqp).
    hard : Level or None
        Constraints that must hold exactly (slack 0): its eq rows
        :math:`A_H x = b_H` and ineq rows :math:`C_H x \le d_H`. Weights are
        not allowed here.
    lb, ub : (n,) array_like or None
        Hard bounds on ``x``; entries may be :math:`\mp\infty`.
    regularization : float, default 1e-8
        ε ≥ 0. If > 0, a final level :math:`\min \frac12 \|x\|^2` over the
        remaining freedom makes ``x`` unique (minimum norm), and ε is the
        proximal weight of backends that need a strictly convex Hessian
        (module docstring; exact at convergence). 0: no final level, and no
        proximal iterations (DAQP then fails on a level whose cost leaves a
        variable free).
    warm_start : (n,) array_like, HierarchyResult or None
        The previous control tick's solution. A previous result warm-starts
        each level from that level's previous solution.
    params : HQPParams or None
        Tolerances; ``None``: :class:`HQPParams` defaults.

    Returns
    -------
    HierarchyResult

    Raises
    ------
    ParameterError
        If an argument has the wrong type, shape or value (naming it).
    HQPInfeasibleError
        If the hard constraints (hard level, bounds) cannot all hold; the
        message names the rows, e.g. ``hard.ineq[0] row 3`` or ``ub[9]``.
    QPSolveError
        If the backend fails on a level (the message gives the level and the
        backend's status). No made-up solution is ever returned.
    BackendNotFound
        If ``solver`` is not installed.
    """
    t_start = time.perf_counter()
    params = _DEFAULT_PARAMS if params is None else params
    if not isinstance(params, HQPParams):
        raise ParameterError(f"solve_hierarchy: params must be an HQPParams, got {type(params).__name__}")
    if isinstance(n, bool) or not isinstance(n, (int, np.integer)) or n < 1:
        raise ParameterError(f"solve_hierarchy: n must be an int >= 1, got {n!r}")
    n = int(n)
    if isinstance(levels, LevelStack):
        stack = levels
        if stack.n_cols not in (None, n):
            raise ParameterError(f"solve_hierarchy: the level stack has {stack.n_cols} columns, expected n = {n}")
    else:
        stack = None
        levels = tuple(levels)
        for k, level in enumerate(levels):
            if type(level) is not Level and not isinstance(level, Level):
                raise ParameterError(f"solve_hierarchy: levels[{k}] must be a Level, got {type(level).__name__}")
            if level.n_cols != n and level.n_cols is not None:
                raise ParameterError(f"solve_hierarchy: {_LevelLabels(levels)[k]} has {level.n_cols} columns, "
                                     f"expected n = {n}")
    labels = _LevelLabels(levels)
    hard_label = "hard"
    if hard is not None:
        if not isinstance(hard, Level):
            raise ParameterError(f"solve_hierarchy: hard must be a Level, got {type(hard).__name__}")
        hard_label = f"hard ({hard.name!r})" if hard.name else "hard"
        if hard.n_cols not in (None, n):
            raise ParameterError(f"solve_hierarchy: {hard_label} has {hard.n_cols} columns, expected n = {n}")
        if hard._weighted:
            raise ParameterError(f"solve_hierarchy: {hard_label} entries must not carry weights: "
                                 "hard constraints hold exactly")
    if not (isinstance(regularization, (int, float)) and math.isfinite(regularization) and regularization >= 0):
        raise ParameterError(f"solve_hierarchy: regularization must be a finite float >= 0, got {regularization!r}")
    lb = _bounds("lb", lb, n, np.inf)
    ub = _bounds("ub", ub, n, -np.inf)
    if lb is not None and ub is not None and (lb > ub).any():
        i = int(np.flatnonzero(lb > ub)[0])
        raise HQPInfeasibleError(f"hard bounds cannot hold: lb[{i}] = {lb[i]} > ub[{i}] = {ub[i]}")
    warm = _warm_points(warm_start, n, len(levels))
    backend = get_backend(solver)
    solver_name = DEFAULT_BACKEND if solver is None else solver

    if hard is not None:
        x0, N0 = _eliminate_hard_eq(hard, n, params, hard_label)
        G0, h0 = hard.C, hard.d

        def hard_rows():
            return [f"{hard_label}.{hard.row_label('ineq', i)}" for i in range(hard.C.shape[0])]
    else:
        x0, N0 = np.zeros(n), None
        G0, h0 = _no_rows(n), _EMPTY

        def hard_rows():
            return []
    cons = _Constraints(G0, h0, lb, ub, hard_rows, params.feasibility_tol)
    work = _Solver(n, backend, solver_name, params, float(regularization), cons, x0, N0, hard_label)

    residuals = None
    if work.fast and len(levels):
        if stack is None:
            stack = LevelStack.from_levels(levels, n)
        methods, slacks, times, free_dims, level_x, residuals = _solve_compiled(work, stack, labels, warm)
        x_levels = work.x
    else:
        methods, slacks, times, free_dims, level_x = [], [], [], [], []
        for k, level in enumerate(levels):
            t_level = time.perf_counter()
            method, e, v = work.solve_level(level, labels[k], warm[k])
            methods.append(method)
            slacks.append((_read_only(e), _read_only(v)))
            free_dims.append(work.r)
            level_x.append(work.x)
            times.append(time.perf_counter() - t_level)
    if regularization > 0:
        work.solve_min_norm(warm[-1])
    x = work.x
    if residuals is not None and x is not x_levels:
        residuals = None  # the minimum-norm level moved x: recompute below

    # Safety net: the returned point satisfies every hard constraint, or we raise.
    hard_eq_res = 0.0
    if hard is not None and hard.A.shape[0]:
        hard_eq_res = float(np.abs(hard.A @ x - hard.b).max()) / (1.0 + float(np.abs(hard.b).max()))
    viol = 0.0
    if cons.n_hard:
        viol = float((cons.G[: cons.n_hard] @ x - cons.h[: cons.n_hard]).max())
    if cons.hB.size:
        viol = max(viol, float((cons.B @ x - cons.hB).max()))
    if viol > cons.tol or hard_eq_res > params.feasibility_tol:
        work._raise_if_hard_infeasible()
        raise QPSolveError(
            f"solve_hierarchy: the solution violates a hard constraint by {max(viol, hard_eq_res):.3g} "
            f"(backend {solver_name!r}, tolerance {cons.tol:.3g})"
        )

    if residuals is None:
        # a level whose own solution is the returned point (no later level moved it) has its residual in its slacks
        residuals = _read_only(np.array([
            float(level.weights_eq @ (e * e) + level.weights_ineq @ (v * v)) if xk is x and level.n_cols is not None
            else level.residual(x) for level, xk, (e, v) in zip(levels, level_x, slacks)], dtype=float))
    x = _read_only(x.copy())
    for xk in level_x:
        if xk.flags.writeable:  # the compiled path's are rows of a read-only array already
            xk.flags.writeable = False
    return HierarchyResult(
        x=x,
        level_residuals=residuals,
        level_slacks=tuple(slacks),
        found=True,
        solve_time_s=time.perf_counter() - t_start,
        level_times_s=_read_only(times if type(times) is np.ndarray else np.array(times, dtype=float)),
        solver=solver_name,
        level_methods=tuple(methods),
        free_dims=tuple(free_dims),
        level_x=tuple(level_x),
        qp_solves=work.qp_solves,
    )


def _kernel_head(out: np.ndarray, n: int, p: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Views of x (n,), the levels' residuals (p,) and their times (p,) [s] in an output of
    :func:`controllers._hqp_kernels.solve_stack_fast` (its layout: :data:`~controllers._hqp_kernels.OUT_HEADER`
    scalars, then these)."""
    o = _kernels.OUT_HEADER
    return out[o: o + n], out[o + n: o + n + p], out[o + n + p: o + n + 2 * p]


class _KernelResult(HierarchyResult):
    """The :class:`HierarchyResult` of a hierarchy the compiled kernel solved whole.

    ``x``, ``level_residuals`` and ``level_times_s`` (what a controller reads
    every tick) are set at once; the per-level tuples ``level_slacks``,
    ``level_methods``, ``free_dims`` and ``level_x`` are made from the
    kernel's arrays when first read (the same values as
    :func:`solve_hierarchy` builds, as read-only views). Built by
    :meth:`from_kernel`; the keyword form of the dataclass (every field, as
    :func:`dataclasses.replace` gives them) sets them all at once.
    """

    _PER_LEVEL = ("level_slacks", "level_methods", "free_dims", "level_x")

    def __init__(self, **fields) -> None:
        per_level = {k: fields.pop(k) for k in self._PER_LEVEL}
        self.__dict__.update(fields, _per_level=per_level)

    @classmethod
    def from_kernel(cls, out, n: int, p: int, solver: str, solve_time_s: float) -> _KernelResult:
        """From the output of :func:`controllers._hqp_kernels.solve_stack_fast` (``out`` read-only) and the wall
        time of the solve [s]."""
        self = object.__new__(cls)
        x, residuals, seconds = _kernel_head(out, n, p)
        self.__dict__.update(x=x, level_residuals=residuals, level_times_s=seconds, found=True, solver=solver,
                             qp_solves=0, _raw=(out, n, p), solve_time_s=solve_time_s)
        return self

    def _per_level_fields(self) -> dict:
        d = self.__dict__
        if "_per_level" not in d:
            out, n, p = d["_raw"]
            o = _kernels.OUT_HEADER + n + 2 * p
            X = out[o: o + p * n].reshape(p, n)
            o += p * n
            ints = out[len(out) - (4 * p + 2):].astype(np.int64)
            codes, free, eo, io = ints[:p].tolist(), ints[p: 2 * p], ints[2 * p: 3 * p + 1], ints[3 * p + 1:]
            e_all = out[o: o + eo[-1]]
            v_all = out[o + eo[-1]: o + eo[-1] + io[-1]]
            eo, io, methods = eo.tolist(), io.tolist(), _kernels.METHODS
            d["_per_level"] = {
                "level_slacks": tuple([(e_all[eo[k]: eo[k + 1]], v_all[io[k]: io[k + 1]]) for k in range(p)]),
                "level_methods": tuple([methods[c] for c in codes]),
                "free_dims": tuple(free.tolist()), "level_x": tuple(X)}
        return d["_per_level"]

    level_slacks = property(lambda self: self._per_level_fields()["level_slacks"])
    level_methods = property(lambda self: self._per_level_fields()["level_methods"])
    free_dims = property(lambda self: self._per_level_fields()["free_dims"])
    level_x = property(lambda self: self._per_level_fields()["level_x"])


class HierarchySolver:
    r""":func:`solve_hierarchy` for a caller that solves a hierarchy of the same kind every control tick.

    Everything that does not change from tick to tick is checked once, here:
    the number of variables, the backend, the parameters and the
    regularization. :meth:`solve` then takes one tick's
    :class:`LevelStack` above hard inequality rows :math:`G x \le h` (the
    torque limits of a controller whose torque is eliminated) and, when every
    level is solved by the compiled kernel and no freedom is left for the
    final minimum-norm level, builds the result straight from the kernel's
    output. Any other case (a level that needs the QP backend, freedom left,
    a violated hard row, a machine without the kernel's clock,
    ``HQPParams(compiled=False)``) is handed to :func:`solve_hierarchy` with
    ``hard=Level.unchecked(ineq=[(G, h, 1.0)])``, so the answer is always
    that of :func:`solve_hierarchy`: the same arithmetic, to the bit (tested).

    Parameters
    ----------
    n : int
        Number of decision variables.
    solver : str or None
        QP backend name, as for :func:`solve_hierarchy`.
    regularization : float, default 1e-8
        As for :func:`solve_hierarchy`.
    params : HQPParams or None
        As for :func:`solve_hierarchy`.

    Raises
    ------
    ParameterError
        On a bad ``n``, ``regularization`` or ``params`` (naming it).
    BackendNotFound
        If ``solver`` is not installed.
    """

    def __init__(self, n: int, solver: str | None = None, *, regularization: float = 1e-8,
                 params: HQPParams | None = None) -> None:
        if isinstance(n, bool) or not isinstance(n, (int, np.integer)) or n < 1:
            raise ParameterError(f"HierarchySolver: n must be an int >= 1, got {n!r}")
        params = _DEFAULT_PARAMS if params is None else params
        if not isinstance(params, HQPParams):
            raise ParameterError(f"HierarchySolver: params must be an HQPParams, got {type(params).__name__}")
        if not (isinstance(regularization, (int, float)) and math.isfinite(regularization) and regularization >= 0):
            raise ParameterError(f"HierarchySolver: regularization must be a finite float >= 0, got "
                                 f"{regularization!r}")
        get_backend(solver)  # raises BackendNotFound now rather than at the first tick
        self.n, self.solver, self.params, self.regularization = int(n), solver, params, float(regularization)
        self.solver_name = DEFAULT_BACKEND if solver is None else solver
        self._fast = params.compiled and _kernels.HAVE_CLOCK
        self._clock = np.zeros(2, dtype=np.int64)
        self._kernel_params = (params.rank_tol, params.feasibility_tol, params.slack_tol, params.multiplier_tol,
                               params.closed_form, params.working_set_step)

    def solve(self, stack: LevelStack, G: np.ndarray, h: np.ndarray, *, name: str = "hard",
              warm_start: np.ndarray | HierarchyResult | None = None) -> HierarchyResult:
        """The hierarchy ``stack`` above the hard rows ``G x <= h``: :func:`solve_hierarchy`'s result.

        Parameters
        ----------
        stack : LevelStack
            The levels, ``n`` columns.
        G : (m, n) ndarray
            Hard inequality rows (C-ordered float64; used as given, not copied).
        h : (m,) ndarray
            Their right-hand sides.
        name : str
            Name of the hard level in messages.
        warm_start : as for :func:`solve_hierarchy`
            Used (and checked) only by a level that needs the QP backend.

        Nothing in ``stack``, ``G`` or ``h`` is checked for finiteness (the
        caller checks its rows once, as :class:`~controllers.hqp_controller.HQPController` does).

        Raises
        ------
        ParameterError
            If ``stack`` is not a LevelStack of ``n`` columns, or ``G``, ``h``
            are not (m, n) and (m,) arrays.
        HQPInfeasibleError, QPSolveError
            As :func:`solve_hierarchy`.
        """
        t_start = time.perf_counter()
        if type(stack) is not LevelStack:
            raise ParameterError(f"HierarchySolver.solve: stack must be a LevelStack, got {type(stack).__name__}")
        n = self.n
        if stack.n_cols not in (None, n):
            raise ParameterError(f"HierarchySolver.solve: the level stack has {stack.n_cols} columns, expected n = {n}")
        if not (type(G) is np.ndarray and type(h) is np.ndarray and G.ndim == 2 and G.shape == (h.shape[0], n)):
            raise ParameterError(f"HierarchySolver.solve: G must be an (m, {n}) array and h an (m,) array, got "
                                 f"{getattr(G, 'shape', type(G).__name__)} and {getattr(h, 'shape', type(h).__name__)}")
        A, C = _writable(stack.A), _writable(stack.C)
        if A is not stack.A or C is not stack.C:  # the same rows, as the kernel takes them
            stack = LevelStack.from_arrays(A, stack.b, stack.sw, stack.eq_off, stack.unit_eq, C, stack.d, stack.wi,
                                           stack.in_off, n, stack.names, stack._layout)
        return self._solve_owned(stack, _writable(G), _writable(h), name, warm_start, t_start)

    def _solve_owned(self, stack: LevelStack, G: np.ndarray, h: np.ndarray, name: str, warm_start,
                     t_start: float) -> HierarchyResult:
        """:meth:`solve` without its checks, for a caller whose arrays are known good: ``stack`` of ``n`` columns
        with ``A``, ``C``, ``G`` and ``h`` C-ordered, writable float64 (as the controller's own buffers are)."""
        out = self._solve_kernel(stack, G, h)
        if out is not None:
            return self._kernel_result(out, len(stack.names), time.perf_counter() - t_start)
        return self._solve_backend(stack, G, h, name, warm_start)

    def _solve_kernel(self, stack: LevelStack, G: np.ndarray, h: np.ndarray) -> np.ndarray | None:
        """The output of :func:`controllers._hqp_kernels.solve_stack_fast` when the compiled kernel solved the
        hierarchy whole (every level, no freedom left for the minimum-norm level unless it is off, the hard rows
        held), else None; the arguments as for :meth:`_solve_owned`.

        For a caller that reads a few numbers of every tick's result and builds the result record only when
        asked (:meth:`_KernelResult.from_kernel`): building it costs a few microseconds a tick."""
        p = len(stack.names)
        if self._fast and p:
            out = _kernels.solve_stack_fast(
                G, h, stack.A, stack.b, stack.sw, stack.eq_off, stack.unit_eq, stack.C, stack.d, stack.wi,
                stack.in_off, *self._kernel_params, self._clock)
            # out[:4]: the first level that needs the QP backend, the freedom left, the largest violation of the
            # hard rows and its tolerance
            if out[0] == p and (out[1] == 0.0 or self.regularization == 0.0) and out[2] <= out[3]:
                return out
        return None

    def _kernel_result(self, out: np.ndarray, p: int, solve_time_s: float) -> HierarchyResult:
        """The result record of a :meth:`_solve_kernel` output ``out`` of ``p`` levels, solved in
        ``solve_time_s`` [s] (the output becomes read-only: the record's arrays are views of it)."""
        out.flags.writeable = False
        return _KernelResult.from_kernel(out, self.n, p, self.solver_name, solve_time_s)

    def _solve_backend(self, stack: LevelStack, G: np.ndarray, h: np.ndarray, name: str,
                       warm_start) -> HierarchyResult:
        """:func:`solve_hierarchy` of ``stack`` above the hard rows ``G x <= h`` (named ``name``): every case the
        kernel does not finish (:meth:`_solve_kernel`)."""
        hard = Level.unchecked(ineq=[(G, h, 1.0)], name=name)
        return solve_hierarchy(stack, self.n, self.solver, hard=hard, regularization=self.regularization,
                               warm_start=warm_start, params=self.params)
