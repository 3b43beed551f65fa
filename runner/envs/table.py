"""Environments whose dynamics are a known transition table, converted once into flat arrays.

Such environments (the experiment's grid maps; gymnasium's FrozenLake, CliffWalking and Taxi) can run a whole trial in
compiled code. Only classes whose `step` samples exactly from `P` qualify, behind no wrapper other than those
`gymnasium.make` adds; anything else (e.g. Taxi's `fickle_passenger`, which changes the state outside the table)
stays on the gymnasium path.
"""

from __future__ import annotations

from dataclasses import dataclass

import gymnasium as gym
import numpy as np
from gymnasium.envs.toy_text.cliffwalking import CliffWalkingEnv
from gymnasium.envs.toy_text.frozen_lake import FrozenLakeEnv
from gymnasium.envs.toy_text.taxi import TaxiEnv
from gymnasium.wrappers import OrderEnforcing, PassiveEnvChecker, TimeLimit

from runner.envs.grid import GridWorld
from runner.envs.sources import env_sizes
from runner.envs.takeaway import TakeAwayGame

__all__ = ["TransitionTable", "change_steps", "phase_tables", "table_from_env", "why_not_table_backed"]

_TABLE_STEP_CLASSES = (FrozenLakeEnv, CliffWalkingEnv, TaxiEnv, GridWorld, TakeAwayGame)
_NEUTRAL_WRAPPERS = (TimeLimit, OrderEnforcing, PassiveEnvChecker)


@dataclass(frozen=True)
class TransitionTable:
    """Outcomes of every (state, action) in compressed rows: pair p = s * n_actions + a owns entries
    `offsets[p]:offsets[p + 1]` of `cdf` (cumulative probability, last one exactly 1), `next_state`,
    `reward` and `terminated`. `start_cdf` is the cumulative start distribution; `step_limit` 0 means none."""

    n_states: int
    n_actions: int
    start_cdf: np.ndarray
    offsets: np.ndarray
    cdf: np.ndarray
    next_state: np.ndarray
    reward: np.ndarray
    terminated: np.ndarray
    step_limit: int

    def as_tuple(self) -> tuple:
        """The tuple compiled code takes: (start_cdf, offsets, cdf, next_state, reward, terminated, step_limit)."""
        return (self.start_cdf, self.offsets, self.cdf, self.next_state, self.reward, self.terminated, self.step_limit)


def why_not_table_backed(env: gym.Env) -> str | None:
    """None when the environment's steps are exactly its table's; else the reason in a few words."""
    layer = env
    while isinstance(layer, gym.Wrapper):
        if not isinstance(layer, _NEUTRAL_WRAPPERS):
            return f"wrapper {type(layer).__name__} may change steps"
        layer = layer.env
    if not isinstance(layer, _TABLE_STEP_CLASSES):
        return f"{type(layer).__name__} is not a known table-stepped environment"
    if getattr(layer, "fickle_passenger", False):
        return "Taxi's fickle_passenger changes the destination outside the transition table"
    return None


def _step_limit(env: gym.Env) -> int:
    layer = env
    while isinstance(layer, gym.Wrapper):
        if isinstance(layer, TimeLimit):
            return int(layer._max_episode_steps)
        layer = layer.env
    return 0


def _closed_cdfs(probabilities: np.ndarray, offsets: np.ndarray) -> np.ndarray:
    """Cumulative probabilities within each group `offsets[i]:offsets[i + 1]`, exactly 1 from each group's last
    positive entry on (rounding would otherwise leave a sliver of probability on outcomes that cannot happen)."""
    counts = np.diff(offsets)
    group = np.repeat(np.arange(counts.size), counts)
    running = np.cumsum(probabilities)
    before = np.concatenate(([0.0], running))[offsets[:-1]]
    cdf = running - before[group]
    index = np.arange(probabilities.size)
    last_positive = np.full(counts.size, -1, dtype=np.int64)
    np.maximum.at(last_positive, group, np.where(probabilities > 0, index, -1))
    cdf[index >= last_positive[group]] = 1.0
    return cdf


def table_from_env(env: gym.Env) -> TransitionTable:
    """Convert a table-backed environment's `P` and `initial_state_distrib` into flat arrays."""
    reason = why_not_table_backed(env)
    if reason is not None:
        raise ValueError(f"not table-backed: {reason}")
    n_states, n_actions = env_sizes(env)
    table = env.unwrapped.P
    outcomes = [table[s][a] for s in range(n_states) for a in range(n_actions)]
    offsets = np.zeros(len(outcomes) + 1, dtype=np.int64)
    offsets[1:] = np.cumsum([len(o) for o in outcomes])
    flat = [entry for pair in outcomes for entry in pair]
    probs = np.array([e[0] for e in flat], dtype=np.float64)
    start = np.asarray(env.unwrapped.initial_state_distrib, dtype=np.float64)
    return TransitionTable(
        n_states=n_states,
        n_actions=n_actions,
        start_cdf=_closed_cdfs(start, np.array([0, start.size])),
        offsets=offsets,
        cdf=_closed_cdfs(probs, offsets),
        next_state=np.array([e[1] for e in flat], dtype=np.int64),
        reward=np.array([e[2] for e in flat], dtype=np.float64),
        terminated=np.array([e[3] for e in flat], dtype=np.bool_),
        step_limit=_step_limit(env),
    )


def change_steps(env: gym.Env) -> tuple[int, ...]:
    """Real steps after which a changing environment switches to its next map (empty for fixed ones)."""
    return tuple(getattr(env.unwrapped, "change_steps", ()))


def phase_tables(env: gym.Env) -> tuple[TransitionTable, ...]:
    """One table per phase of a changing environment (one table for a fixed one); leaves it in phase 0."""
    base = env.unwrapped
    if not change_steps(env):
        return (table_from_env(env),)
    tables = []
    for phase in range(base.n_phases):
        base.set_phase(phase)
        tables.append(table_from_env(env))
    base.set_phase(0)
    return tuple(tables)
