"""Session set-up: one BLAS thread, as `stepmeter run`'s workers have, and JAX's persistent compilation cache for
every test, in the folder `stepmeter run` uses.

OpenBLAS, MKL, BLIS and OpenMP get one thread each unless the variable is set (`runner.workers.THREAD_VARIABLES`):
on a busy machine OpenBLAS's spinning threads made the GP tests' float64 factorisations tens of times slower, and
a test process that compares its rows with a worker's then runs the same thread count.

The neural kinds' trials turn the cache on themselves (`runner.neural.trial`), but the model tests call JAX
directly: with the cache on, a program compiled by an earlier session, or by an earlier test under another jitted
function object with the same shapes, loads in milliseconds instead of compiling for seconds. Every program is
kept, however quickly it compiled (JAX's default keeps only those over a second). Set by environment variables
before JAX is imported, so nothing here imports it; a folder the user chose (`JAX_COMPILATION_CACHE_DIR` or
`STEPMETER_JAX_CACHE`) is kept, and `STEPMETER_JAX_CACHE=off` leaves the cache off.
"""

import os
from pathlib import Path

from runner.workers import THREAD_VARIABLES


def _jax_cache_folder() -> str | None:
    """The folder of `runner.neural.trial._use_compilation_cache`, or None when the user turned it off."""
    chosen = os.environ.get("STEPMETER_JAX_CACHE", "")
    if chosen == "off":
        return None
    base = Path(os.environ.get("XDG_CACHE_HOME") or Path.home() / ".cache")
    return chosen or str(base / "stepmeter" / "jax")


def pytest_configure(config) -> None:
    for name in THREAD_VARIABLES:
        os.environ.setdefault(name, "1")
    folder = _jax_cache_folder()
    if folder is not None and "JAX_COMPILATION_CACHE_DIR" not in os.environ:
        os.environ["JAX_COMPILATION_CACHE_DIR"] = folder
        os.environ.setdefault("JAX_PERSISTENT_CACHE_MIN_COMPILE_TIME_SECS", "0")
