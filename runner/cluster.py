"""The optional cluster backend: trials run on an existing dask.distributed cluster through joblib.

Install it with `pip install ".[cluster]"`. Workers only compute; results come back to this process, which
alone writes the store. joblib batches trials into tasks on its own.
"""

from __future__ import annotations

import socket
from collections.abc import Iterable, Iterator
from typing import Any

from joblib import Parallel, parallel_config

from runner.errors import ClusterError

__all__ = ["check_reachable", "run_on_cluster"]


def check_reachable(address: str, timeout: float = 5.0) -> None:
    """Fail at once, with one clear line, when nothing listens at a tcp:// scheduler address."""
    if not address.startswith("tcp://"):
        return
    host, _, port = address.removeprefix("tcp://").rpartition(":")
    if not host or not port.isdigit():
        raise ClusterError(f"expected a scheduler address like tcp://HOST:8786, got {address!r}")
    try:
        socket.create_connection((host.strip("[]"), int(port)), timeout=timeout).close()
    except OSError as err:
        raise ClusterError(f"cannot reach a dask scheduler at {address!r}: {err}") from None


def run_on_cluster(address: str, tasks: Iterable[Any], connect_timeout: float = 30.0) -> Iterator[Any]:
    """Run joblib-delayed tasks on the dask scheduler at `address`, yielding results as they finish."""
    try:
        from dask.distributed import Client
    except ImportError:
        raise ClusterError("--cluster needs the optional dask.distributed backend: pip install '.[cluster]'") from None
    try:
        client = Client(address, timeout=connect_timeout)
    except (OSError, TimeoutError) as err:
        raise ClusterError(f"cannot reach a dask scheduler at {address!r}: {err}") from None
    with client, parallel_config(backend="dask", wait_for_workers_timeout=connect_timeout):
        yield from Parallel(return_as="generator_unordered")(tasks)
