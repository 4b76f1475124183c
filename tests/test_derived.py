"""Cuff columns derived from the log (sim.analysis.derived): against the plant's own values and against pinocchio.

References: the plant's wrench on the robot and world force on the human
(sim.physics.plant.CoupledPlant, recorded while the run goes); world placements from
``pinocchio.forwardKinematics`` (general-purpose rigid-body library); the
metrics of a run folder that stores the plant's columns, as runs before log
format 2 did.
"""

from __future__ import annotations

import dataclasses
import importlib
import json
import shutil
from pathlib import Path

import numpy as np
import pinocchio as pin
import pytest

from sim.analysis.derived import DERIVED_CUFF_COLUMNS, _joint_placements_loop, cuff_columns, joint_placements
from sim.experiments.run import evaluate_run, run_scenario
from sim.loop.runlog import Run, RunLog, RunLogError, load_run
from sim.loop.scenario import load_scenario
from sim.physics.plant import CoupledPlant

SCENARIOS = Path(__file__).resolve().parents[1] / "scenarios"


class _RecordingPlant(CoupledPlant):
    """The plant, recording its cuff values at every fresh cuff update, keyed by the state."""

    records: dict[bytes, tuple[np.ndarray, np.ndarray]] = {}

    def update_cuffs(self) -> None:
        fresh = self._cuffs_fresh
        super().update_cuffs()
        if not fresh and self.cuffs:
            key = self.q_exo.tobytes() + self.q_human.tobytes()
            self.records[key] = (self.wrench_on_exo.copy(), self.force_on_human_world.copy())


def _wall(sc) -> dict:
    spec = dict(sc.walls[0][1])
    law = spec["law"]
    stiffness = law.stiffness_N_per_m if hasattr(law, "stiffness_N_per_m") else float(law[0])
    return {"point_m": spec["point_m"], "normal": spec["normal"], "sensor": spec.get("sensor", "hand"),
            "stiffness_N_per_m": stiffness, "rendered": True}


@pytest.fixture(scope="module")
def wall_run(tmp_path_factory):
    """A 1.5 s wall_push run under ``walls`` and, per logged tick, the plant's own cuff values."""
    root = tmp_path_factory.mktemp("derived")
    sc = dataclasses.replace(load_scenario(SCENARIOS / "wall_push.py"), duration_s=1.5)
    _RecordingPlant.records = {}
    mp = pytest.MonkeyPatch()
    mp.setattr(importlib.import_module("sim.loop.simulation"), "CoupledPlant", _RecordingPlant)
    try:
        run_scenario(sc, "walls", root / "run", report=False)
    finally:
        mp.undo()
    run = load_run(root / "run")
    keys = [run["q_exo"][k].tobytes() + run["q_human"][k].tobytes() for k in range(run.ticks)]
    plant = {name: np.array([_RecordingPlant.records[key][i] for key in keys])
             for i, name in enumerate(DERIVED_CUFF_COLUMNS)}
    return sc, root / "run", run, plant


def test_log_stores_neither_derived_column_but_the_strap_offsets(wall_run):
    _, _, run, _ = wall_run
    assert not set(DERIVED_CUFF_COLUMNS) & set(run.arrays)
    offsets = run.meta["models"]["cuff_human_offsets"]
    assert sorted(offsets) == sorted(run.meta["cuffs"]) and np.shape(offsets["hand"]) == (4, 4)


@pytest.mark.parametrize("block_ticks", [4096, 97], ids=["one-block", "many-blocks"])
def test_recomputed_columns_equal_the_plants_values(wall_run, monkeypatch, block_ticks):
    _, _, run, plant = wall_run
    monkeypatch.setattr(importlib.import_module("sim.analysis.derived"), "_BLOCK_TICKS", block_ticks)
    derived = cuff_columns(dataclasses.replace(run))  # a Run of its own: computed here, not kept from another test
    for name in DERIVED_CUFF_COLUMNS:
        expected = plant[name]
        assert derived[name].shape == expected.shape == (run.ticks, len(run.meta["cuffs"]), expected.shape[-1])
        scale = np.max(np.abs(expected))
        assert scale > 1.0  # the cuffs really carry load
        assert np.max(np.abs(derived[name] - expected)) <= 1e-12 * scale, name


def _storing_the_plants_columns(src: Path, dst: Path, plant: dict[str, np.ndarray]) -> None:
    """A copy of the run folder whose log stores the plant's two columns too, as runs before log format 2 did."""
    run = load_run(src)
    arrays = run.arrays | plant
    reserved = {"format_version", "status", "reason", "columns", "chunk_ticks", "ticks", "chunks"}
    meta = {k: v for k, v in run.meta.items() if k not in reserved}
    meta["models"] = {k: v for k, v in meta["models"].items() if k != "cuff_human_offsets"}
    columns = {name: (a.shape[1:], a.dtype) for name, a in arrays.items()}
    with RunLog(dst, columns, chunk_ticks=run.meta["chunk_ticks"], metadata=meta) as log:
        for k in range(run.ticks):
            log.append_row([a[k] for a in arrays.values()])
    # the rest of the folder as it is: models, baseline run, metrics
    shutil.copytree(src, dst, dirs_exist_ok=True,
                    ignore=lambda d, names: [n for n in names if Path(d) == src and n in ("log", "meta.json")])


def test_metrics_equal_those_of_a_folder_storing_the_plants_columns(wall_run, tmp_path):
    sc, folder, run, plant = wall_run
    _storing_the_plants_columns(folder, tmp_path / "old", plant)
    old = load_run(tmp_path / "old")
    assert set(DERIVED_CUFF_COLUMNS) <= set(old.arrays) and "cuff_human_offsets" not in old.meta["models"]
    stored = cuff_columns(old)  # an older folder: its stored columns are used as they are
    assert all(stored[name] is old.arrays[name] for name in DERIVED_CUFF_COLUMNS)
    kwargs = {"wall": _wall(sc), "force_limits_N": sc.force_limits_N}
    new_m, old_m = evaluate_run(folder, **kwargs), evaluate_run(tmp_path / "old", **kwargs)
    assert new_m.keys() == old_m.keys()
    assert old_m["wall_stiffness_rendered_N_per_m"] is not None  # the hand reached the wall

    def close(a, b, key):
        if isinstance(a, dict):
            assert a.keys() == b.keys(), key
            for k in a:
                close(a[k], b[k], f"{key}.{k}")
        elif isinstance(a, list):
            assert len(a) == len(b), key
            for i, (x, y) in enumerate(zip(a, b)):
                close(x, y, f"{key}[{i}]")
        elif isinstance(a, float) and isinstance(b, float):
            assert b == pytest.approx(a, rel=1e-9, abs=1e-12), key
        else:
            assert a == b, key

    # the robot's work on the wearer needs the human cuff frames' twists, hence the strap offsets the older
    # folder lacks: those two keys are null there, every other one equal
    for key in ("assistance_work_J", "assistance_share"):
        assert old_m[key] is None and new_m[key] is not None, key
        old_m[key] = new_m[key]
    close(old_m, new_m, "metrics")


def test_vectorised_forward_kinematics_matches_pinocchio(wall_run):
    # pinocchio.forwardKinematics is the reference; random postures well beyond the joint limits
    _, folder, _, _ = wall_run
    rng = np.random.default_rng(11)
    for urdf in ("exo.urdf", "human.urdf"):
        model = pin.buildModelFromXML((folder / urdf).read_text(encoding="utf-8"))
        q = rng.uniform(-3.0, 3.0, size=(50, model.nq))
        joints = list(range(1, model.njoints))
        R, p = joint_placements(model, q, joints)
        R_ref, p_ref = _joint_placements_loop(model, q, joints)
        data = model.createData()
        pin.forwardKinematics(model, data, q[7])
        assert np.array_equal(R_ref[7, -1], data.oMi[joints[-1]].rotation)
        np.testing.assert_allclose(R, R_ref, rtol=0, atol=1e-13)
        np.testing.assert_allclose(p, p_ref, rtol=0, atol=1e-13)


def test_derived_columns_are_computed_once_per_run_and_kept_read_only(wall_run):
    # mechanism check: the metrics and the report of a run read it once and share its derived columns
    _, folder, _, _ = wall_run
    run = load_run(folder)
    first = cuff_columns(run)
    again = cuff_columns(run)
    for name in DERIVED_CUFF_COLUMNS:
        assert again[name] is first[name] and not first[name].flags.writeable
        np.testing.assert_array_equal(cuff_columns(load_run(folder))[name], first[name])  # a new Run, equal values
    with pytest.raises(ValueError, match="read-only"):
        first["cuff_wrench_exo"][0, 0, 0] = 1.0


def test_runs_without_cuffs_have_no_derived_columns(wall_run):
    _, folder, _, _ = wall_run
    base = load_run(folder / "human_alone")
    assert cuff_columns(base) == {}


def test_missing_strap_offsets_or_folder_are_reported(wall_run, tmp_path):
    _, folder, run, _ = wall_run
    with pytest.raises(RunLogError, match="Run.folder is None"):
        cuff_columns(Run(arrays=run.arrays, meta=run.meta))
    meta = json.loads((folder / "meta.json").read_text(encoding="utf-8"))
    del meta["models"]["cuff_human_offsets"]
    with pytest.raises(RunLogError, match="no models.cuff_human_offsets"):
        cuff_columns(Run(arrays=run.arrays, meta=meta, folder=folder))
    meta = json.loads((folder / "meta.json").read_text(encoding="utf-8"))
    meta["models"]["cuff_human_offsets"]["hand"] = [[2.0, 0, 0, 0], [0, 1, 0, 0], [0, 0, 1, 0], [0, 0, 0, 1]]
    with pytest.raises(RunLogError, match="cuff_human_offsets\\['hand'\\].*not a rotation"):
        cuff_columns(Run(arrays=run.arrays, meta=meta, folder=folder))
    with pytest.raises(RunLogError, match="cannot read the model"):
        cuff_columns(Run(arrays=run.arrays, meta=run.meta, folder=tmp_path))


def test_metrics_name_where_to_get_a_missing_derived_column(wall_run):
    from sim.analysis.metrics import wall_normal_series

    _, _, run, _ = wall_run
    with pytest.raises(KeyError, match="cuff_force_human_world.*sim.analysis.derived.cuff_columns"):
        wall_normal_series(run.arrays, (0.5, 0.0, 0.0), (1.0, 0.0, 0.0), 2)
