"""Stopping a run on a signal: SIGTERM is treated like SIGINT (Ctrl-C).

Python raises :class:`KeyboardInterrupt` on SIGINT, and a run that gets it
closes its log as ``"interrupted"`` (:class:`~sim.loop.runlog.RunLog`);
SIGTERM (what ``kill``, a job scheduler or a container manager sends) would
otherwise end the process at once and leave ``meta.json`` at
``"running"``.  While a run goes, :func:`stop_on_signals` makes both raise
:class:`RunInterrupted`, a :class:`KeyboardInterrupt`, so that every
``except KeyboardInterrupt`` and the log's own handling treat them alike.
The previous handlers are restored afterwards.  Signal handlers can only be
installed by the main thread: elsewhere (a sweep's driving thread, a Dask
worker thread) it does nothing.  A signal ignored by the process (``SIG_IGN``,
e.g. SIGINT under ``nohup``) stays ignored.
"""

from __future__ import annotations

import contextlib
import signal
import threading
from collections.abc import Iterator

__all__ = ["RunInterrupted", "STOP_SIGNALS", "stop_on_signals"]

#: The signals that stop a run cleanly.
STOP_SIGNALS: tuple[signal.Signals, ...] = (signal.SIGINT, signal.SIGTERM)


class RunInterrupted(KeyboardInterrupt):
    """A signal asked the run to stop; ``signum`` is the signal's number."""

    def __init__(self, signum: int) -> None:
        self.signum = int(signum)
        super().__init__(f"stopped by {signal.Signals(self.signum).name}")


def _raise(signum, frame) -> None:
    raise RunInterrupted(signum)


@contextlib.contextmanager
def stop_on_signals(signals: tuple[int, ...] = STOP_SIGNALS) -> Iterator[None]:
    """Within the block, each of ``signals`` raises :class:`RunInterrupted` in the main thread.

    Outside the main thread the block runs with the handlers as they are.
    The handlers found are put back on leaving the block, whatever ends it.
    """
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    previous = {}
    try:
        for s in signals:
            old = signal.getsignal(s)
            if old is signal.SIG_IGN:
                continue
            signal.signal(s, _raise)
            previous[s] = old
        yield
    finally:
        for s, old in previous.items():
            signal.signal(s, signal.SIG_DFL if old is None else old)
