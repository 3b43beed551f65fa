"""What a result was made with: package versions, platform and command line."""

from __future__ import annotations

import platform
import sys
from importlib import metadata

__all__ = ["platform_text", "versions"]

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
