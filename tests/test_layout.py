"""The module layout of ``models``, ``controllers`` and ``sim``: every module imports, no import cycle, no private
name imported across modules.

The import graph is read from the source (every ``import`` and ``from ... import`` statement, those inside
functions too), so that an import hidden in a function cannot hold a cycle together.  Cycles are the strongly
connected components of that graph (Tarjan, "Depth-first search and linear graph algorithms", SIAM J. Comput.
1(2), 1972); scipy's ``connected_components(connection="strong")`` gives the same components (checked below).
"""

from __future__ import annotations

import ast
import importlib
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
PACKAGES = ("models", "controllers", "sim")


def _module_files() -> dict[str, Path]:
    """Dotted module name -> file, for every ``.py`` file of the packages (a package by its ``__init__``)."""
    mods = {}
    for package in PACKAGES:
        for f in sorted((ROOT / package).rglob("*.py")):
            parts = f.relative_to(ROOT).with_suffix("").parts
            name = ".".join(parts[:-1] if parts[-1] == "__init__" else parts)
            mods[name] = f
    return mods


MODULES = _module_files()


def _imports(name: str, path: Path) -> list[tuple[str, tuple[str, ...]]]:
    """``(module imported from, names imported)`` of every import statement of a module, relative ones resolved;
    ``import a.b`` gives ``("a.b", ())``."""
    package = name if path.name == "__init__.py" else name.rpartition(".")[0]
    found = []
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"), filename=str(path))):
        if isinstance(node, ast.Import):
            found += [(a.name, ()) for a in node.names]
        elif isinstance(node, ast.ImportFrom):
            base = node.module or ""
            if node.level:
                parts = package.split(".")
                parts = parts[: len(parts) - (node.level - 1)]
                base = ".".join(parts + ([base] if base else []))
            found.append((base, tuple(a.name for a in node.names)))
    return found


def _graph() -> dict[str, set[str]]:
    """Module -> the project modules it imports (a submodule named in ``from package import submodule`` too)."""
    edges: dict[str, set[str]] = {m: set() for m in MODULES}
    for m, path in MODULES.items():
        for base, names in _imports(m, path):
            targets = [f"{base}.{n}" for n in names if f"{base}.{n}" in MODULES]
            if len(targets) < len(names) or not names:
                targets.append(base)
            for t in targets:
                while t and t not in MODULES:  # a name inside a module: the module
                    t = t.rpartition(".")[0]
                if t and t != m:
                    edges[m].add(t)
    return edges


def _strongly_connected_components(edges: dict[str, set[str]]) -> list[list[str]]:
    """Tarjan's algorithm (iterative)."""
    index: dict[str, int] = {}
    low: dict[str, int] = {}
    on_stack: set[str] = set()
    stack: list[str] = []
    components = []
    counter = 0
    for root in edges:
        if root in index:
            continue
        work = [(root, iter(sorted(edges[root])))]
        index[root] = low[root] = counter
        counter += 1
        stack.append(root)
        on_stack.add(root)
        while work:
            v, children = work[-1]
            w = next(children, None)
            if w is not None:
                if w not in index:
                    index[w] = low[w] = counter
                    counter += 1
                    stack.append(w)
                    on_stack.add(w)
                    work.append((w, iter(sorted(edges[w]))))
                elif w in on_stack:
                    low[v] = min(low[v], index[w])
                continue
            work.pop()
            if work:
                low[work[-1][0]] = min(low[work[-1][0]], low[v])
            if low[v] == index[v]:
                component = []
                while True:
                    w = stack.pop()
                    on_stack.discard(w)
                    component.append(w)
                    if w == v:
                        break
                components.append(sorted(component))
    return components


def _private_imports() -> list[tuple[str, str]]:
    """``(importing module, what)`` for every private name (``_name``, not ``__dunder__``) a project module
    imports from another module, and every import from a private module (``pkg._mod``) outside its package."""
    found = []
    for m, path in MODULES.items():
        for base, names in _imports(m, path):
            parts = base.split(".")
            if parts[0] not in PACKAGES:
                continue
            for k, part in enumerate(parts):
                if part.startswith("_") and not part.startswith("__"):
                    owner = ".".join(parts[:k])
                    if not m.startswith(owner + "."):
                        found.append((m, base))
                    break
            for n in names:
                if n.startswith("_") and not n.startswith("__") and base != m:
                    found.append((m, f"{base}.{n}"))
    return sorted(set(found))


# -- the tests ---------------------------------------------------------------------------------------
def test_the_module_list_is_complete():
    for package in PACKAGES:
        assert package in MODULES
    assert {"sim.loop.simulation", "sim.experiments.run", "sim.analysis.tables"} <= set(MODULES)


@pytest.mark.parametrize("module", sorted(MODULES))
def test_every_module_imports(module):
    assert importlib.import_module(module).__name__ == module


def test_no_import_cycle():
    edges = _graph()
    cycles = [c for c in _strongly_connected_components(edges) if len(c) > 1]
    assert not cycles, "import cycles: " + "; ".join(" <-> ".join(c) for c in cycles)


def test_the_cycle_finder_finds_a_cycle_and_agrees_with_scipy():
    # a known graph: a -> b -> c -> a is one component, d -> a and e alone are components of their own
    edges = {"a": {"b"}, "b": {"c"}, "c": {"a"}, "d": {"a"}, "e": set()}
    assert sorted(map(tuple, _strongly_connected_components(edges))) == [("a", "b", "c"), ("d",), ("e",)]
    # the project's graph: the same components as scipy.sparse.csgraph.connected_components(connection="strong")
    from scipy.sparse import csr_matrix
    from scipy.sparse.csgraph import connected_components

    real = _graph()
    names = sorted(real)
    at = {m: i for i, m in enumerate(names)}
    pairs = [(at[a], at[b]) for a, bs in real.items() for b in bs]
    matrix = csr_matrix(([1] * len(pairs), ([i for i, _ in pairs], [j for _, j in pairs])), shape=(len(names),) * 2)
    _, labels = connected_components(matrix, directed=True, connection="strong")
    theirs = {}
    for m, label in zip(names, labels):
        theirs.setdefault(label, []).append(m)
    assert {tuple(c) for c in _strongly_connected_components(real)} == {tuple(sorted(c)) for c in theirs.values()}


def test_the_graph_sees_imports_inside_functions(tmp_path):
    # the cycle this layout once had was held together by imports inside functions: they count
    source = "def f():\n    from sim.loop.simulation import Simulation\n    return Simulation\n"
    path = tmp_path / "probe.py"
    path.write_text(source, encoding="utf-8")
    assert ("sim.loop.simulation", ("Simulation",)) in _imports("sim.probe", path)


def test_no_private_name_imported_across_modules():
    found = _private_imports()
    assert not found, "private names imported across modules: " + "; ".join(f"{m} imports {w}" for m, w in found)


# -- no module-level mutable state in sim ----------------------------------------------------------------
_MUTABLE_CALLS = ("dict", "list", "set", "defaultdict", "OrderedDict", "deque", "array", "zeros", "empty")


def _module_level_mutables() -> list[tuple[str, str]]:
    """``(module, name)`` of every module-level name of the project bound to a new dict, list, set or array
    (``__all__`` aside): state a run could leave behind for the next one, or a forked worker inherit."""
    found = []
    for m, path in MODULES.items():
        for node in ast.parse(path.read_text(encoding="utf-8")).body:
            if not isinstance(node, (ast.Assign, ast.AnnAssign)) or node.value is None:
                continue
            v = node.value
            call = v.func.id if isinstance(v, ast.Call) and isinstance(v.func, ast.Name) else (
                v.func.attr if isinstance(v, ast.Call) and isinstance(v.func, ast.Attribute) else None)
            if isinstance(v, (ast.Dict, ast.List, ast.Set, ast.DictComp, ast.ListComp, ast.SetComp)) or (
                    call in _MUTABLE_CALLS):
                targets = node.targets if isinstance(node, ast.Assign) else [node.target]
                found += [(m, t.id) for t in targets if isinstance(t, ast.Name) and t.id != "__all__"]
    return found


def test_the_mutable_state_finder_finds_a_cache(tmp_path, monkeypatch):
    path = tmp_path / "probe.py"
    path.write_text("CACHE: dict = {}\nSEEN = set()\nLIMITS = MappingProxyType({'a': 1})\n__all__ = []\n",
                    encoding="utf-8")
    monkeypatch.setitem(MODULES, "sim.probe", path)
    assert [f for f in _module_level_mutables() if f[0] == "sim.probe"] == [("sim.probe", "CACHE"),
                                                                             ("sim.probe", "SEEN")]


def test_no_module_level_mutable_state():
    # read-only arrays (flags.writeable = False) are immutable too
    found = [f for f in _module_level_mutables() if not _read_only_array(*f)]
    assert not found, (f"module-level mutable state: {found}; make it immutable (a tuple, frozenset, "
                       "MappingProxyType) or keep it in an object its user makes")



def _read_only_array(module: str, name: str) -> bool:
    value = getattr(importlib.import_module(module), name)
    return hasattr(value, "flags") and (not value.flags.writeable or value.size == 0)  # an empty array holds nothing
