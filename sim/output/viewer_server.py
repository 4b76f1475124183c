"""The browser viewer's server: meshcat's, listening on one host only and stopped with the process that started it.

meshcat's own server (``python -m meshcat.servers.zmqserver``) binds its
ZeroMQ socket to 127.0.0.1 but its web server (tornado's
``Application.listen(port)``, no address) to every interface, and has no
option to change that; and it runs in a session of its own, so it outlives a
process that is killed.  This file runs the same server
(``meshcat.servers.zmqserver.ZMQWebSocketBridge``) with its web server bound
to ``--host`` (default 127.0.0.1), and stops it when the process of
``--parent-pid`` is gone (checked every 0.5 s), however that one ended.

It is started by :func:`sim.output.viz.open_visualizer` as a script, by
path, so that it imports meshcat and not this package (a fast start); it
prints ``zmq_url=...`` and ``web_url=...`` on standard output, as meshcat's
does, and serves until stopped.
"""

from __future__ import annotations

import argparse
import functools
import os
import sys

__all__ = ["main", "DEFAULT_HOST", "PARENT_POLL_S"]

#: The interface the viewer listens on: this machine only.
DEFAULT_HOST = "127.0.0.1"
#: How often the server checks that the process that started it is alive [s].
PARENT_POLL_S = 0.5


def main(argv: list[str] | None = None) -> None:
    """Serve the viewer until stopped, or until the process ``--parent-pid`` has gone."""
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--host", default=DEFAULT_HOST, help="the interface to listen on (default 127.0.0.1)")
    p.add_argument("--parent-pid", type=int, default=None, help="stop when this process has gone")
    args = p.parse_args(argv)

    import tornado.ioloop
    from meshcat.servers.zmqserver import ZMQWebSocketBridge

    class Bridge(ZMQWebSocketBridge):
        def make_app(self):  # called once self.host is set, before the web server listens
            app = super().make_app()
            app.listen = functools.partial(app.listen, address=self.host)
            return app

    bridge = Bridge(host=args.host)
    print(f"zmq_url={bridge.zmq_url}", flush=True)
    print(f"web_url={bridge.web_url}", flush=True)
    if args.parent_pid is not None:
        def check_parent() -> None:
            if os.getppid() != args.parent_pid:  # re-parented: the process that started this one has gone
                bridge.ioloop.stop()

        tornado.ioloop.PeriodicCallback(check_parent, PARENT_POLL_S * 1000).start()
    try:
        bridge.run()
    except KeyboardInterrupt:
        pass


if __name__ == "__main__":  # run by path: this folder is not a place to import modules from
    here = os.path.dirname(os.path.abspath(__file__))
    sys.path[:] = [q for q in sys.path if os.path.abspath(q or os.curdir) != here]
    main()
