"""The offline HTML replay renders and plays in a real (headless) Chromium.

The replay is written by :func:`sim.output.viz.write_replay_html`, whose animation is
stored with meshcat's ``play`` option, so the page starts playing on load.  Two
screenshots are taken at different virtual times, each with the page's DOM at that
moment (``--dump-dom``); each must show the robot's steel blue and the arm's skin
tone, and they must differ where the arm moves.  The camera must frame the arm: its
skin-coloured pixels cover at least :data:`ARM_SHARE_MIN` of each picture (the robot's
links and cuffs cover part of the arm), and over the two pictures they spread over at
least :data:`ARM_SPAN_MIN` of the picture's width or height.  The caption must name the
scenario and the controller, and its simulated time must differ between the two
moments.  Skipped, with the reason, when no Chromium is installed.
"""

from __future__ import annotations

import dataclasses
import os
import re
import shutil
import signal
import struct
import subprocess
import zlib
from pathlib import Path

import numpy as np
import pytest

pytest.importorskip("meshcat")

import sim.output.viz as viz  # noqa: E402
from sim.experiments.run import run_scenario  # noqa: E402
from sim.loop.scenario import load_scenario  # noqa: E402

REPO = Path(__file__).resolve().parents[1]
STEEL_BLUE = np.array([0.22, 0.40, 0.64]) * 255  # exo frame colour in the URDF
SKIN = np.array(viz.SKIN) * 255
#: Smallest share of a 1024 x 768 picture covered by the wearer's arm (2.7 % measured for this run).
ARM_SHARE_MIN = 0.015
#: Smallest spread of the arm's pixels over the two pictures, as a share of the picture's width or height
#: (2nd to 98th percentile of their columns or rows; 0.57 of the width and 0.55 of the height measured).
ARM_SPAN_MIN = 0.35


def _chromium() -> str:
    for name in ("chromium", "chromium-browser"):
        path = shutil.which(name)
        if path:
            return path
    pytest.skip("no Chromium on PATH (install it with `apt-get install chromium`); the browser replay test needs it")


def read_png(path: Path) -> np.ndarray:
    """Decode an 8-bit RGB/RGBA, non-interlaced PNG into an (h, w, 3) uint8 array."""
    data = path.read_bytes()
    assert data[:8] == b"\x89PNG\r\n\x1a\n", "not a PNG file"
    pos, idat, header = 8, [], None
    while pos < len(data):
        (length,), kind = struct.unpack(">I", data[pos:pos + 4]), data[pos + 4:pos + 8]
        body = data[pos + 8:pos + 8 + length]
        pos += 12 + length
        if kind == b"IHDR":
            header = struct.unpack(">IIBBBBB", body)
        elif kind == b"IDAT":
            idat.append(body)
        elif kind == b"IEND":
            break
    w, h, depth, colour, _, _, interlace = header
    assert depth == 8 and colour in (2, 6) and interlace == 0, header
    bpp = 3 if colour == 2 else 4
    raw = np.frombuffer(zlib.decompress(b"".join(idat)), dtype=np.uint8).reshape(h, 1 + w * bpp)
    out = np.zeros((h, w * bpp), dtype=np.int32)
    prev = np.zeros(w * bpp, dtype=np.int32)
    for y in range(h):
        ftype, line = raw[y, 0], raw[y, 1:].astype(np.int32)
        if ftype == 0:
            cur = line
        elif ftype == 2:
            cur = (line + prev) & 0xFF
        else:  # Sub, Average, Paeth depend on the left neighbour: decode byte by byte
            cur = np.zeros_like(line)
            for x in range(w * bpp):
                a = cur[x - bpp] if x >= bpp else 0
                b = prev[x]
                if ftype == 1:
                    pred = a
                elif ftype == 3:
                    pred = (a + b) >> 1
                else:
                    c = prev[x - bpp] if x >= bpp else 0
                    p = a + b - c
                    pa, pb, pc = abs(p - a), abs(p - b), abs(p - c)
                    pred = a if pa <= pb and pa <= pc else (b if pb <= pc else c)
                cur[x] = (line[x] + pred) & 0xFF
        out[y] = cur
        prev = cur
    return out.reshape(h, w, bpp)[:, :, :3].astype(np.uint8)


def colour_mask(img: np.ndarray, rgb: np.ndarray, tol: float = 28.0) -> np.ndarray:
    """Pixels that are a shade (brightness 0.45..1.5) of ``rgb`` within ``tol`` (0..255 units)."""
    p = img.reshape(-1, 3).astype(float)
    s = np.clip(p @ rgb / (rgb @ rgb), 0.45, 1.5)
    d = np.linalg.norm(p - s[:, None] * rgb[None, :], axis=1)
    return (d < tol).reshape(img.shape[:2])


@pytest.fixture(scope="module")
def html(tmp_path_factory):
    scenario = dataclasses.replace(load_scenario(str(REPO / "scenarios" / "reach.py")), duration_s=2.0)
    tmp = tmp_path_factory.mktemp("browser")
    run_scenario(scenario, "gravity", tmp / "run")
    return viz.write_replay_html(tmp / "run", tmp / "replay.html")


def _render(chromium: str, html: Path, png: Path, budget_ms: int, profile: Path) -> tuple[np.ndarray, str]:
    """One headless screenshot and the DOM at the same moment; a browser that hangs is killed and retried."""
    errors = []
    for attempt in range(3):
        png.unlink(missing_ok=True)
        cmd = [chromium, "--headless", "--no-sandbox", "--disable-gpu", "--enable-unsafe-swiftshader",
               "--disable-background-networking", "--disable-component-update", "--disable-sync", "--no-first-run",
               f"--user-data-dir={profile}-{attempt}", "--window-size=1024,768", f"--screenshot={png}",
               "--dump-dom", f"--virtual-time-budget={budget_ms}", html.resolve().as_uri()]
        proc = subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.PIPE, start_new_session=True)
        try:
            out, err = proc.communicate(timeout=90)
        except subprocess.TimeoutExpired:
            os.killpg(proc.pid, signal.SIGKILL)  # the browser and every helper process it started
            out, err = proc.communicate()
        if png.is_file():
            try:
                return read_png(png), out.decode(errors="replace")
            except Exception as e:  # a file cut short by the kill: take another shot
                errors.append(f"attempt {attempt}: unreadable screenshot ({e})")
                continue
        errors.append(f"attempt {attempt}: exit {proc.returncode}: {err.decode(errors='replace')[-300:]}")
    raise AssertionError("no screenshot after 3 attempts: " + " | ".join(errors))


def _screenshot(chromium: str, html: Path, png: Path, budget_ms: int, profile: Path) -> np.ndarray:
    """One headless screenshot (see :func:`_render`)."""
    return _render(chromium, html, png, budget_ms, profile)[0]


def _caption_time_s(dom: str) -> float:
    """The simulated time shown by the replay's caption [s]."""
    m = re.search(r'id="xs-time">\s*([0-9.]+) s<', dom)
    assert m, "no simulated time in the page's caption"
    return float(m.group(1))


def test_html_replay_renders_and_plays(html, tmp_path):
    chromium = _chromium()
    early, dom_early = _render(chromium, html, tmp_path / "early.png", 400, tmp_path / "profile_early")
    late, dom_late = _render(chromium, html, tmp_path / "late.png", 1800, tmp_path / "profile_late")
    assert early.shape == late.shape == (768, 1024, 3)
    for img in (early, late):
        robot, skin = colour_mask(img, STEEL_BLUE), colour_mask(img, SKIN)
        assert robot.sum() > 300, f"robot colour on only {robot.sum()} pixels"
        assert skin.sum() > 300, f"skin colour on only {skin.sum()} pixels"
        assert len(np.unique(img.reshape(-1, 3), axis=0)) > 50  # not a blank page
    # the two frames differ where the robot and arm are
    where = colour_mask(early, STEEL_BLUE) | colour_mask(early, SKIN) | colour_mask(late, STEEL_BLUE) \
        | colour_mask(late, SKIN)
    ys, xs = np.nonzero(where)
    box = (slice(ys.min(), ys.max() + 1), slice(xs.min(), xs.max() + 1))
    changed = np.abs(early[box].astype(int) - late[box].astype(int)).sum(axis=2) > 40
    assert changed.sum() > 1000, f"only {changed.sum()} pixels changed between the two screenshots"
    # the camera frames the arm: it covers a share of each picture and spreads over a good part of it
    h, w = early.shape[:2]
    arms = [colour_mask(img, SKIN) for img in (early, late)]
    for arm in arms:
        assert arm.mean() >= ARM_SHARE_MIN, f"the arm covers only {arm.mean():.1%} of the picture"
    ys, xs = np.nonzero(arms[0] | arms[1])
    span_x = (np.percentile(xs, 98) - np.percentile(xs, 2)) / w
    span_y = (np.percentile(ys, 98) - np.percentile(ys, 2)) / h
    assert max(span_x, span_y) >= ARM_SPAN_MIN, f"the arm spans only {span_x:.0%} x {span_y:.0%} of the picture"
    # the page's own title and caption: scenario, controller, and a simulated time that advances with the replay
    for dom in (dom_early, dom_late):
        assert "<title>exosandbox replay: reach with the gravity controller</title>" in dom
        assert re.search(r'id="xs-scenario">reach<', dom) and re.search(r'id="xs-controller">gravity<', dom)
        assert "1 cm per N" in dom
    # (headless Chromium's virtual time does not map one to one onto the replay's clock, which starts when the
    # scene has loaded and rests at 0 s once the replay is over: the two times differ, in no fixed order)
    t_early, t_late = _caption_time_s(dom_early), _caption_time_s(dom_late)
    assert t_early != t_late, f"the caption shows {t_early} s at both moments"
    assert 0.0 <= min(t_early, t_late) and max(t_early, t_late) <= 2.0
