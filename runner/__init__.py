"""stepmeter: how many real environment steps does learning a model and planning with it save?"""

from runner._numba_cache import ensure_numba_cache_dir

ensure_numba_cache_dir()

__version__ = "0.1.0"
__all__ = ["__version__", "load_results"]


def load_results(path):
    """Load a stored experiment as one tidy pandas DataFrame (one row per trial and evaluation point)."""
    from runner.analysis.frames import load_results as _load

    return _load(path)
