r"""Quadratic-programming backends: every solver that qpsolvers knows, chosen by name.

A backend solves the dense convex QP

.. math::

    \min_y \; \tfrac12 y^\top P y + q^\top y
    \quad \text{s.t.} \quad G y \le h, \quad A y = b, \quad lb \le y \le ub

with ``P`` symmetric positive semidefinite, and returns a :class:`QPResult`.
The call is the same for every backend::

    solve(P, q, G, h, A, b, lb, ub, *, warm_start=None, tolerances, regularization=0.0)

The solving goes through qpsolvers [Caron2024]_ (``qpsolvers.Problem`` and
``qpsolvers.solve_problem(problem, solver=name, initvals=warm_start,
**settings)``): any solver in ``qpsolvers.available_solvers`` can be chosen by
name (:func:`get_backend`, :func:`available_backends`). This module keeps only
what is the project's own: the data check (:func:`check_qp`), the warm start
(the previous control tick's point, passed as ``initvals``) and the mapping of
:class:`QPTolerances` to each solver's own keywords, :data:`SOLVER_SETTINGS`:

========  =================================================  ==================  ==================
solver    QPTolerances field -> solver keyword               warm start          not used
========  =================================================  ==================  ==================
daqp      ``eps_abs`` -> ``primal_tol``;                     primal point        ``eps_rel``,
          ``dual_tol`` -> ``dual_tol``;                      (``primal_start``)  ``eps_infeasible``,
          ``max_iter`` -> ``iter_limit``;                                        ``polish``
          ``prox_tol`` -> ``eta_prox``;
          regularization ε -> ``eps_prox`` = −ε
osqp      ``eps_abs`` -> ``eps_abs``;                        primal point        ``dual_tol``,
          ``eps_rel`` -> ``eps_rel``;                        (``warm_start``)    ``prox_tol``
          ``eps_infeasible`` -> ``eps_prim_inf``,
          ``eps_dual_inf``;
          ``max_iter`` -> ``max_iter``;
          ``polish`` -> ``polishing``;
          (always) ``raise_error`` = False
clarabel  ``eps_abs`` -> ``tol_gap_abs``, ``tol_feas``;      ignored by the      ``dual_tol``,
          ``eps_rel`` -> ``tol_gap_rel``;                    solver              ``prox_tol``,
          ``eps_infeasible`` -> ``tol_infeas_abs``,                              ``polish``
          ``tol_infeas_rel``;
          ``max_iter`` -> ``max_iter``
scs       ``eps_abs`` -> ``eps_abs``;                        primal point        ``dual_tol``,
          ``eps_rel`` -> ``eps_rel``;                        (``x``)             ``prox_tol``,
          ``eps_infeasible`` -> ``eps_infeas``;                                  ``polish``
          ``max_iter`` -> ``max_iters``
highs     ``eps_abs`` -> ``primal_feasibility_tolerance``,   ignored by the      ``eps_rel``,
          ``dual_feasibility_tolerance`` (both at least      solver              ``dual_tol``,
          1e-10, HiGHS's lower bound);                                           ``eps_infeasible``,
          ``max_iter`` -> ``qp_iteration_limit``;                                ``prox_tol``,
          (always) ``qp_regularization_value`` = 1e-10                           ``polish``
========  =================================================  ==================  ==================

The keyword names were checked against qpsolvers 4.13's solver interfaces and
the solvers' own setting objects (OSQP 1.1, DAQP 0.11, Clarabel 0.11, SCS 3.3,
HiGHS 1.16). Every setting not listed keeps the solver's default; the solvers'
defaults are looser (OSQP and SCS 1e-3/1e-4, Clarabel 1e-8, HiGHS 1e-7, DAQP
``primal_tol`` 1e-6). ``regularization`` is used by DAQP only: ADMM (OSQP,
SCS), interior-point (Clarabel) and HiGHS's active-set method accept a
semidefinite ``P``.

A solver that qpsolvers knows and that is installed but that the table lacks
is still usable by name: it runs with its own default settings, and the first
call logs (``logging``, level INFO, once per solver) that ``tolerances`` are
not passed to it.

Three choices beyond the plain mapping of tolerances:

* ``daqp`` (the default) keeps its own adapter, :mod:`.daqp_`: qpsolvers'
  DAQP interface drops DAQP's exit flag and iteration count, and the
  hierarchy's error names the solver's status (e.g. "nonconvex (exitflag
  −5)" for a singular ``P`` without proximal iterations).
* The anchor variable. OSQP 1.x prints "Polishing not needed - no active set
  detected at optimal point" from its C code, whatever ``verbose`` says, when
  polishing finds no active constraint; and qpsolvers hands a problem without
  any constraint to SciPy's LSQR instead of the named solver (Clarabel, SCS),
  whose accuracy is not the requested one. In both cases (OSQP with
  polishing; any solver, unconstrained problem) one decoupled variable
  :math:`t` with cost :math:`t` and rows :math:`-t \le 0`, :math:`t \le 1` is
  appended before the problem goes to qpsolvers: the first row is always
  active at :math:`t = 0`, so polishing always has an active set and the
  problem is never unconstrained, and it does not couple to ``y`` (the
  returned point and multipliers drop it).
* HiGHS's active-set QP method regularizes with ``qp_regularization_value``
  (default 1e-7). On the hierarchy's semidefinite levels (a cost on the
  slacks only) HiGHS reported bounded levels "unbounded" or failed for some
  values and not for others: of 0, 1e-10, 1e-9, 1e-8, 1e-7, 1e-6 and 1e-5,
  only 1e-10 let every HiGHS case of the hierarchy's tests pass (found by
  trial with HiGHS 1.16, not from its documentation), so the table passes
  1e-10. HiGHS stays the least robust of the installed solvers here.

Results: ``found`` is True only when the solver reports an optimal solution
within its tolerances; otherwise ``found=False``, ``x=None`` and ``status``
holds the solver's own status (the caller raises :class:`QPSolveError` with
it, naming where it happened; a backend never returns a made-up point).
Errors raised by a solver library are re-raised as :class:`QPSolveError`.
Warnings that qpsolvers emits during a call (e.g. "OSQP exited with status
...") are not shown: the same information is in ``status``.

References
----------
.. [Caron2024] S. Caron, D. Arnström, S. Bonagiri, A. Dechaume, N. Flowers,
   A. Heins, T. Ishikawa, D. Kenefake, G. Mazzamuto, D. Meoli, B. O'Donoghue,
   A. A. Oppenheimer, A. Pandala, J. J. Quiroz Omaña, N. Rontsis, P. Shah,
   S. St-Jean, N. Vitucci, S. Wolfers, F. Yang, et al., "qpsolvers: Quadratic
   Programming Solvers in Python", version 4, 2024 (software,
   https://github.com/qpsolvers/qpsolvers).
.. [Stellato2020] B. Stellato, G. Banjac, P. Goulart, A. Bemporad, S. Boyd,
   "OSQP: an operator splitting solver for quadratic programs",
   Mathematical Programming Computation 12(4):637-672, 2020.
.. [Arnstrom2022] D. Arnström, A. Bemporad, D. Axehill, "A dual active-set
   solver for embedded quadratic programming using recursive LDL^T updates",
   IEEE Trans. Automatic Control 67(8):4362-4369, 2022.
"""

from __future__ import annotations

import functools
import importlib
import importlib.metadata
import logging
import pkgutil
import re
import time
import types
import warnings
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from types import MappingProxyType

import numpy as np
import qpsolvers
import scipy.sparse as sp

from models.errors import ParameterError, SandboxError

__all__ = [
    "QPResult",
    "QPTolerances",
    "QPSolveError",
    "BackendNotFound",
    "BACKENDS",
    "DEFAULT_BACKEND",
    "SOLVER_SETTINGS",
    "available_backends",
    "get_backend",
    "check_qp",
    "solve_with_qpsolvers",
    "solver_settings",
]

_log = logging.getLogger(__name__)


class QPSolveError(SandboxError, RuntimeError):
    """A QP backend failed (status other than solved) or raised an error."""


class BackendNotFound(SandboxError, LookupError):  # noqa: N818 - the name is part of the API contract
    """The requested QP backend is not installed or not known."""


@dataclass(frozen=True)
class QPTolerances:
    """Solver tolerances, passed explicitly to every backend.

    How each field maps to each solver's keywords: the table of
    :mod:`controllers.qp_backends` (:data:`SOLVER_SETTINGS`).

    Attributes
    ----------
    eps_abs : float, default 1e-9
        Absolute tolerance on the primal (and, for OSQP, SCS, Clarabel and
        HiGHS, dual) residual. DAQP ``primal_tol``.
    eps_rel : float, default 1e-9
        Relative residual tolerance (OSQP, SCS, Clarabel); DAQP has none.
    dual_tol : float, default 1e-12
        Dual feasibility tolerance of DAQP (``dual_tol``, whose own default
        is the same value).
    eps_infeasible : float, default 1e-6
        Tolerance of the primal/dual infeasibility certificates (OSQP
        ``eps_prim_inf`` and ``eps_dual_inf``, whose default is 1e-4; SCS
        ``eps_infeas``; Clarabel ``tol_infeas_abs``, ``tol_infeas_rel``).
    prox_tol : float, default 1e-12
        Convergence tolerance of DAQP's proximal-point iterations
        (``eta_prox``; its automatic default stopped with slacks off by
        3e-7 on a test problem).
    max_iter : int, default 20000
        Iteration limit. OSQP ``max_iter`` (default 4000, too few for
        1e-9 on ill-conditioned levels); DAQP ``iter_limit``; SCS
        ``max_iters``; Clarabel ``max_iter``; HiGHS ``qp_iteration_limit``.
    polish : bool, default True
        OSQP solution polishing (an active-set refinement after ADMM,
        [Stellato2020]_ section 5); off by default in OSQP.
    """

    eps_abs: float = 1e-9
    eps_rel: float = 1e-9
    dual_tol: float = 1e-12
    eps_infeasible: float = 1e-6
    prox_tol: float = 1e-12
    max_iter: int = 20000
    polish: bool = True

    def __post_init__(self) -> None:
        for name in ("eps_abs", "eps_rel", "dual_tol", "eps_infeasible", "prox_tol"):
            value = getattr(self, name)
            if not (isinstance(value, (int, float)) and np.isfinite(value) and value > 0):
                raise ParameterError(f"QPTolerances.{name} must be a finite float > 0, got {value!r}")
        if not (isinstance(self.max_iter, (int, np.integer)) and self.max_iter >= 1):
            raise ParameterError(f"QPTolerances.max_iter must be an int >= 1, got {self.max_iter!r}")
        if not isinstance(self.polish, bool):
            raise ParameterError(f"QPTolerances.polish must be a bool, got {self.polish!r}")


@dataclass(frozen=True, eq=False)
class QPResult:
    """What a backend returns.

    Attributes
    ----------
    x : (n,) ndarray or None
        The solution; ``None`` unless ``found``.
    found : bool
        True only if the solver reports an optimal solution within its
        tolerances.
    status : str
        The solver's own status, e.g. ``"solved"`` (OSQP), ``"Solved"``
        (Clarabel) or ``"optimal"`` (DAQP exit flags 1 and 2); for a solver
        whose qpsolvers interface reports none, ``"found"`` or ``"not found
        (...)"``.
    solve_time_s : float
        Wall time of the backend call, conversion included [s].
    iterations : int or None
        Solver iterations, ``None`` if the solver interface does not report
        them.
    z : (m_i,) ndarray or None
        Multipliers of ``G y <= h`` (>= 0), if found.
    z_box : (n,) ndarray or None
        Multipliers of the bounds: > 0 where ``ub`` is active, < 0 where
        ``lb`` is active, if found and bounds were given.
    y : (m_e,) ndarray or None
        Multipliers of ``A y = b``, if found and equalities were given.
    solution : qpsolvers.Solution or None
        The solution in qpsolvers' form (the solver's extras included), from
        which the residuals are computed on demand.
    """

    x: np.ndarray | None
    found: bool
    status: str
    solve_time_s: float
    iterations: int | None = None
    z: np.ndarray | None = None
    z_box: np.ndarray | None = None
    y: np.ndarray | None = None
    solution: qpsolvers.Solution | None = None

    @property
    def primal_residual(self) -> float | None:
        r"""Primal residual :math:`\max(\|Ay-b\|_\infty, [Gy-h]^+, [lb-y]^+, [y-ub]^+)`, or None.

        Definition of qpsolvers' ``Solution.primal_residual`` [Caron2024]_;
        ``None`` unless ``found``.
        """
        return None if not self.found or self.solution is None else float(self.solution.primal_residual())

    @property
    def dual_residual(self) -> float | None:
        r"""Dual residual :math:`\|P y + q + A^\top \lambda_y + G^\top z + z_{box}\|_\infty`, or None.

        Definition of qpsolvers' ``Solution.dual_residual`` [Caron2024]_;
        ``None`` unless ``found``.
        """
        return None if not self.found or self.solution is None else float(self.solution.dual_residual())


def _array(value) -> np.ndarray:
    """A C-contiguous, writable float array (the solvers' C interfaces reject read-only buffers)."""
    return np.require(value, dtype=float, requirements=("C", "W"))


def _as_vector(name: str, value, size: int) -> np.ndarray:
    arr = _array(value)
    if arr.shape != (size,):
        raise ParameterError(f"QP vector {name} must have shape ({size},), got {arr.shape}")
    return arr


def check_qp(P, q, G=None, h=None, A=None, b=None, lb=None, ub=None):
    """Validate and normalise the data of a QP.

    Parameters
    ----------
    P : (n, n) array_like
        Symmetric positive semidefinite cost matrix.
    q : (n,) array_like
        Linear cost.
    G, h : (m_i, n), (m_i,) array_like or None
        Inequalities ``G y <= h``.
    A, b : (m_e, n), (m_e,) array_like or None
        Equalities ``A y = b``.
    lb, ub : (n,) array_like or None
        Bounds; entries may be infinite.

    Returns
    -------
    tuple
        ``(P, q, G, h, A, b, lb, ub)`` as C-contiguous, writable float arrays
        (copies only where needed: the solvers' C interfaces reject read-only
        buffers); an empty constraint block becomes ``None``.

    Raises
    ------
    ParameterError
        Naming the vector or matrix whose shape or values are wrong.
    """
    P = _array(P)
    if P.ndim != 2 or P.shape[0] != P.shape[1]:
        raise ParameterError(f"QP matrix P must be square (n, n), got shape {P.shape}")
    n = P.shape[0]
    q = _as_vector("q", q, n)
    if not np.isfinite(P.sum() + q.sum()) and not (np.isfinite(P).all() and np.isfinite(q).all()):
        raise ParameterError("QP cost P, q must be finite")
    blocks = []
    for mat_name, vec_name, M, v in (("G", "h", G, h), ("A", "b", A, b)):
        if (M is None) != (v is None):
            raise ParameterError(f"QP {mat_name} and {vec_name} must be given together")
        if M is None:
            blocks += [None, None]
            continue
        M = _array(M)
        if M.ndim == 1 and M.size == n:
            M = M.reshape(1, n)
        if M.ndim != 2 or M.shape[1] != n:
            raise ParameterError(f"QP matrix {mat_name} must have shape (m, {n}), got {M.shape}")
        v = _as_vector(vec_name, np.atleast_1d(v), M.shape[0])
        if not np.isfinite(M.sum() + v.sum()) and not (np.isfinite(M).all() and np.isfinite(v).all()):
            raise ParameterError(f"QP constraint {mat_name}, {vec_name} must be finite")
        blocks += [M, v] if M.shape[0] else [None, None]
    bounds = []
    for name, v, bad in (("lb", lb, np.inf), ("ub", ub, -np.inf)):
        if v is None:
            bounds.append(None)
            continue
        v = _as_vector(name, v, n)
        total = v.sum()  # NaN or `bad` anywhere makes the sum NaN or `bad`
        if (total != total or total == bad) and (np.isnan(v).any() or (v == bad).any()):
            raise ParameterError(f"QP bound {name} must not be NaN or {bad}")
        bounds.append(v)
    if bounds[0] is not None and bounds[1] is not None and (bounds[0] > bounds[1]).any():
        i = int(np.argmax(bounds[0] > bounds[1]))
        raise ParameterError(f"QP bounds need lb <= ub, got lb[{i}] = {bounds[0][i]} > ub[{i}] = {bounds[1][i]}")
    return (P, q, *blocks, *bounds)


# The tolerance table: solver name -> (tolerances, regularization) -> the solver's own keywords ----------------

#: HiGHS rejects feasibility tolerances below this value (its option bounds).
_HIGHS_MIN_TOL = 1e-10

#: Solver name -> function of ``(tolerances, regularization)`` giving the keywords passed to the solver
#: (read-only; the table of the module docstring).
SOLVER_SETTINGS: Mapping[str, Callable[[QPTolerances, float], dict]] = types.MappingProxyType({
    "daqp": lambda t, reg: {
        "primal_tol": t.eps_abs,
        "dual_tol": t.dual_tol,
        "iter_limit": int(t.max_iter),
        "eta_prox": t.prox_tol,
        "eps_prox": -float(reg),
    },
    "osqp": lambda t, reg: {
        "eps_abs": t.eps_abs,
        "eps_rel": t.eps_rel,
        "eps_prim_inf": t.eps_infeasible,
        "eps_dual_inf": t.eps_infeasible,
        "max_iter": int(t.max_iter),
        "polishing": t.polish,
        "raise_error": False,
    },
    "clarabel": lambda t, reg: {
        "tol_gap_abs": t.eps_abs,
        "tol_feas": t.eps_abs,
        "tol_gap_rel": t.eps_rel,
        "tol_infeas_abs": t.eps_infeasible,
        "tol_infeas_rel": t.eps_infeasible,
        "max_iter": int(t.max_iter),
    },
    "scs": lambda t, reg: {
        "eps_abs": t.eps_abs,
        "eps_rel": t.eps_rel,
        "eps_infeas": t.eps_infeasible,
        "max_iters": int(t.max_iter),
    },
    "highs": lambda t, reg: {
        "primal_feasibility_tolerance": max(t.eps_abs, _HIGHS_MIN_TOL),
        "dual_feasibility_tolerance": max(t.eps_abs, _HIGHS_MIN_TOL),
        "qp_iteration_limit": int(t.max_iter),
        "qp_regularization_value": 1e-10,
    },
})


@functools.cache
def _log_default_settings(name: str) -> None:
    """Say once per solver that it runs with its own defaults (a solver the table lacks)."""
    _log.info("QP backend %r has no entry in controllers.qp_backends.SOLVER_SETTINGS: it runs with its own "
              "default settings and the given QPTolerances are not passed to it", name)


def solver_settings(name: str, tolerances: QPTolerances, regularization: float = 0.0) -> dict:
    """The keywords passed to solver ``name`` for these tolerances (the module table).

    Parameters
    ----------
    name : str
        Solver name, as in ``qpsolvers.available_solvers``.
    tolerances : QPTolerances
        The tolerances to map.
    regularization : float, default 0.0
        Proximal weight ε [same units as ``P``]; only DAQP uses it.

    Returns
    -------
    dict
        Solver keywords; empty for a solver the table lacks (its defaults apply, logged once).
    """
    if not isinstance(tolerances, QPTolerances):
        raise ParameterError(f"QP backend {name!r}: tolerances must be a QPTolerances, got {tolerances!r}")
    entry = SOLVER_SETTINGS.get(name)
    if entry is None:
        _log_default_settings(name)
        return {}
    return entry(tolerances, regularization)


# Solving through qpsolvers --------------------------------------------------------------------------------


def _status(name: str, solution) -> tuple[str, int | None]:
    """The solver's own status and iteration count, as far as its qpsolvers interface exposes them."""
    extras = solution.extras if isinstance(solution.extras, dict) else {}
    info = extras.get("info")
    status = extras.get("status", getattr(info, "status", None))
    iterations = extras.get("iter", getattr(info, "iter", None))
    if status is None:
        status = "found" if solution.found else f"not found (qpsolvers' {name} interface reports no status)"
    return str(status), (None if iterations is None else int(iterations))


def _anchor(P, q, G, h, n: int):
    """Append the decoupled variable t (cost t, rows -t <= 0 and t <= 1); see the module docstring."""
    P1 = np.zeros((n + 1, n + 1))
    P1[:n, :n] = P
    rows = np.zeros((2, n + 1))
    rows[0, n], rows[1, n] = -1.0, 1.0
    G1 = rows if G is None else np.vstack([np.hstack([G, np.zeros((G.shape[0], 1))]), rows])
    h1 = np.array([0.0, 1.0]) if h is None else np.concatenate([h, [0.0, 1.0]])
    return P1, np.append(q, 1.0), G1, h1


def solve_with_qpsolvers(
    name: str,
    P,
    q,
    G=None,
    h=None,
    A=None,
    b=None,
    lb=None,
    ub=None,
    *,
    warm_start: np.ndarray | None = None,
    tolerances: QPTolerances,
    regularization: float = 0.0,
) -> QPResult:
    """Solve a dense convex QP with solver ``name`` through ``qpsolvers.solve_problem``.

    Parameters
    ----------
    name : str
        A solver in ``qpsolvers.available_solvers``.
    P, q, G, h, A, b, lb, ub
        The QP of the module docstring (see :func:`check_qp`).
    warm_start : (n,) array_like or None
        Primal guess (e.g. the previous control tick's solution), passed as
        ``initvals``; solvers that cannot use one ignore it (module table).
    tolerances : QPTolerances
        Explicit tolerances, mapped by :data:`SOLVER_SETTINGS`.
    regularization : float, default 0.0
        Proximal weight; only DAQP uses it (module table).

    Returns
    -------
    QPResult
        ``found`` as qpsolvers reports it; ``x`` None otherwise.

    Raises
    ------
    ParameterError
        If the QP data have wrong shapes or non-finite values.
    QPSolveError
        If the solver or qpsolvers raises.
    """
    start = time.perf_counter()
    P, q, G, h, A, b, lb, ub = check_qp(P, q, G, h, A, b, lb, ub)
    if not (np.isfinite(regularization) and regularization >= 0):
        raise ParameterError(f"{name}: regularization must be a finite float >= 0, got {regularization!r}")
    n = q.size
    settings = solver_settings(name, tolerances, regularization)
    initvals = None if warm_start is None else np.array(warm_start, dtype=float).reshape(n)  # writable copy
    anchored = (name == "osqp" and bool(settings.get("polishing"))) or (
        G is None and A is None and lb is None and ub is None)
    if anchored:
        P_s, q_s, G_s, h_s = _anchor(P, q, G, h, n)
        lb_s = None if lb is None else np.append(lb, -np.inf)
        ub_s = None if ub is None else np.append(ub, np.inf)
        A_s = None if A is None else np.hstack([A, np.zeros((A.shape[0], 1))])
        initvals = None if initvals is None else np.append(initvals, 0.0)
    else:
        P_s, q_s, G_s, h_s, A_s, lb_s, ub_s = P, q, G, h, A, lb, ub
    if name in qpsolvers.sparse_solvers and name not in qpsolvers.dense_solvers:
        P_s, G_s, A_s = (None if M is None else sp.csc_matrix(M) for M in (P_s, G_s, A_s))
    problem = qpsolvers.Problem(P_s, q_s, G_s, h_s, A_s, b, lb_s, ub_s)
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # qpsolvers' notes on conversions and statuses: `status` has them
            sol = qpsolvers.solve_problem(problem, solver=name, initvals=initvals, **settings)
    except Exception as e:  # solvers raise many types; re-raise as ours
        raise QPSolveError(f"{name} raised {type(e).__name__}: {e}") from e
    status, iterations = _status(name, sol)
    if not sol.found or sol.x is None:
        return QPResult(None, False, status, time.perf_counter() - start, iterations)
    mi = 0 if G is None else G.shape[0]
    out = qpsolvers.Solution(qpsolvers.Problem(P, q, G, h, A, b, lb, ub), found=True, extras=sol.extras)
    out.x = np.array(sol.x[:n], dtype=float)
    out.z = None if G is None else np.array(sol.z[:mi], dtype=float)
    out.y = None if A is None else np.array(sol.y, dtype=float)
    out.z_box = None if (lb is None and ub is None) else np.array(sol.z_box[:n], dtype=float)
    return QPResult(out.x, True, status, time.perf_counter() - start, iterations, out.z, out.z_box, out.y, out)


# Registry: qpsolvers' installed solvers, built once at import (read-only) -------------------------------------

#: Preferred default, in order (the design card: daqp if installed, else osqp).
_PREFERRED = ("daqp", "osqp")

#: Solvers with their own adapter module here (the module docstring says why).
_ADAPTERS = MappingProxyType({"daqp": "daqp_"})


def _adapter(module_name: str) -> Callable[..., QPResult]:
    """The ``solve`` of adapter module ``module_name`` (imported here: its solver is installed)."""
    return importlib.import_module(f"{__name__}.{module_name}").solve


def _through_qpsolvers(name: str) -> Callable[..., QPResult]:
    solve = functools.partial(solve_with_qpsolvers, name)
    solve.__doc__ = f"``solve_with_qpsolvers`` with solver {name!r}."
    return solve


def _installed() -> tuple[str, ...]:
    names = sorted(set(qpsolvers.available_solvers))
    first = [p for p in _PREFERRED if p in names][:1]
    return tuple(first + [s for s in names if s not in first])


#: Installed backends: name -> ``solve`` function (read-only), default first.
BACKENDS: Mapping[str, Callable[..., QPResult]] = types.MappingProxyType({
    name: (_adapter(_ADAPTERS[name]) if name in _ADAPTERS else _through_qpsolvers(name))
    for name in _installed()
})

#: Name of the default backend (``daqp`` if installed, else ``osqp``, else the first installed), or None.
DEFAULT_BACKEND: str | None = next(iter(BACKENDS), None)


def available_backends() -> tuple[str, ...]:
    """Names of the installed backends (``qpsolvers.available_solvers``), default first, then sorted."""
    return tuple(BACKENDS)


def _known_solvers() -> tuple[str, ...]:
    """Every solver name qpsolvers has an interface for (its ``qpsolvers.solvers.<name>_`` modules)."""
    return tuple(sorted(m.name[:-1] for m in pkgutil.iter_modules(qpsolvers.solvers.__path__) if m.name.endswith("_")))


def _install_hint(name: str) -> str:
    """How to install solver ``name``: the packages of qpsolvers' extra of that name, from its metadata."""
    try:
        requires = importlib.metadata.requires("qpsolvers") or []
    except importlib.metadata.PackageNotFoundError:
        requires = []
    packages = [re.split(r"[\s<>=!~;\[]", r, maxsplit=1)[0] for r in requires
                if re.search(rf"extra\s*==\s*[\"']{re.escape(name)}[\"']", r)]
    packages = [p for p in packages if p and p != "qpsolvers"]
    if packages:
        return f"`pip install {' '.join(packages)}`"
    return f"install the {name!r} solver as qpsolvers' documentation says"


def get_backend(name: str | None = None) -> Callable[..., QPResult]:
    """The ``solve`` function of a backend.

    Parameters
    ----------
    name : str or None
        Solver name, any of :func:`available_backends` (e.g. ``"daqp"``,
        ``"osqp"``, ``"clarabel"``); ``None`` gives :data:`DEFAULT_BACKEND`.

    Returns
    -------
    callable
        ``solve(P, q, G, h, A, b, lb, ub, *, warm_start=None, tolerances,
        regularization=0.0) -> QPResult``.

    Raises
    ------
    BackendNotFound
        If the backend is unknown or not installed; the one-line message
        names it, lists the installed backends and says how to add one.
    """
    key = DEFAULT_BACKEND if name is None else name
    if key is not None and key in BACKENDS:
        return BACKENDS[key]
    installed = ", ".join(BACKENDS) or "none"
    if name is None:
        what, hint = "no QP backend is installed", f"to add one, {_install_hint(_PREFERRED[0])}"
    elif name in _known_solvers():
        what = f"QP backend {name!r} is known to qpsolvers but not installed"
        hint = f"to add one, {_install_hint(name)}"
    else:
        what = f"unknown QP backend {name!r}"
        hint = f"to add one, install a solver qpsolvers knows ({', '.join(_known_solvers())})"
    raise BackendNotFound(f"{what}; installed backends: {installed}; {hint}")
