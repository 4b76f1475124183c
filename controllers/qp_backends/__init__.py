r"""Quadratic-programming backends: one adapter per solver, same signature.

Every adapter solves the same dense convex QP

.. math::

    \min_y \; \tfrac12 y^\top P y + q^\top y
    \quad \text{s.t.} \quad G y \le h, \quad A y = b, \quad lb \le y \le ub

with ``P`` symmetric positive semidefinite, and returns a :class:`QPResult`.
The call is the same for every backend::

    solve(P, q, G, h, A, b, lb, ub, *, warm_start=None, tolerances, regularization=0.0)

Tolerances are always passed explicitly (:class:`QPTolerances`); each adapter
documents how they map to its own settings and which solver defaults it keeps.
An adapter reports a failure as ``found=False`` with the solver's own status
and ``x=None``: it never returns a made-up point. Errors raised by a solver
library are re-raised as :class:`QPSolveError`.

The registry :data:`BACKENDS` (name -> ``solve``) is filled once, at import, by
guarded imports: a solver that is not installed is simply absent, and
:func:`get_backend` says how to add it. The default backend is ``daqp`` if
installed, else ``osqp``; the adapters after the default are imported when
first called (their package is only looked up at import), so a process that
never calls OSQP does not pay for loading it and SciPy.

Adding a backend
----------------
1. Write ``controllers/qp_backends/<name>_.py`` that imports its solver at
   module level, defines ``NAME`` and ``solve`` with the signature above,
   maps :class:`QPTolerances` explicitly to the solver's settings and
   documents them in a table.
2. Add the module name, its solver package and its install command to
   ``_ADAPTER_MODULES`` below.
3. The shared problems of ``tests/test_qp_backends.py`` then run on it.

References
----------
.. [Stellato2020] B. Stellato, G. Banjac, P. Goulart, A. Bemporad, S. Boyd,
   "OSQP: an operator splitting solver for quadratic programs",
   Mathematical Programming Computation 12(4):637-672, 2020.
.. [Arnstrom2022] D. Arnström, A. Bemporad, D. Axehill, "A dual active-set
   solver for embedded quadratic programming using recursive LDL^T updates",
   IEEE Trans. Automatic Control 67(8):4362-4369, 2022.
"""

from __future__ import annotations

import importlib
import importlib.util
import types
from collections.abc import Callable, Mapping
from dataclasses import dataclass

import numpy as np

from models.errors import ParameterError, SandboxError

__all__ = [
    "QPResult",
    "QPTolerances",
    "QPSolveError",
    "BackendNotFound",
    "BACKENDS",
    "DEFAULT_BACKEND",
    "available_backends",
    "get_backend",
    "check_qp",
]


class QPSolveError(SandboxError, RuntimeError):
    """A QP backend failed (status other than solved) or raised an error."""


class BackendNotFound(SandboxError, LookupError):  # noqa: N818 - the name is part of the API contract
    """The requested QP backend is not installed or not known."""


@dataclass(frozen=True)
class QPTolerances:
    """Solver tolerances, passed explicitly to every backend.

    Attributes
    ----------
    eps_abs : float, default 1e-9
        Absolute tolerance on the primal (and, for OSQP, dual) residual.
        OSQP ``eps_abs``; DAQP ``primal_tol``.
    eps_rel : float, default 1e-9
        Relative residual tolerance. OSQP ``eps_rel``; DAQP has none.
    dual_tol : float, default 1e-12
        Dual feasibility tolerance of active-set solvers (DAQP ``dual_tol``,
        whose own default is the same value). OSQP uses ``eps_abs`` instead.
    eps_infeasible : float, default 1e-6
        Tolerance of the primal/dual infeasibility certificates (OSQP
        ``eps_prim_inf`` and ``eps_dual_inf``, whose default is 1e-4).
    prox_tol : float, default 1e-12
        Convergence tolerance of DAQP's proximal-point iterations
        (``eta_prox``; its automatic default stopped with slacks off by
        3e-7 on a test problem).
    max_iter : int, default 20000
        Iteration limit. OSQP ``max_iter`` (default 4000, too few for
        1e-9 on ill-conditioned levels); DAQP ``iter_limit``.
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
        The solver's own status, e.g. ``"solved"`` (OSQP) or
        ``"optimal (exitflag 1)"`` (DAQP).
    solve_time_s : float
        Wall time of the adapter call, conversion included [s].
    iterations : int or None
        Solver iterations, ``None`` if the solver interface does not report
        them.
    z : (m_i,) ndarray or None
        Multipliers of ``G y <= h`` (>= 0), if found.
    z_box : (n,) ndarray or None
        Multipliers of the bounds: > 0 where ``ub`` is active, < 0 where
        ``lb`` is active, if found and bounds were given.
    """

    x: np.ndarray | None
    found: bool
    status: str
    solve_time_s: float
    iterations: int | None = None
    z: np.ndarray | None = None
    z_box: np.ndarray | None = None


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


# Registry, filled once at import by guarded imports -------------------------------------------

#: Adapter modules tried at import, in order of preference for the default -> (solver package, install command).
_ADAPTER_MODULES = {"daqp_": ("daqp", "pip install daqp"), "osqp_": ("osqp", "pip install osqp")}

_registry: dict[str, Callable[..., QPResult]] = {}
_missing: dict[str, str] = {}


def _deferred(module_name: str, install: str) -> Callable[..., QPResult]:
    """A ``solve`` that imports its adapter on first call (an installed solver that is not the default).

    Importing a solver library can take a second (OSQP brings SciPy's sparse matrices); every process of a
    sweep would pay it for a backend it never calls.  If the import fails after all, the call raises
    :class:`BackendNotFound` with the import error.
    """
    loaded: list = []

    def solve(*args, **kwargs) -> QPResult:
        if not loaded:
            try:
                loaded.append(importlib.import_module(f"{__name__}.{module_name}").solve)
            except ImportError as e:
                raise BackendNotFound(f"QP backend {module_name.rstrip('_')!r} cannot be loaded ({e}); "
                                      f"`{install}`") from e
        return loaded[0](*args, **kwargs)

    solve.__doc__ = f"The ``solve`` of :mod:`{__name__}.{module_name}`, imported on first call."
    return solve


def _register_installed() -> None:
    for module_name, (package, install) in _ADAPTER_MODULES.items():
        name = module_name.rstrip("_")
        if _registry:  # the default is loaded: the others only when first called, if their package is there
            if importlib.util.find_spec(package) is None:
                _missing[name] = f"not installed (no module named {package!r}); `{install}`"
            else:
                _registry[name] = _deferred(module_name, install)
            continue
        try:
            module = importlib.import_module(f"{__name__}.{module_name}")
        except ImportError as e:
            _missing[name] = f"not installed ({e}); `{install}`"
            continue
        _registry[module.NAME] = module.solve


_register_installed()

#: Installed backends: name -> ``solve`` function (read-only).
BACKENDS: Mapping[str, Callable[..., QPResult]] = types.MappingProxyType(_registry)

#: Name of the default backend (``daqp`` if installed, else ``osqp``), or None.
DEFAULT_BACKEND: str | None = next(iter(_registry), None)


def available_backends() -> tuple[str, ...]:
    """Names of the installed backends, default first."""
    return tuple(_registry)


def get_backend(name: str | None = None) -> Callable[..., QPResult]:
    """The ``solve`` function of a backend.

    Parameters
    ----------
    name : str or None
        Backend name (``"daqp"``, ``"osqp"``); ``None`` gives
        :data:`DEFAULT_BACKEND`.

    Returns
    -------
    callable
        ``solve(P, q, G, h, A, b, lb, ub, *, warm_start=None, tolerances,
        regularization=0.0) -> QPResult``.

    Raises
    ------
    BackendNotFound
        If the backend is unknown or not installed; the message lists the
        installed backends and how to add one.
    """
    key = DEFAULT_BACKEND if name is None else name
    if key is not None and key in _registry:
        return _registry[key]
    installed = ", ".join(_registry) or "none"
    missing = "; ".join(f"{k}: {v}" for k, v in _missing.items())
    hint = (
        "to add one, install its package"
        + (f" ({missing})" if missing else "")
        + ", or write an adapter in controllers/qp_backends/ (see the checklist in its docstring)"
    )
    what = "no QP backend is installed" if name is None else f"unknown QP backend {name!r}"
    raise BackendNotFound(f"{what}; installed backends: {installed}; {hint}")
