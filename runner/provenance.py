"""What a result was made with: package versions, platform and command line."""

from __future__ import annotations

import platform
import sys
from importlib import metadata

__all__ = ["WORKER_THREADS", "platform_text", "versions", "worker_threads"]

_PACKAGES = (
    "stepmeter",
    "numpy",
    "numba",
    "gymnasium",
    "pandas",
    "joblib",
    "scipy",
    "matplotlib",
    "pyyaml",
    "jax",
    "jaxlib",
    "optax",
)
"""Recorded with every run; the neural extra's packages read "not installed" without it."""

WORKER_THREADS = "worker threads"
"""The entry beside the versions in which a run on local worker processes records their thread caps
(`runner.workers.worker_thread_caps`); `rerun` runs in one process, so it leaves this entry out of its comparison."""


def versions() -> dict[str, str]:
    """Versions of python and of the packages a result depends on."""
    out = {"python": sys.version.split()[0]}
    for name in _PACKAGES:
        try:
            out[name] = metadata.version(name)
        except metadata.PackageNotFoundError:
            out[name] = "not installed"
    return out


def platform_text() -> str:
    """Operating system, machine and processor in one line."""
    return f"{platform.platform()}; {platform.machine()}; {platform.processor() or 'unknown processor'}"


def worker_threads(caps: dict[str, str]) -> dict[str, str]:
    """The provenance entry of worker thread caps, e.g. {"worker threads": "OMP_NUM_THREADS=1, ..."}."""
    return {WORKER_THREADS: ", ".join(f"{name}={value}" for name, value in caps.items())}
