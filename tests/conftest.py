"""Shared test set-up.

The project is not installed in the test environment, so make the repository
root importable when ``import models`` would otherwise fail.
"""

from __future__ import annotations

import sys
from pathlib import Path

try:  # pragma: no cover - depends on how pytest was started
    import models  # noqa: F401
except ImportError:  # pragma: no cover
    sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
