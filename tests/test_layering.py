"""The package layering of DEVELOPERS.md: imports flow only toward ``models``.

``models`` imports nothing else from the project; ``controllers`` never imports
``sim`` or ``scenarios`` (a controller must run on hardware unchanged).  Inside
``sim`` the layers go physics <- loop <- analysis <- output <- experiments <- cli:
each imports only its own layer and those to its left.
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
FORBIDDEN = {
    "models": {"sim", "controllers", "scenarios"},
    "controllers": {"sim", "scenarios"},
    "sim": {"scenarios"},
}


def _imported_top_levels(path: Path) -> set[str]:
    tree = ast.parse(path.read_text(encoding="utf-8"), filename=str(path))
    names = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            names |= {a.name.split(".")[0] for a in node.names}
        elif isinstance(node, ast.ImportFrom) and node.level == 0 and node.module:
            names.add(node.module.split(".")[0])
    return names


@pytest.mark.parametrize("package", sorted(FORBIDDEN))
def test_package_imports_only_toward_models(package):
    files = sorted((ROOT / package).rglob("*.py"))
    assert files, f"package {package} has no modules"
    for f in files:
        bad = _imported_top_levels(f) & FORBIDDEN[package]
        assert not bad, f"{f.relative_to(ROOT)} imports {sorted(bad)}"


# -- inside sim: physics <- loop <- analysis <- output <- experiments <- cli ----------------------------
#: The layers of ``sim``, lowest first: each may import those before it, never one after it.
SIM_LAYERS = ("physics", "loop", "analysis", "output", "experiments", "cli")
#: Top modules of ``sim`` in the top layer beside ``cli``: what a user asks the command line for.
SIM_TOP = {"catalog": "cli"}


def _sim_layer(module: str) -> int | None:
    """The rank of a ``sim`` module in :data:`SIM_LAYERS`; None for the package's own ``__init__`` (the
    user-facing API, above every layer) and for what is not in ``sim``."""
    parts = module.split(".")
    if parts[0] != "sim" or len(parts) < 2:
        return None
    layer = SIM_TOP.get(parts[1], parts[1])
    return SIM_LAYERS.index(layer) if layer in SIM_LAYERS else -1


def _sim_imports(path: Path, module: str) -> set[str]:
    """The ``sim`` modules (or packages) ``path`` imports, at any depth of the file (inside functions too)."""
    package = module if path.name == "__init__.py" else module.rpartition(".")[0]
    found = set()
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"), filename=str(path))):
        if isinstance(node, ast.Import):
            found |= {a.name for a in node.names if a.name.split(".")[0] == "sim"}
        elif isinstance(node, ast.ImportFrom):
            base = node.module or ""
            if node.level:
                parts = package.split(".")
                base = ".".join(parts[: len(parts) - (node.level - 1)] + ([base] if base else []))
            if base.split(".")[0] == "sim":
                # "from sim.output import plots" imports sim.output.plots: the layer is the second part either way
                found |= ({base} if base.count(".") >= 1
                          else {f"sim.{a.name}" if a.name in SIM_LAYERS else "sim" for a in node.names})
    return found


def _sim_modules() -> list[tuple[str, Path]]:
    out = []
    for f in sorted((ROOT / "sim").rglob("*.py")):
        parts = f.relative_to(ROOT).with_suffix("").parts
        out.append((".".join(parts[:-1] if parts[-1] == "__init__" else parts), f))
    return out


def test_every_sim_module_is_in_a_layer():
    stray = [m for m, _ in _sim_modules() if _sim_layer(m) == -1]
    assert not stray, f"sim modules outside the layers {SIM_LAYERS}: {stray}"


@pytest.mark.parametrize("module,path", _sim_modules(), ids=[m for m, _ in _sim_modules()])
def test_sim_imports_only_its_own_or_lower_layers(module, path):
    rank = _sim_layer(module)
    if rank is None:  # sim/__init__.py: the API re-exports from every layer
        assert module == "sim"
        return
    for target in _sim_imports(path, module):
        other = _sim_layer(target)
        assert other is not None, f"{module} imports the package API {target!r}: import the module that defines it"
        assert other >= 0, f"{module} imports {target}, outside the layers {SIM_LAYERS}"
        assert other <= rank, (f"{module} (layer {SIM_LAYERS[rank]}) imports {target} (layer {SIM_LAYERS[other]}): "
                               f"the layers go {' <- '.join(SIM_LAYERS)}")


def test_the_layer_check_sees_an_upward_import(tmp_path):
    # a loop module importing an experiment is refused, also from inside a function
    path = tmp_path / "probe.py"
    path.write_text("def f():\n    from sim.experiments.run import run_scenario\n", encoding="utf-8")
    targets = _sim_imports(path, "sim.loop.probe")
    assert targets == {"sim.experiments.run"}
    assert _sim_layer("sim.experiments.run") > _sim_layer("sim.loop.probe")
    # and the package's API from inside the package (it imports every layer)
    path.write_text("from sim import Simulation\nfrom sim import physics\n", encoding="utf-8")
    assert _sim_imports(path, "sim.loop.probe") == {"sim", "sim.physics"} and _sim_layer("sim") is None
