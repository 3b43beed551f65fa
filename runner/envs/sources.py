"""Environment sources: a gymnasium id, a text grid map, or a user's 'package.module:Class' entry point.

A resolved environment spec is a plain JSON-able dict with a "source" key; `build_env` turns it into a
gymnasium environment (with a time limit when `step_limit` is set).
"""

from __future__ import annotations

import difflib
from typing import Any

import gymnasium as gym

from runner.envs.grid import GridWorld
from runner.errors import EnvironmentSourceError, UnknownKindError
from runner.registry import import_entry_point

__all__ = ["GRID_PARAMS", "SOURCES", "build_env", "env_sizes", "gym_reward_threshold", "gym_spec"]

SOURCES = {
    "gym": "a registered gymnasium id with keyword options",
    "grid": "a text grid map declared in the experiment",
    "entry": "a 'package.module:Class' following the gymnasium API (runs your own code)",
}
GRID_PARAMS = ("slip", "step_reward", "goal_reward", "hazard_penalty", "hazard_ends")


def gym_spec(env_id: str) -> gym.envs.registration.EnvSpec:
    """The registered spec of a gymnasium id, or an error suggesting close ids."""
    try:
        return gym.spec(env_id)
    except gym.error.Error:
        close = difflib.get_close_matches(env_id, list(gym.registry), n=3, cutoff=0.6)
        hint = f"; did you mean {' or '.join(repr(c) for c in close)}?" if close else ""
        raise UnknownKindError(f"unknown gymnasium id {env_id!r}{hint}") from None


def gym_reward_threshold(env_id: str) -> float | None:
    """Gymnasium's registered reward_threshold for the id (None when it has none)."""
    threshold = gym_spec(env_id).reward_threshold
    return None if threshold is None else float(threshold)


def build_env(spec: dict[str, Any]) -> gym.Env:
    """Build a fresh environment instance from a resolved environment spec."""
    source = spec["source"]
    limit = spec.get("step_limit")
    if source == "gym":
        kwargs = dict(spec.get("options") or {})
        if limit is not None:
            kwargs["max_episode_steps"] = limit
        try:
            return gym.make(spec["id"], **kwargs)
        except TypeError as err:
            raise EnvironmentSourceError(f"gymnasium id {spec['id']!r} rejected its options: {err}") from None
    if source == "grid":
        env: gym.Env = GridWorld(spec["map"], changes=spec.get("changes"), **{k: spec[k] for k in GRID_PARAMS})
    elif source == "entry":
        cls = import_entry_point(spec["entry"], gym.Env, "gymnasium.Env")
        try:
            env = cls(**(spec.get("options") or {}))
        except TypeError as err:
            raise EnvironmentSourceError(f"{spec['entry']} rejected its options: {err}") from None
        if not isinstance(env, gym.Env):
            raise EnvironmentSourceError(
                f"{spec['entry']} built a {type(env).__name__}, not a gymnasium environment (gymnasium.Env)"
            )
    else:
        raise EnvironmentSourceError(f"unknown environment source {source!r}; expected one of {sorted(SOURCES)}")
    if limit is not None:
        env = gym.wrappers.TimeLimit(env, max_episode_steps=limit)
    return env


def env_sizes(env: gym.Env) -> tuple[int, int]:
    """(number of states, number of actions); the tabular agents need Discrete spaces starting at 0."""
    obs, act = env.observation_space, env.action_space
    for name, space in (("observation", obs), ("action", act)):
        if not isinstance(space, gym.spaces.Discrete):
            raise EnvironmentSourceError(f"the tabular agents need a Discrete {name} space, got {type(space).__name__}")
        if int(space.start) != 0:
            raise EnvironmentSourceError(f"the {name} space must start at 0, got start={int(space.start)}")
    return int(obs.n), int(act.n)
