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
conditions hold ([NocedalWright2006]_, Algorithm 16.3 and the KKT conditions
of Theorem 12.1; :func:`controllers.hqp.kernels.solve_level_fast`).

**One implementation.** The closed form, the active-set step and the freezing
of a level's optimum are compiled (numba, :mod:`controllers.hqp.kernels`): every
level goes through :func:`~controllers.hqp.kernels.solve_levels_fast`. The only
Python here is the glue around it: the checks of the arguments, the hard
equalities' minimum-norm point and null space, the box bounds written as hard
rows (``ub[i]``, ``lb[i]`` in messages), and, for a level the kernel cannot
verify, the level's QP built for the backend and its optimum frozen for the
levels below (:meth:`_Solver.backend_level`). The kernel takes every level's
rows stacked: a :class:`LevelStack` (what a controller builds once per tick)
goes to it as it is, a list of :class:`Level` is stacked first.

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
.. [NocedalWright2006] J. Nocedal, S. J. Wright, *Numerical Optimization*,
   2nd ed., Springer, 2006 (chapter 16: quadratic programming; Algorithm 16.3,
   the active-set method for convex QP).
"""

from __future__ import annotations

import math
import time
from collections.abc import Sequence
from types import MappingProxyType

import numpy as np

from models.errors import ParameterError

from ..qp_backends import QPSolveError, available_backends, get_backend
from . import kernels
from .levels import Level, LevelStack, no_rows
from .params import DEFAULT_PARAMS, HierarchyResult, HQPInfeasibleError, HQPParams

__all__ = ["HierarchySolver", "solve_hierarchy", "compiled_head"]

_EMPTY = np.zeros(0)
_EMPTY.flags.writeable = False


def _read_only(arr: np.ndarray) -> np.ndarray:
    arr.flags.writeable = False
    return arr


def _backend_name(solver: str | None) -> str:
    """The name of backend ``solver`` (``None``: the default, the first of :func:`available_backends`)."""
    if solver is not None:
        return solver
    names = available_backends()
    return names[0] if names else "none"


class _Constraints:
    """Inequality rows ``G x <= h`` in x-space: the hard rows (box bounds included, as rows), then the
    frozen rows of the levels solved so far; ``n_hard`` hard rows, named by ``labels()``."""

    def __init__(self, G, h, hard_labels, tol_rel):
        self.G, self.h = G, h
        self.n_hard = G.shape[0]
        self._hard_labels = hard_labels  # callable: names of the hard rows, built only for a message
        scale = float(np.abs(h).max()) if h.shape[0] else 0.0
        self.tol = tol_rel * (1.0 + scale)  # absolute feasibility tolerance

    def labels(self) -> list[str]:
        """Names of the hard rows (``"hard.ineq[0] row 3"``, ``"ub[3]"``)."""
        return self._hard_labels()

    def violation(self, x: np.ndarray) -> float:
        return float((self.G @ x - self.h).max(initial=0.0)) if self.G.shape[0] else 0.0


def _bound_rows(lb, ub, n: int) -> tuple[np.ndarray, np.ndarray, list[str]]:
    """The finite box bounds as rows ``B x <= hB`` (``ub`` rows, then ``lb`` rows) and their names."""
    rows, rhs, names = [np.zeros((0, n))], [np.zeros(0)], []
    for name, bound, sign in (("ub", ub, 1.0), ("lb", lb, -1.0)):
        if bound is not None:
            idx = np.flatnonzero(np.isfinite(bound))
            rows.append(sign * np.eye(n)[idx])
            rhs.append(sign * bound[idx])
            names += [f"{name}[{i}]" for i in idx]
    return np.vstack(rows), np.concatenate(rhs), names


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
    Every level goes through the compiled kernel (:func:`_solve_compiled`);
    :meth:`backend_level` takes a level the kernel could not verify.
    """

    def __init__(self, n, backend, solver_name, params, regularization, cons, x_hard, N_hard, hard_label):
        self.n = n
        self.backend = backend
        self.solver_name = solver_name
        self.params = params
        self.regularization = regularization
        self.cons = cons
        self.x_hard, self.N_hard, self.hard_label = x_hard, N_hard, hard_label
        self.qp_solves = 0
        # the kernel's arrays are C-ordered and writable, as it was compiled for them
        cons.G, cons.h, self.x = _writable(cons.G), _writable(cons.h), _writable(x_hard)
        self.N = N_hard
        self.no_N = np.zeros((n, 0))

    @property
    def r(self) -> int:
        return self.n if self.N is None else self.N.shape[1]

    def _proj(self, M: np.ndarray) -> np.ndarray:
        return M if self.N is None else M @ self.N

    def _lift(self, z: np.ndarray) -> np.ndarray:
        return self.x + (z if self.N is None else self.N @ z)

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
        """Rows of the frozen and hard inequalities in z: ``(Gz, hz, Gx)``, ``Gz z <= hz`` with ``Gx`` the
        same rows in x-space (for the multipliers). Rows the null space has made constant are left out (they
        cannot change; the returned point is checked)."""
        x, N, cons = self.x, self.N, self.cons
        G, h = cons.G, cons.h
        Gz = self._proj(G)
        hz = h - G @ x
        if N is not None and Gz.shape[0]:
            keep = np.abs(Gz).max(axis=1) > self.params.rank_tol * np.maximum(np.abs(G).max(axis=1), 1e-300)
            if not keep.all():
                Gz, hz, G = Gz[keep], hz[keep], G[keep]
        return Gz, hz, G

    def _call_backend(self, P, q, G, h, warm, where: str):
        self.qp_solves += 1
        res = self.backend(
            P, q, G if G.shape[0] else None, h if G.shape[0] else None, None, None, None, None,
            warm_start=warm, tolerances=self.params.tolerances, regularization=self.regularization,
        )
        if res.found:
            return res
        self._raise_if_hard_infeasible()
        raise QPSolveError(f"QP backend {self.solver_name!r} failed at {where}: status {res.status!r}")

    def _strictly_active(self, res, Gx: np.ndarray, skip: int) -> np.ndarray:
        """x-space rows with a clearly positive multiplier (rows ``skip:`` of G)."""
        lam = res.z[skip:] if res.z is not None else np.zeros(0)
        thr = self.params.multiplier_tol * max(1.0, float(lam.max(initial=0.0)))
        return Gx[lam > thr] if lam.size else np.zeros((0, self.n))

    def backend_level(self, level: Level, label: str, warm_x: np.ndarray | None):
        r"""A level the compiled kernel could not verify, solved by the QP backend; returns (method, e*, v*)
        and moves (x, N) to the level's optimum.

        The level's QP in :math:`(z, v)` (module docstring) is built from the SVD
        :math:`W^{1/2} A N = U S V^T` truncated at the rank (cost
        :math:`\tfrac12\|S_1 V_1^T z - c_1\|^2`), then the optimum is frozen for the levels below as the
        kernel freezes its own: the equality rows and the rows active at every optimum (a violated row of the
        level, a row with a clearly positive multiplier: complementary slackness, [NocedalWright2006]_
        Theorem 12.1) through the null space, the other inequality rows as frozen rows.
        """
        n_eq, n_in = level.A.shape[0], level.C.shape[0]
        if n_eq + n_in == 0:
            return "empty", np.zeros(0), np.zeros(0)
        if self.r == 0:
            e, v = level.slack(self.x)
            return "no freedom", e, v
        V1 = s1 = c1 = V2 = None
        if n_eq:
            err = level.b - level.A @ self.x
            if level.unit_eq:
                Aw = level.A
            else:
                sw = np.sqrt(level.weights_eq)
                Aw, err = level.A * sw[:, None], sw * err
            U, s, Vt = np.linalg.svd(self._proj(Aw), full_matrices=True)
            rank = int(np.count_nonzero(s > self.params.rank_tol * np.linalg.norm(Aw)))
            V1, s1, V2 = Vt[:rank].T, s[:rank], Vt[rank:].T
            c1 = U[:, :rank].T @ err
        active = np.zeros((0, self.n))
        if n_in == 0 and (V1 is None or V1.shape[1] == 0):
            method, x_new = "no freedom", self.x  # nothing here depends on the remaining freedom
        else:
            method = "qp"
            x_new, active = self._level_qp(level, label, V1, s1, c1, warm_x)
        e, v = level.slack(x_new)
        self.x = x_new
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

    def _level_qp(self, level, label, V1, s1, c1, warm_x):
        r, m_i = self.r, level.C.shape[0]
        nv = r + m_i
        P = np.zeros((nv, nv))
        q = np.zeros(nv)
        if V1 is not None and V1.shape[1]:
            # rank-truncated, so directions the level cannot change have exactly zero curvature
            P[:r, :r] = (V1 * s1**2) @ V1.T
            q[:r] = -(V1 @ (s1 * c1))
        Gc, hc, Gx = self._qp_constraints()
        if m_i:
            P[r:, r:].flat[:: m_i + 1] = level.weights_ineq
            G = np.zeros((m_i + Gc.shape[0], nv))
            G[:m_i, :r] = self._proj(level.C)
            G[:m_i, r:].flat[:: m_i + 1] = -1.0
            G[m_i:, :r] = Gc
            h = np.concatenate([level.d - level.C @ self.x, hc])
        else:
            G, h = Gc, hc
        warm = None
        if warm_x is not None:
            dz = warm_x - self.x
            z0 = dz if self.N is None else self.N.T @ dz
            v0 = np.maximum(level.C @ self._lift(z0) - level.d, 0.0)
            warm = np.concatenate([z0, v0])
        res = self._call_backend(P, q, G, h, warm, label)
        return self._lift(res.x[:r]), self._strictly_active(res, Gx, m_i)

    def solve_min_norm(self, warm_x: np.ndarray | None) -> str:
        r"""Final level :math:`\min \frac12\|x\|^2` over :math:`x = x_p + N_p z`: closed form when feasible,
        else the backend."""
        if self.r == 0:
            return "no freedom"
        z_c = -self.x if self.N is None else -(self.N.T @ self.x)
        x_c = self._lift(z_c)
        if self.params.closed_form and self.cons.violation(x_c) <= self.cons.tol:
            self.x = x_c
            return "closed-form"
        G, h, _ = self._qp_constraints()
        warm = None
        if warm_x is not None:
            dz = warm_x - self.x
            warm = dz if self.N is None else self.N.T @ dz
        res = self._call_backend(np.eye(self.r), -z_c, G, h, warm, "the final minimum-norm level")
        self.x = self._lift(res.x)
        return "qp"

    # -- hard constraints -------------------------------------------------------------------

    def _raise_if_hard_infeasible(self) -> None:
        r"""Raise :class:`HQPInfeasibleError` if the hard rows cannot hold together.

        Solves :math:`\min \frac12\|s\|^2` s.t. :math:`G_H (x_H + N_H z) - h_H \le s`
        over the hard inequality rows (box bounds included), on the hard equalities'
        solution set; rows with :math:`s >` the feasibility tolerance are named.
        """
        cons = self.cons
        G, h = cons.G[: cons.n_hard], cons.h[: cons.n_hard]
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


_METHOD_CODE = MappingProxyType({name: code for code, name in enumerate(kernels.METHODS)})


def _solve_compiled(work: _Solver, stack: LevelStack, labels, warm: list):
    """Every level through :func:`controllers.hqp.kernels.solve_levels_fast`; a level it stops at (one it
    could not verify) through :meth:`_Solver.backend_level`, then the kernel again from the next level.

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
    timed = kernels.HAVE_CLOCK  # the kernel times its levels; else one level per call, timed here
    k = 0
    while True:
        end = p if timed else min(k + 1, p)
        t_level = time.perf_counter()
        stop, x, N, has_N, cons.G, cons.h = kernels.solve_levels_fast(
            k, end, timed, _writable(work.x), work.no_N if work.N is None else _writable(work.N),
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
        t_level = time.perf_counter()  # this level needs the backend
        # the kernel has tried the closed form and the working set: straight to the backend
        method, e, v = work.backend_level(stack[stop], labels[stop], warm[stop])
        codes[stop] = _METHOD_CODE[method]
        e_all[eq_off[stop]: eq_off[stop + 1]] = e
        v_all[in_off[stop]: in_off[stop + 1]] = v
        X[stop], free[stop] = work.x, work.r
        seconds[stop] = time.perf_counter() - t_level
        k = stop + 1
    e_all.flags.writeable = v_all.flags.writeable = X.flags.writeable = residuals.flags.writeable = False
    eo, io = eq_off.tolist(), in_off.tolist()
    slacks = [(e_all[eo[k]: eo[k + 1]], v_all[io[k]: io[k + 1]]) for k in range(p)]
    methods = [kernels.METHODS[c] for c in codes.tolist()]
    return methods, slacks, seconds, free.tolist(), list(X), residuals


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
    params = DEFAULT_PARAMS if params is None else params
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
        if hard.weighted:
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
    solver_name = _backend_name(solver)

    if hard is not None:
        x0, N0 = _eliminate_hard_eq(hard, n, params, hard_label)
        G0, h0 = hard.C, hard.d
    else:
        x0, N0 = np.zeros(n), None
        G0, h0 = no_rows(n), _EMPTY
    n_hard_rows = G0.shape[0]
    bound_names: list[str] = []
    if lb is not None or ub is not None:  # the box bounds are hard rows like any other
        B, hB, bound_names = _bound_rows(lb, ub, n)
        G0, h0 = np.vstack([G0, B]), np.concatenate([h0, hB])

    def hard_rows():
        return [f"{hard_label}.{hard.row_label('ineq', i)}" for i in range(n_hard_rows)] + bound_names
    cons = _Constraints(G0, h0, hard_rows, params.feasibility_tol)
    work = _Solver(n, backend, solver_name, params, float(regularization), cons, x0, N0, hard_label)

    residuals = None
    if len(levels):
        if stack is None:
            stack = LevelStack.from_levels(levels, n)
        methods, slacks, times, free_dims, level_x, residuals = _solve_compiled(work, stack, labels, warm)
        x_levels = work.x
    else:
        methods, slacks, times, free_dims, level_x = [], [], np.zeros(0), [], []
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


def compiled_head(out: np.ndarray, n: int, p: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Views of x (n,), the levels' residuals (p,) and their times (p,) [s] in an output of
    :func:`controllers.hqp.kernels.solve_stack_fast` (its layout: :data:`~controllers.hqp.kernels.OUT_HEADER`
    scalars, then these)."""
    o = kernels.OUT_HEADER
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
        """From the output of :func:`controllers.hqp.kernels.solve_stack_fast` (``out`` read-only) and the wall
        time of the solve [s]."""
        self = object.__new__(cls)
        x, residuals, seconds = compiled_head(out, n, p)
        self.__dict__.update(x=x, level_residuals=residuals, level_times_s=seconds, found=True, solver=solver,
                             qp_solves=0, _raw=(out, n, p), solve_time_s=solve_time_s)
        return self

    def _per_level_fields(self) -> dict:
        d = self.__dict__
        if "_per_level" not in d:
            out, n, p = d["_raw"]
            o = kernels.OUT_HEADER + n + 2 * p
            X = out[o: o + p * n].reshape(p, n)
            o += p * n
            ints = out[len(out) - (4 * p + 2):].astype(np.int64)
            codes, free, eo, io = ints[:p].tolist(), ints[p: 2 * p], ints[2 * p: 3 * p + 1], ints[3 * p + 1:]
            e_all = out[o: o + eo[-1]]
            v_all = out[o + eo[-1]: o + eo[-1] + io[-1]]
            eo, io, methods = eo.tolist(), io.tolist(), kernels.METHODS
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
    a violated hard row, a machine without the kernel's clock) is handed to :func:`solve_hierarchy` with
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
        params = DEFAULT_PARAMS if params is None else params
        if not isinstance(params, HQPParams):
            raise ParameterError(f"HierarchySolver: params must be an HQPParams, got {type(params).__name__}")
        if not (isinstance(regularization, (int, float)) and math.isfinite(regularization) and regularization >= 0):
            raise ParameterError(f"HierarchySolver: regularization must be a finite float >= 0, got "
                                 f"{regularization!r}")
        get_backend(solver)  # raises BackendNotFound now rather than at the first tick
        self.n, self.solver, self.params, self.regularization = int(n), solver, params, float(regularization)
        self.solver_name = _backend_name(solver)
        self._fast = kernels.HAVE_CLOCK
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
        caller checks its rows once, as :class:`~controllers.hqp.HQPController` does).

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
            stack = stack.with_rows(A, C)
        return self.solve_trusted(stack, _writable(G), _writable(h), name, warm_start, t_start)

    def solve_trusted(self, stack: LevelStack, G: np.ndarray, h: np.ndarray, name: str, warm_start,
                     t_start: float) -> HierarchyResult:
        """:meth:`solve` without its checks, for a caller whose arrays are known good: ``stack`` of ``n`` columns
        with ``A``, ``C``, ``G`` and ``h`` C-ordered, writable float64 (as the controller's own buffers are)."""
        out = self.solve_compiled(stack, G, h)
        if out is not None:
            return self.compiled_result(out, len(stack.names), time.perf_counter() - t_start)
        return self.solve_with_backend(stack, G, h, name, warm_start)

    def solve_compiled(self, stack: LevelStack, G: np.ndarray, h: np.ndarray) -> np.ndarray | None:
        """The output of :func:`controllers.hqp.kernels.solve_stack_fast` when the compiled kernel solved the
        hierarchy whole (every level, no freedom left for the minimum-norm level unless it is off, the hard rows
        held), else None; the arguments as for :meth:`solve_trusted`.

        For a caller that reads a few numbers of every tick's result and builds the result record only when
        asked (:meth:`_KernelResult.from_kernel`): building it costs a few microseconds a tick."""
        p = len(stack.names)
        if self._fast and p:
            out = kernels.solve_stack_fast(
                G, h, stack.A, stack.b, stack.sw, stack.eq_off, stack.unit_eq, stack.C, stack.d, stack.wi,
                stack.in_off, *self._kernel_params, self._clock)
            # out[:4]: the first level that needs the QP backend, the freedom left, the largest violation of the
            # hard rows and its tolerance
            if out[0] == p and (out[1] == 0.0 or self.regularization == 0.0) and out[2] <= out[3]:
                return out
        return None

    def compiled_result(self, out: np.ndarray, p: int, solve_time_s: float) -> HierarchyResult:
        """The result record of a :meth:`solve_compiled` output ``out`` of ``p`` levels, solved in
        ``solve_time_s`` [s] (the output becomes read-only: the record's arrays are views of it)."""
        out.flags.writeable = False
        return _KernelResult.from_kernel(out, self.n, p, self.solver_name, solve_time_s)

    def solve_with_backend(self, stack: LevelStack, G: np.ndarray, h: np.ndarray, name: str,
                       warm_start) -> HierarchyResult:
        """:func:`solve_hierarchy` of ``stack`` above the hard rows ``G x <= h`` (named ``name``): every case the
        kernel does not finish (:meth:`solve_compiled`)."""
        hard = Level.unchecked(ineq=[(G, h, 1.0)], name=name)
        return solve_hierarchy(stack, self.n, self.solver, hard=hard, regularization=self.regularization,
                               warm_start=warm_start, params=self.params)
