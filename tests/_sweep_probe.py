"""A ``run_case`` that notes which process ran each case (importable by the sweep's spawned workers)."""

from __future__ import annotations

import os
from pathlib import Path

from sim.experiments import sweep

_run_case = sweep.run_case  # the library's, kept before a test puts this module's in its place


def _pid_file(case) -> Path:
    folder = Path(case.folder)
    return folder.parent / f"{folder.name}.pid"


def run_case_noting_pid(case, batch=None):
    Path(case.folder).parent.mkdir(parents=True, exist_ok=True)
    _pid_file(case).write_text(str(os.getpid()))
    return _run_case(case, batch)


def pid_of(case) -> int:
    return int(_pid_file(case).read_text())


def run_case_exiting_in_a_worker(case, batch=None):
    """Stop the process at once (as a crash in compiled code would) when run by a sweep's worker."""
    import multiprocessing

    if multiprocessing.parent_process() is not None:
        os._exit(3)
    return _run_case(case, batch)


def run_case_noting_registries(case, batch=None):
    """Note, beside the case's folder, the pid and whether the process's batch knows the marker baseline
    (``MARKER_KEY``, ``MARKER_PATH``)."""
    import json

    folder = Path(case.folder)
    folder.parent.mkdir(parents=True, exist_ok=True)
    seen = {"pid": os.getpid(), "key": batch is not None and batch.baseline_for(MARKER_KEY) is not None,
            "made": batch is not None and batch.made(MARKER_PATH)}
    (folder.parent / f"{folder.name}.registries.json").write_text(json.dumps(seen))
    return _run_case(case, batch)


def registries_of(case) -> dict:
    import json

    folder = Path(case.folder)
    return json.loads((folder.parent / f"{folder.name}.registries.json").read_text())


MARKER_KEY = ("a scenario run before this sweep", "m50", 0, None)
MARKER_PATH = Path("/a-baseline-made-before-this-sweep")
