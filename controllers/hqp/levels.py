r"""Priority levels of a hierarchy and their checks: :class:`Level` and :class:`LevelStack`.

A :class:`Level` holds weighted equality rows :math:`A x \approx b` and inequality rows :math:`C x \le d`,
checked once when built (each bad entry named); :meth:`Level.unchecked` is the same without the checks, for
a caller that builds trusted rows every control tick. A :class:`LevelStack` holds every level's rows stacked,
as the compiled solver (:mod:`controllers.hqp.kernels`) takes them.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field
from functools import lru_cache

import numpy as np

from models.errors import ParameterError

__all__ = ["Level", "LevelStack", "no_rows"]

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
def no_rows(n: int) -> np.ndarray:
    """A read-only (0, n) array: the rows of a level (or of hard constraints) that has none."""
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
            A = no_rows(n or 0)
        if C is None:
            C = no_rows(n or 0)
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
            eq=eq_entries, ineq=in_entries, name=name, A=no_rows(n or 0) if A is None else A, b=b, weights_eq=we,
            C=no_rows(n or 0) if C is None else C, d=d, weights_ineq=wi, n_cols=n, _eq_starts=eq_starts,
            _ineq_starts=in_starts, _weighted=weighted, _unit_eq=unit_eq)
        return self

    @property
    def weighted(self) -> bool:
        """Whether any entry carries a weight other than 1."""
        return self._weighted

    @property
    def unit_eq(self) -> bool:
        """Whether every equality entry has weight 1."""
        return self._unit_eq

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
    for: for a level that needs the QP backend or for a message), so a stack is a sequence of levels like any other.

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

    @property
    def layout(self):
        """Per level, ``(eq, ineq)`` lists of ``(first row, end row, weight)`` of its entries (None for a
        stack made by :meth:`from_levels`, which keeps its levels)."""
        return self._layout

    def with_rows(self, A: np.ndarray, C: np.ndarray) -> LevelStack:
        """The same stack over the rows ``A`` and ``C`` (e.g. C-ordered copies of its own); the same levels."""
        other = object.__new__(LevelStack)
        for name in self.__slots__:
            setattr(other, name, getattr(self, name))
        other.A, other.C, other._levels = A, C, list(self._levels)
        return other

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
