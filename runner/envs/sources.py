"""Environment sources: a registry of specs (name, keys with meanings, builder, what it gives).

A resolved environment spec is a plain JSON-able dict with a "source" key; `build_env` turns it into a
gymnasium environment through its source's builder (with a time limit when `step_limit` is set, and a grid of
bins over a box observation when `bins` is set). `environment_tags` reads what a built environment gives.
A new source is a builder function and one `EnvSource` line in `SOURCES` (and its resolver in `runner.config`).
"""

from __future__ import annotations

import difflib
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import gymnasium as gym

import runner.envs.crane  # noqa: F401  (registers stepmeter/OverheadCrane-v0 with gymnasium)
from runner.envs.bins import BinnedObservation
from runner.envs.grid import GridWorld
from runner.errors import EnvironmentSourceError, UnknownKindError
from runner.limits import MAX_REWARD
from runner.params import Param
from runner.registry import import_entry_point
from runner.tags import EnvTags, space_kind

__all__ = [
    "COMMON_KEYS",
    "GRID_PARAMS",
    "GRID_SCHEMA",
    "SOURCES",
    "EnvSource",
    "build_env",
    "env_sizes",
    "environment_tags",
    "gym_reward_threshold",
    "gym_spec",
]


@dataclass(frozen=True)
class EnvSource:
    """One way to declare an environment: its key in the experiment, what it means, its own keys (with types,
    ranges and meanings where they have them), the builder, and what environments of it give."""

    name: str
    summary: str
    keys: tuple[tuple[str, str], ...]
    schema: tuple[Param, ...]
    build: Callable[[dict[str, Any]], gym.Env]
    gives: str


GRID_SCHEMA = (
    Param("slip", "float", 0.0, "chance a move from a slippery cell goes sideways", low=0.0, high=1.0),
    Param("step_reward", "float", 0.0, "reward of an ordinary move", low=-MAX_REWARD, high=MAX_REWARD),
    Param("goal_reward", "float", 1.0, "reward for entering the goal", low=-MAX_REWARD, high=MAX_REWARD),
    Param("hazard_penalty", "float", -1.0, "reward for entering a hazard", low=-MAX_REWARD, high=MAX_REWARD),
    Param("hazard_ends", "bool", True, "whether entering a hazard ends the episode"),
)
GRID_PARAMS = tuple(p.name for p in GRID_SCHEMA)

COMMON_KEYS = (
    ("label", "the name of the environment in every output (default: the id, entry class or grid-N)"),
    ("step_limit", "steps after which an episode is truncated (gymnasium ids default to their registered limit)"),
    ("threshold", "greedy evaluation return that counts as learned (gymnasium ids default to their registered one)"),
    ("earning_threshold", "reward per real step while learning that counts as learned (the earning_rate measure)"),
    (
        "bins",
        "a grid of bins over a box observation so the tabular kinds run on it: counts per dimension with low and "
        "high (clipping ranges; default the space's finite bounds), or explicit interior edges per dimension",
    ),
)
"""Keys every environment entry may carry beside its source key."""


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


def _time_limited(env: gym.Env, spec: dict[str, Any]) -> gym.Env:
    limit = spec.get("step_limit")
    return env if limit is None else gym.wrappers.TimeLimit(env, max_episode_steps=limit)


def _build_gym(spec: dict[str, Any]) -> gym.Env:
    kwargs = dict(spec.get("options") or {})
    if spec.get("step_limit") is not None:
        kwargs["max_episode_steps"] = spec["step_limit"]
    try:
        return gym.make(spec["id"], **kwargs)
    except TypeError as err:
        raise EnvironmentSourceError(f"gymnasium id {spec['id']!r} rejected its options: {err}") from None


def _build_grid(spec: dict[str, Any]) -> gym.Env:
    env = GridWorld(spec["map"], changes=spec.get("changes"), **{k: spec[k] for k in GRID_PARAMS})
    return _time_limited(env, spec)


def _build_entry(spec: dict[str, Any]) -> gym.Env:
    cls = import_entry_point(spec["entry"], gym.Env, "gymnasium.Env")
    try:
        env = cls(**(spec.get("options") or {}))
    except TypeError as err:
        raise EnvironmentSourceError(f"{spec['entry']} rejected its options: {err}") from None
    if not isinstance(env, gym.Env):
        raise EnvironmentSourceError(
            f"{spec['entry']} built a {type(env).__name__}, not a gymnasium environment (gymnasium.Env)"
        )
    return _time_limited(env, spec)


SOURCES: dict[str, EnvSource] = {
    source.name: source
    for source in (
        EnvSource(
            "gym",
            "a registered gymnasium id with keyword options",
            (("gym", "the id, e.g. FrozenLake-v1 or CartPole-v1"), ("options", "keyword options of gymnasium.make")),
            (),
            _build_gym,
            "the id's spaces; FrozenLake, CliffWalking and Taxi are table-backed; the classic-control ids and "
            "stepmeter/OverheadCrane-v0 (and its continuous-force twin stepmeter/OverheadCraneContinuous-v0) have "
            "compiled dynamics",
        ),
        EnvSource(
            "grid",
            "a text grid map declared in the experiment",
            (
                ("map", "the map as text, one row a line (cells below)"),
                ("changes", "[{at: REAL_STEP, map: ...}]: replace the map after that many real steps"),
            ),
            GRID_SCHEMA,
            _build_grid,
            "discrete observations (one per cell) and 4 discrete moves; table-backed",
        ),
        EnvSource(
            "entry",
            "a 'package.module:Class' following the gymnasium API (runs your own code)",
            (("entry", "the class, e.g. runner.envs.crane:OverheadCrane"), ("options", "keyword arguments")),
            (),
            _build_entry,
            "the class's spaces; runner.envs.takeaway:TakeAwayGame gives game rules",
        ),
    )
}
"""The environment sources by the key that declares them."""


def build_env(spec: dict[str, Any]) -> gym.Env:
    """Build a fresh environment instance from a resolved environment spec."""
    source = SOURCES.get(spec["source"])
    if source is None:
        raise EnvironmentSourceError(
            f"unknown environment source {spec['source']!r}; expected one of {sorted(SOURCES)}"
        )
    env = source.build(spec)
    if spec.get("bins"):
        env = BinnedObservation(env, spec["bins"]["edges"])
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


def environment_tags(env: gym.Env, spec: dict[str, Any]) -> EnvTags:
    """What a built environment gives (spaces, table, compiled dynamics, game rules); an error for spaces no agent
    can take (anything but Discrete from 0 and flat Box)."""
    from runner.envs.dynamics import DYNAMICS
    from runner.envs.table import why_not_table_backed

    kinds = []
    for name, space in (("observation", env.observation_space), ("action", env.action_space)):
        kind = space_kind(space)
        if kind is None:
            raise EnvironmentSourceError(
                f"stepmeter takes Discrete spaces starting at 0 or flat Box spaces; the {name} space is {space}"
            )
        kinds.append(kind)
    (obs, obs_size), (act, act_size) = kinds
    return EnvTags(
        observation=obs,
        action=act,
        observation_size=obs_size,
        action_size=act_size,
        table_backed=why_not_table_backed(env) is None,
        compiled_dynamics=spec.get("source") == "gym" and spec.get("id") in DYNAMICS,
        game_rules=hasattr(env.unwrapped, "game_rules"),
    )
