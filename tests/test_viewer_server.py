"""The browser viewer's server listens on 127.0.0.1 only and stops with the run or replay that started it.

Expected behaviour (README, "Commands"; ``sim.output.viewer_server``): the web page and the drawing socket
are bound to the loopback address, checked on the sockets the operating system reports as listening
(psutil's ``net_connections``, read from /proc/net/tcp and tcp6 on Linux); after ``exosandbox run --view``
or ``exosandbox replay`` ends (normally, on SIGINT, on SIGTERM) or its process is killed, nothing
listens on the viewer's port any more.
"""

from __future__ import annotations

import os
import re
import signal
import socket
import subprocess
import sys
import time
from pathlib import Path

import pytest
from _scenario_files import write_scenario

psutil = pytest.importorskip("psutil")
pytest.importorskip("meshcat")

from sim.experiments.run import run_scenario  # noqa: E402
from sim.loop.scenario import load_scenario  # noqa: E402
from sim.output import viz  # noqa: E402

REPO = Path(__file__).resolve().parents[1]
REACH = REPO / "scenarios" / "reach.py"
ENV = dict(os.environ, PYTHONPATH=str(REPO) + os.pathsep + os.environ.get("PYTHONPATH", ""))


@pytest.fixture(scope="module")
def run_dir(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("viewer_server")
    out = tmp / "run"
    run_scenario(load_scenario(write_scenario(tmp / "s.py")), "gravity", out, report=False)
    return out


def listening(pid: int) -> list[tuple[str, int]]:
    """(address, port) of every TCP socket process ``pid`` listens on."""
    return [(c.laddr.ip, c.laddr.port) for c in psutil.Process(pid).net_connections(kind="inet")
            if c.status == psutil.CONN_LISTEN]


def port_is_closed(port: int, timeout_s: float = 5.0) -> bool:
    t0 = time.monotonic()
    while time.monotonic() - t0 < timeout_s:
        try:
            socket.create_connection(("127.0.0.1", port), timeout=0.5).close()
        except OSError:
            return True
        time.sleep(0.1)
    return False


def gone(pid: int, timeout_s: float = 5.0) -> bool:
    t0 = time.monotonic()
    while time.monotonic() - t0 < timeout_s:
        if not psutil.pid_exists(pid) or psutil.Process(pid).status() == psutil.STATUS_ZOMBIE:
            return True
        time.sleep(0.05)
    return False


def web_port(url: str) -> int:
    return int(re.search(r"://127\.0\.0\.1:(\d+)/", url).group(1))


def test_the_server_listens_on_loopback_only_and_close_stops_it():
    vis = viz.open_visualizer()
    proc = vis.window.server_proc
    try:
        bound = listening(proc.pid)
        port = web_port(vis.url())
        assert {p for _, p in bound} >= {port, int(vis.window.zmq_url.rsplit(":", 1)[1])}
        assert {a for a, _ in bound} == {"127.0.0.1"}, bound  # neither 0.0.0.0 nor ::
    finally:
        viz.close_visualizer(vis)
    assert proc.poll() is not None
    assert port_is_closed(port)


def test_the_server_stops_when_the_process_that_started_it_is_killed(tmp_path):
    code = ("import time\nfrom sim.output import viz\nv = viz.open_visualizer()\n"
            "print(v.window.server_proc.pid, v.url(), flush=True)\ntime.sleep(60)\n")
    parent = subprocess.Popen([sys.executable, "-c", code], env=ENV, stdout=subprocess.PIPE, text=True)
    try:
        pid, url = parent.stdout.readline().split()
        assert psutil.pid_exists(int(pid))
    finally:
        parent.kill()
        parent.wait()
    assert gone(int(pid)), "the viewer's server outlived the process that started it"
    assert port_is_closed(web_port(url))


@pytest.mark.parametrize("signum", [signal.SIGINT, signal.SIGTERM], ids=["SIGINT", "SIGTERM"])
def test_replay_serves_on_loopback_and_a_signal_stops_its_server(run_dir, signum):
    cli = subprocess.Popen([sys.executable, "-m", "sim.cli", "replay", str(run_dir)], env=ENV,
                           stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    try:
        line = cli.stdout.readline()
        assert line.startswith("replay at http://127.0.0.1:"), (line, cli.stderr.read() if cli.poll() else "")
        port = web_port(line)
        (server,) = psutil.Process(cli.pid).children(recursive=True)
        assert {a for a, _ in listening(server.pid)} == {"127.0.0.1"}
        cli.send_signal(signum)
        out, err = cli.communicate(timeout=30)
    finally:
        if cli.poll() is None:
            cli.kill()
    assert cli.returncode == 0 and "stopped" in out and "Traceback" not in err
    assert gone(server.pid) and port_is_closed(port)


def _run_view(tmp_path: Path, duration_s: float) -> tuple[subprocess.Popen, int, int]:
    """Start ``exosandbox run --view``; return it, its viewer's server's pid and web port once it serves."""
    cli = subprocess.Popen([sys.executable, "-m", "sim.cli", "run", str(REACH), "--duration", str(duration_s),
                            "--out", "r", "--view"], cwd=tmp_path, env=ENV, stdout=subprocess.PIPE,
                           stderr=subprocess.PIPE, text=True)
    line = ""
    while not line.startswith("live view at"):
        line = cli.stderr.readline()
        assert line or cli.poll() is None, "the run ended without a live view"
    port = web_port(line)
    server = next(c for c in psutil.Process(cli.pid).children(recursive=True)
                  if any(p == port for _, p in listening(c.pid)))
    return cli, server.pid, port


def test_run_view_serves_on_loopback_and_stops_its_server_at_the_end(tmp_path):
    cli, server, port = _run_view(tmp_path, 1.0)
    assert {a for a, _ in listening(server)} == {"127.0.0.1"}
    out, err = cli.communicate(timeout=120)
    assert cli.returncode == 0, err
    assert gone(server) and port_is_closed(port)


def test_run_view_stops_its_server_on_sigterm(tmp_path):
    cli, server, port = _run_view(tmp_path, 60.0)
    cli.send_signal(signal.SIGTERM)
    _, err = cli.communicate(timeout=60)
    assert cli.returncode == 1 and "interrupted" in err
    assert gone(server) and port_is_closed(port)
