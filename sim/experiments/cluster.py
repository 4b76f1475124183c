"""A connection to an existing Dask cluster, for the commands that spread their work over one.

``exosandbox sweep --dask ADDRESS`` and ``exosandbox wallmap --dask ADDRESS`` both hand their cases to the
scheduler at ADDRESS; :func:`dask_client` opens that connection, names the address in one line when it cannot,
and closes it whatever ends the block.
"""

from __future__ import annotations

import contextlib
from collections.abc import Iterator

__all__ = ["dask_client", "CONNECT_TIMEOUT"]

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
