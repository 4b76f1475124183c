"""Small scenario files written by tests (shared by the run tests)."""

from __future__ import annotations

from pathlib import Path

_FIELDS = {
    "name": '"short"',
    "subject": '"m50"',
    "intent": "JointIntent(start_rad=deg(15, 10, 0, 80, 0, 0, 0), start_hold_s=0.05,"
              " vias=(Via(deg(40, 10, 0, 60, 10, 0, 0), move_s=0.5),))",
    "duration_s": "0.2",
    "controllers": '("gravity", "zero")',
}


def write_scenario(path: Path, **fields: str | None) -> Path:
    """A small scenario file; each keyword overrides a field's source text (None leaves it out)."""
    items = {**_FIELDS, **fields}
    body = "".join(f"    {k}={v},\n" for k, v in items.items() if v is not None)
    path.write_text(
        "import math\n\nfrom sim.physics.intent import JointIntent, Via\nfrom sim.loop.scenario import Scenario\n\n\n"
        "def deg(*a):\n    return tuple(math.radians(x) for x in a)\n\n\n"
        f"SCENARIO = Scenario(\n{body})\n",
        encoding="utf-8",
    )
    return path
