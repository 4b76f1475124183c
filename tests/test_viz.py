"""The 3-D viewer: scene contents, animation, force arrows, throttling, HTML export, missing meshcat.

One short run and one loopback meshcat server are shared by the module; the
server is stopped (and checked to be gone) at the end.  No browser is needed.
"""

from __future__ import annotations

import base64
import dataclasses
import importlib
import re
import sys
from pathlib import Path

import numpy as np
import pytest

pytest.importorskip("meshcat")

import sim.output.viz as viz  # noqa: E402
from sim.analysis.derived import cuff_columns  # noqa: E402
from sim.experiments.run import run_scenario  # noqa: E402
from sim.loop.runlog import load_run  # noqa: E402
from sim.loop.scenario import load_scenario  # noqa: E402

REPO = Path(__file__).resolve().parents[1]
DURATION_S = 0.5


@pytest.fixture(scope="module")
def run_dir(tmp_path_factory):
    scenario = dataclasses.replace(load_scenario(str(REPO / "scenarios" / "reach.py")), duration_s=DURATION_S)
    out = tmp_path_factory.mktemp("viz_run") / "run"
    run_scenario(scenario, "gravity", out)
    return out


@pytest.fixture(scope="module")
def wall_run_dir(tmp_path_factory):
    scenario = dataclasses.replace(load_scenario(str(REPO / "scenarios" / "wall_push.py")), duration_s=0.2)
    out = tmp_path_factory.mktemp("viz_wall") / "run"
    run_scenario(scenario, "gravity", out)
    return out


@pytest.fixture(scope="module")
def vis():
    v = viz.open_visualizer()
    proc = v.window.server_proc
    yield v
    viz.close_visualizer(v)
    assert proc.poll() is not None, "the meshcat server subprocess is still running"


def _html_commands(html: str) -> bytes:
    """All msgpack command payloads embedded in a static meshcat page, concatenated."""
    blobs = re.findall(r"data:application/octet-binary;base64,([A-Za-z0-9+/=]+)", html)
    return b"".join(base64.b64decode(b) for b in blobs)


def test_scene_has_expected_objects(run_dir, vis):
    scene = viz.draw_replay(vis, run_dir, fps=30, ghost=True)
    meta = load_run(run_dir).meta
    paths = scene.paths
    root = f"/meshcat/{viz.ROOT}"
    exo_shapes = {p for p in paths if p.startswith(f"{root}/exo/") and p.endswith("/shape")}
    assert len(exo_shapes) == len(scene.models.exo_geom.geometryObjects) > 5
    n_seg = len(scene.models.chain_joints)
    assert n_seg == 3  # shoulder -> elbow -> wrist -> hand point
    for prefix in ("human", "ghost"):
        for i in range(n_seg):
            assert f"{root}/{prefix}/seg_{i}/shape" in paths
        for k in range(n_seg + 1):
            assert f"{root}/{prefix}/joint_{k}/shape" in paths
    for cuff in meta["cuffs"]:
        assert f"{root}/cuffs/{cuff}/ring" in paths
        assert f"{root}/forces/{cuff}/shaft/shape" in paths
        assert f"{root}/forces/{cuff}/head/shape" in paths
    assert f"{root}/trail" in paths
    assert {"/Cameras/default", "/Cameras/default/rotated/<object>"} <= paths


def test_walls_are_drawn(wall_run_dir, vis):
    scene = viz.draw_replay(vis, wall_run_dir, fps=30, ghost=False)
    assert f"/meshcat/{viz.ROOT}/walls/0" in scene.paths
    assert not any("/ghost/" in p for p in scene.paths)


@pytest.mark.parametrize("fps", [30, 24])
def test_animation_frame_count(run_dir, vis, fps):
    scene = viz.draw_replay(vis, run_dir, fps=fps, ghost=True)
    run = load_run(run_dir)
    duration = len(run.arrays["t"]) * run.meta["dt_s"]
    assert duration == pytest.approx(DURATION_S)
    expected = round(duration * fps)
    clips = scene.animation.clips
    assert clips, "no animated node"
    counts = {len(clip.tracks["position"].frames) for clip in clips.values() if "position" in clip.tracks}
    assert counts and all(abs(c - expected) <= 1 for c in counts)
    # the exo links, the arm and the ghost are all animated
    animated = {p.lower() for p in clips}
    assert any("/exo/" in p for p in animated) and any("/ghost/" in p for p in animated)


def test_arrow_length_rule():
    total, shaft, head = viz.arrow_lengths([6.0, 8.0, 0.0])  # 10 N -> 10 cm
    assert total == pytest.approx(0.10)
    assert shaft + head == pytest.approx(total) and head == pytest.approx(viz.FORCE_HEAD_M)
    total, shaft, head = viz.arrow_lengths([3.0, 4.0, 0.0])  # 5 N -> 5 cm, head 40 % of a short arrow
    assert (total, head) == pytest.approx((0.05, 0.02))
    assert viz.arrow_lengths([0.0, 0.0, 20.0])[0] == pytest.approx(0.20)  # 20 N -> 20 cm
    assert viz.arrow_lengths([0.0, -1000.0, 0.0])[0] == pytest.approx(viz.FORCE_ARROW_MAX_M)  # capped
    assert viz.arrow_lengths([0.0, 0.0, 0.0]) == (0.0, 0.0, 0.0)


def test_arrow_nodes_follow_the_force(run_dir):
    models = viz.SceneModels.from_run_dir(run_dir)
    scene = viz.Scene(models, centre=[0.0, 0.0, 0.0])
    run = load_run(run_dir)
    f = np.zeros((len(models.cuffs), 3))
    f[0] = [0.0, 0.0, -12.0]  # 12 N straight down -> 12 cm arrow pointing down
    T = scene.transforms(run.arrays["q_exo"][0], run.arrays["q_human"][0], f)
    s = scene.scales(f)
    node = scene.force_nodes[0]
    np.testing.assert_allclose(T[node][:3, 1], [0.0, 0.0, -1.0], atol=1e-12)  # arrow axis = local y
    shaft = s[f"{node}/shaft"][1]
    head = s[f"{node}/head"][1] * viz.FORCE_HEAD_M
    assert shaft + head == pytest.approx(0.12)
    assert T[f"{node}/head"][1, 3] == pytest.approx(shaft)  # the head sits at the shaft's end
    # the arrow starts at the human cuff frame
    import pinocchio as pin

    pin.forwardKinematics(models.human_model, models.human_data, run.arrays["q_human"][0])
    p = pin.updateFramePlacement(models.human_model, models.human_data, models.cuff_human_frames[0]).translation
    np.testing.assert_allclose(T[node][:3, 3], p)


def test_live_viewer_throttles_with_fake_clock(run_dir, vis):
    now = [0.0]
    live = viz.LiveViewer(run_dir, max_fps=10, vis=vis, clock=lambda: now[0])
    run = load_run(run_dir)
    q_e, q_h = run.arrays["q_exo"][0], run.arrays["q_human"][0]
    forces = cuff_columns(run)["cuff_force_human_world"][0]
    drawn = []
    for t in [0.0, 0.001, 0.05, 0.0999, 0.1, 0.15, 0.2, 0.2005, 0.35]:
        now[0] = t
        drawn.append(live.update(t, q_e, q_h, forces))
    assert drawn == [True, False, False, False, True, False, True, False, True]
    assert live.frames_drawn == 4
    assert live.url.startswith("http://127.0.0.1:")
    assert f"/meshcat/{viz.ROOT}/human/seg_0/shape" in live.scene.paths
    live.close()  # does not stop a server it did not start
    assert vis.window.server_proc.poll() is None


def test_background_live_viewer_draws_the_latest_state_off_the_calling_thread(run_dir, vis):
    now = [0.0]
    live = viz.LiveViewer(run_dir, max_fps=10, vis=vis, clock=lambda: now[0], background=True)
    run = load_run(run_dir)
    q_e, q_h = run.arrays["q_exo"][0], run.arrays["q_human"][0]
    forces = cuff_columns(run)["cuff_force_human_world"][0]
    assert live.update(0.0, q_e, q_h, forces) is True  # due: handed over to the drawer thread
    assert live.update(0.01, q_e, q_h, forces) is False  # throttled
    live.close()  # joins the drawer, which finishes the pending frame first
    assert live.frames_drawn == 1
    assert f"/meshcat/{viz.ROOT}/human/seg_0/shape" in live.scene.paths


def test_replay_returns_loopback_url(run_dir, vis):
    v, url = viz.replay(run_dir, vis=vis)
    assert v is vis
    assert url.startswith("http://127.0.0.1:")


def test_html_file_contains_the_scene(run_dir, vis, tmp_path):
    out = viz.write_replay_html(run_dir, tmp_path / "replay.html", vis=vis)
    assert out == tmp_path / "replay.html" and out.is_file()
    html = out.read_text(encoding="utf-8")
    assert "MeshCat.Viewer" in html and "http://" not in html.split("<script>")[0]
    cmds = _html_commands(html)
    for name in (b"set_animation", f"{viz.ROOT}/exo/".encode(), f"{viz.ROOT}/human/seg_0".encode(),
                 b"forces/hand", b"cuffs/forearm", b"trail", b"ghost/seg_1"):
        assert name in cmds, name


def test_write_html_with_own_server_stops_it(run_dir, tmp_path, monkeypatch):
    started = []
    real = viz.open_visualizer

    def spy(*args, **kwargs):
        v = real(*args, **kwargs)
        started.append(v.window.server_proc)
        return v

    monkeypatch.setattr(viz, "open_visualizer", spy)
    viz.write_replay_html(run_dir, tmp_path / "r.html", fps=10, ghost=False)
    assert len(started) == 1 and started[0].poll() is not None


@pytest.fixture
def viz_without_meshcat(monkeypatch):
    for name in ("meshcat", "meshcat.geometry", "meshcat.animation"):
        monkeypatch.setitem(sys.modules, name, None)
    mod = importlib.reload(viz)
    yield mod
    monkeypatch.undo()
    importlib.reload(viz)


def test_import_without_meshcat(viz_without_meshcat, run_dir):
    mod = viz_without_meshcat
    assert mod.meshcat is None
    assert mod.arrow_lengths([10.0, 0.0, 0.0])[0] == pytest.approx(0.10)  # pure helpers still work
    with pytest.raises(ImportError, match=r"pip install meshcat"):
        mod.LiveViewer(run_dir)
    with pytest.raises(ImportError, match=r"meshcat"):
        mod.replay(run_dir)
