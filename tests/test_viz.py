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
    # one cuff visual per cuff: the URDF's cuff shells (one per cuff in the shipped robot) are drawn hidden
    assert len(scene.hidden) == len(meta["cuffs"]) and all(h.startswith("exo/") for h in scene.hidden)
    # the baseline's hand path, and the context of the wearer's size
    assert f"{root}/ghost_trail" in paths
    for name in ("trunk", "head", "seat", "backrest", "floor", "grid_minor", "grid_major", "mount_column"):
        assert f"{root}/body/{name}" in paths, name


def test_seated_body_follows_the_wearer():
    """Drawn proportions against their sources: Drillis & Contini (1966) as drawn in Winter (2009), Fig. 4.1
    (shoulder at 0.818 H, top of the head at H: the head's top 0.182 H above the shoulder, from memory) and
    ANSUR II (sitting acromial height 0.346 H, from memory)."""
    from models.human import SUBJECTS

    for name in ("f5", "m95"):
        H = SUBJECTS[name].stature_m
        body = viz.SeatedBody(H, 0.086 * H * np.cos(np.radians(20.0)))
        shapes = {n: (kind, size, pose) for n, kind, size, pose, _ in body.shapes()}
        _, size, pose = shapes["head"]
        assert pose[2, 3] + size[2] == pytest.approx((1.0 - 0.818) * H)  # top of the head
        assert body.seat_z_m == pytest.approx(-0.346 * H)
        _, size, pose = shapes["seat"]
        assert pose[2, 3] + size[2] / 2 == pytest.approx(body.seat_z_m)  # the seat's top carries the wearer
        _, size, pose = shapes["trunk"]
        assert pose[1, 3] == pytest.approx(body.midline_y_m) and size[1] < body.shoulder_half_breadth_m
        assert pose[2, 3] - size[0] / 2 == pytest.approx(body.seat_z_m)  # the trunk sits on the seat
        assert body.floor_z_m < body.seat_z_m - 0.2 * H
    left = viz.SeatedBody(1.75, 0.14, side="left")
    assert left.midline_y_m == pytest.approx(-0.14)
    with pytest.raises(ValueError, match="stature_m"):
        viz.SeatedBody(0.3, 0.14)


def test_seated_body_from_meta(run_dir):
    meta = load_run(run_dir).meta
    body = viz.seated_body(meta)
    from models.human import HumanParams

    hp = HumanParams("m50")  # the reach scenario's wearer
    assert body.stature_m == pytest.approx(hp.subject.stature_m) and body.side == "right"
    assert body.shoulder_half_breadth_m == pytest.approx(abs(hp.clavicle_vector_m()[1]))
    assert viz.seated_body({"parameters": {}}) is None


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
    # the arrow starts in the human cuff frame's cross-section of the limb, on the cuff's outer surface, on the
    # side the force points to (so that the arrow stays outside the limb)
    import pinocchio as pin

    q_h = run.arrays["q_human"][0]
    pts = models.human_points(q_h)
    p = pin.updateFramePlacement(models.human_model, models.human_data, models.cuff_human_frames[0]).translation
    seg = scene.cuff_segments(q_h)[0]
    assert seg == 0  # the upper-arm cuff sits on the first segment
    axis = (pts[1] - pts[0]) / np.linalg.norm(pts[1] - pts[0])
    off = T[node][:3, 3] - p
    assert off @ axis == pytest.approx(0.0, abs=1e-12)
    assert np.linalg.norm(off) == pytest.approx(models.segment_radii[0] + viz.CUFF_BAND_M)
    f_perp = f[0] - (f[0] @ axis) * axis
    np.testing.assert_allclose(off / np.linalg.norm(off), f_perp / np.linalg.norm(f_perp), atol=1e-12)


def test_arrow_base_stays_outside_the_limb():
    """The arrow's base is on the cuff's surface on the force's side; a force along the limb is moved beside it."""
    p, axis, r = np.array([0.1, 0.2, 0.3]), np.array([0.0, 0.0, 2.0]), 0.05
    base = viz.arrow_base(p, [3.0, 4.0, 10.0], axis, r)  # perpendicular part (3, 4, 0)
    np.testing.assert_allclose(base, p + r * np.array([0.6, 0.8, 0.0]))
    # every point of the arrow base + s F (s >= 0) stays at least r from the limb's axis
    for s in np.linspace(0.0, 0.05, 11):
        q = base + s * np.array([3.0, 4.0, 10.0]) - p
        assert np.linalg.norm(q[:2]) >= r - 1e-12
    along = viz.arrow_base(p, [0.0, 0.0, -5.0], axis, r, toward=[0.0, 1.0, 1.0])
    np.testing.assert_allclose(along, p + [0.0, r, 0.0])


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
    # our title and the caption with its data, driven by the viewer's animation clock
    assert "<title>exosandbox replay: reach with the gravity controller</title>" in html
    assert "MeshCat</title>" not in html
    assert 'id="xs-scenario">reach<' in html and 'id="xs-controller">gravity<' in html
    assert "1 cm per N" in html and "10 cm squares" in html and "animator" in html


def test_captions_follow_the_animation_frames(run_dir):
    run = load_run(run_dir)
    cap = viz.replay_captions(run_dir, fps=30)
    duration = len(run.arrays["t"]) * run.meta["dt_s"]
    assert len(cap["t_s"]) == len(cap["force_N"]) == round(duration * 30)
    assert cap["scenario"] == "reach" and cap["controller"] == "gravity" and cap["cuffs"] == run.meta["cuffs"]
    forces = cuff_columns(run)["cuff_force_human_world"]
    for k in (0, len(cap["t_s"]) // 2, len(cap["t_s"]) - 1):  # frame k shows the last tick at or before k / fps
        i = int(np.searchsorted(run.arrays["t"], run.arrays["t"][0] + k / 30 + 1e-9, side="right")) - 1
        assert cap["t_s"][k] == pytest.approx(run.arrays["t"][i], abs=1e-4)
        np.testing.assert_allclose(cap["force_N"][k], np.linalg.norm(forces[i], axis=-1), atol=0.051)
    with pytest.raises(ValueError, match="</body>"):
        viz.add_captions("<html></html>", cap)


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
