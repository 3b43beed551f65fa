"""Environment sources and the text grid maps."""

from runner.envs.grid import CELL_MEANINGS, GridWorld, parse_grid_map
from runner.envs.sources import SOURCES, build_env, env_sizes

__all__ = ["CELL_MEANINGS", "SOURCES", "GridWorld", "build_env", "env_sizes", "parse_grid_map"]
