"""Point numba's on-disk cache at a writable folder when the package folder is read-only."""

import os
from pathlib import Path


def ensure_numba_cache_dir() -> None:
    """Set NUMBA_CACHE_DIR to a user cache folder when it is unset and the package is not writable."""
    if os.environ.get("NUMBA_CACHE_DIR"):
        return
    package_dir = Path(__file__).resolve().parent
    if os.access(package_dir, os.W_OK):
        return
    base = os.environ.get("XDG_CACHE_HOME") or str(Path.home() / ".cache")
    target = Path(base) / "stepmeter" / "numba"
    try:
        target.mkdir(parents=True, exist_ok=True)
    except OSError:
        return
    os.environ["NUMBA_CACHE_DIR"] = str(target)
