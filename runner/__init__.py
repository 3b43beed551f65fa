"""stepmeter: how many real environment steps does learning a model and planning with it save?"""

from runner._numba_cache import ensure_numba_cache_dir

ensure_numba_cache_dir()

__version__ = "0.1.0"
__all__ = ["__version__", "load_results"]


def load_results(path, *, versions="current", params=True):
    """Load a stored experiment as one tidy pandas DataFrame (one row per trial and evaluation point);
    `versions="all"` adds the stored trials of earlier versions of the experiment file (see
    `runner.analysis.frames.load_results`)."""
    from runner.analysis.frames import load_results as _load

    return _load(path, versions=versions, params=params)
