"""A connection to an existing Dask cluster, for the commands that spread their work over one.

``exosandbox sweep --dask ADDRESS`` and ``exosandbox wallmap --dask ADDRESS`` both hand their cases to the
scheduler at ADDRESS; :func:`dask_client` opens that connection, names the address in one line when it cannot,
and closes it whatever ends the block.
"""

from __future__ import annotations

import concurrent.futures
import contextlib
import multiprocessing
import sys
from collections.abc import Callable, Iterator, Sequence

__all__ = ["dask_client", "map_in_order", "CONNECT_TIMEOUT"]

#: How long connecting to the scheduler may take before the command gives up (Dask's own format).
CONNECT_TIMEOUT = "10s"


@contextlib.contextmanager
def dask_client(address: str, error: type[Exception]) -> Iterator:
    """A ``dask.distributed.Client`` connected to ``address``; ``error`` (the caller's exception class) carries
    the one-line message when Dask is not installed or the scheduler cannot be reached."""
    try:
        from dask.distributed import Client
    except ImportError as e:
        raise error("--dask needs Dask distributed: pip install 'exosandbox[dask]'") from e
    try:
        client = Client(address, timeout=CONNECT_TIMEOUT)
    except Exception as e:  # connection refused, timeout, bad address: one line naming the address
        raise error(f"cannot connect to the Dask scheduler at {address!r}: {e}") from e
    try:
        yield client
    finally:
        client.close()


def map_in_order(fn: Callable, tasks: Sequence, *, jobs: int, dask_address: str | None,
                 error: type[Exception]) -> tuple[list, str]:
    """``[fn(t) for t in tasks]`` in the tasks' order, and a line naming what ran them.

    On the Dask scheduler at ``dask_address`` if given (:func:`dask_client`); else ``jobs`` local processes
    at a time (forked on Linux, as a sweep's workers; 1: in this process). ``fn`` and the tasks must pickle.
    The results do not depend on what ran them.
    """
    tasks = list(tasks)
    if dask_address:
        with dask_client(dask_address, error) as client:
            return list(client.gather(client.map(fn, tasks, pure=False))), f"dask {dask_address}"
    if jobs == 1 or len(tasks) <= 1:
        return [fn(t) for t in tasks], "local, 1 process(es)"
    method = "fork" if sys.platform.startswith("linux") else "spawn"
    with concurrent.futures.ProcessPoolExecutor(max_workers=min(jobs, len(tasks)),
                                                mp_context=multiprocessing.get_context(method)) as pool:
        return list(pool.map(fn, tasks)), f"local, {jobs} process(es)"
