"""The package layering of DEVELOPERS.md: imports flow only toward ``models``.

``models`` imports nothing else from the project; ``controllers`` never imports
``sim`` or ``scenarios`` (a controller must run on hardware unchanged).
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
