"""Tables of results as files: rows of runs, CSV and JSON, each written atomically (a temporary file, renamed).

Plain formats for any tool: CSV (RFC 4180, through :mod:`csv`) and JSON
(RFC 8259, no NaN or infinity).
"""

from __future__ import annotations

import csv
import json
from collections.abc import Sequence
from pathlib import Path

from sim.analysis.metrics import flat_metrics

__all__ = ["run_rows", "write_csv", "write_json", "write_text"]


def run_rows(results: Sequence) -> list[dict]:
    """One flat row per run: controller, subject, seed, status, error, folder (relative to the sweep's), then every
    scalar metric; in a sweep over several scenarios, the scenario first.

    ``results`` are :class:`sim.experiments.sweep.CaseResult` (or anything with their ``case``, ``ok``,
    ``error``, ``wall_time_s`` and ``metrics``).
    """
    rows = []
    for r in results:
        row = {"scenario": r.case.scenario} if r.case.scenario else {}
        row |= {"controller": r.case.controller, "subject": r.case.subject, "seed": r.case.seed,
                "status": "ok" if r.ok else "failed", "error": r.error or "", "folder": r.case.label,
                "wall_time_s": round(r.wall_time_s, 3)}
        if r.metrics is not None:
            row |= flat_metrics(r.metrics)
        rows.append(row)
    return rows


def write_csv(path: Path, rows: Sequence[dict]) -> None:
    """Write rows (dicts) as CSV with the union of their keys as header, in first-seen order; atomically."""
    keys = list(dict.fromkeys(k for row in rows for k in row))
    tmp = path.with_name(path.name + ".tmp")
    with tmp.open("w", newline="", encoding="utf-8") as f:
        w = csv.DictWriter(f, fieldnames=keys, restval="")
        w.writeheader()
        for row in rows:
            w.writerow({k: ("" if v is None else v) for k, v in row.items()})
    tmp.replace(path)


def write_json(path: Path, obj) -> None:
    """Write JSON atomically (:func:`write_text`)."""
    write_text(path, json.dumps(obj, indent=2, allow_nan=False) + "\n")


def write_text(path: Path, text: str) -> None:
    """Write UTF-8 text atomically: a temporary file, then a rename; a failed write (a full disk: ENOSPC,
    EDQUOT) leaves neither a temporary file nor a half-written ``path``."""
    tmp = path.with_name(path.name + ".tmp")
    try:
        tmp.write_text(text, encoding="utf-8")
        tmp.replace(path)
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise
