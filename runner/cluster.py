"""The optional cluster backend: trials run on an existing dask.distributed cluster through joblib.

Install it with `pip install ".[cluster]"`. Workers only compute; results come back to this process, which
alone writes the store. joblib batches trials into tasks on its own. The scheduler and its workers exchange
pickled tasks, so a cluster must be one you trust: whoever controls it can run code in this process's name.

Every wait is bounded by one timeout (`--cluster-timeout`, default `DEFAULT_TIMEOUT` seconds): reaching the
scheduler, its greeting, and at least one worker joining. A port that accepts connections and never answers, or
a scheduler with no workers, is one clear line after the timeout instead of a hang.
"""

from __future__ import annotations

import re
import socket
from collections.abc import Iterable, Iterator
from typing import Any

from joblib import Parallel, parallel_config

from runner.errors import ClusterError

__all__ = ["DEFAULT_TIMEOUT", "check_address", "check_reachable", "run_on_cluster"]

DEFAULT_TIMEOUT = 10.0
"""Seconds to wait for the scheduler to connect and greet, and again for a first worker."""

_ADDRESS = re.compile(r"^(?:(?P<scheme>[a-z][a-z0-9+.-]*)://)?(?P<host>\[[0-9A-Fa-f:.]+\]|[^\s/:\[\]]+):(?P<port>\d+)$")


def check_address(address: str) -> tuple[str, str, int]:
    """(scheme, host, port) of a scheduler address like tcp://HOST:8786 or HOST:8786; one clear line if not."""
    match = _ADDRESS.match(address.strip())
    port = int(match["port"]) if match else 0
    if match is None or not 0 < port < 65536:
        raise ClusterError(f"--cluster: expected a scheduler address like tcp://HOST:8786, got {address!r}")
    return match["scheme"] or "tcp", match["host"].strip("[]"), port


def check_reachable(address: str, timeout: float = DEFAULT_TIMEOUT) -> None:
    """Fail within `timeout` seconds, with one clear line, when no dask scheduler answers at `address`.

    A dask scheduler greets every new tcp connection first, so a tcp address must both accept and send
    something within the timeout; other schemes (tls, ...) are only checked to accept a connection.
    """
    scheme, host, port = check_address(address)
    try:
        with socket.create_connection((host, port), timeout=timeout) as conn:
            if scheme == "tcp" and not conn.recv(1):
                raise ClusterError(f"the scheduler at {address!r} closed the connection without a greeting")
    except TimeoutError:
        raise ClusterError(
            f"no dask scheduler answered at {address!r} within {timeout:g} s (raise --cluster-timeout if it is slow)"
        ) from None
    except OSError as err:
        raise ClusterError(f"cannot reach a dask scheduler at {address!r}: {err}") from None


def run_on_cluster(address: str, tasks: Iterable[Any], timeout: float = DEFAULT_TIMEOUT) -> Iterator[Any]:
    """Run joblib-delayed tasks on the dask scheduler at `address`, yielding results as they finish."""
    try:
        from dask.distributed import Client
    except ImportError:
        raise ClusterError("--cluster needs the optional dask.distributed backend: pip install '.[cluster]'") from None
    try:
        client = Client(address, timeout=timeout)
    except (OSError, TimeoutError) as err:
        raise ClusterError(f"cannot reach a dask scheduler at {address!r}: {err}") from None
    with client:
        try:
            client.wait_for_workers(1, timeout=timeout)
        except TimeoutError:
            raise ClusterError(
                f"the dask scheduler at {address!r} has no workers (waited {timeout:g} s); start some workers for it "
                "and run again"
            ) from None
        with parallel_config(backend="dask", wait_for_workers_timeout=timeout):
            yield from Parallel(return_as="generator_unordered")(tasks)
