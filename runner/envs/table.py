"""Environments whose dynamics are a known transition table, converted once into flat arrays.

Such environments (the experiment's grid maps; gymnasium's FrozenLake, CliffWalking and Taxi) can run a whole trial in
compiled code. Only classes whose `step` samples exactly from `P` qualify, behind no wrapper other than those
`gymnasium.make` adds; anything else (e.g. Taxi's `fickle_passenger`, which changes the state outside the table)
stays on the gymnasium path.

A user's own class qualifies when it exposes its table in gymnasium's toy-text form (`P[s][a]` a list of
`(probability, next_state, reward, terminated)` and `initial_state_distrib` a vector over states), the table is a
distribution over valid states, and a short seeded walk of its own `step` never leaves the table's outcomes.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import gymnasium as gym
import numpy as np
from gymnasium.envs.toy_text.cliffwalking import CliffWalkingEnv
from gymnasium.envs.toy_text.frozen_lake import FrozenLakeEnv
from gymnasium.envs.toy_text.taxi import TaxiEnv
from gymnasium.wrappers import OrderEnforcing, PassiveEnvChecker, TimeLimit

from runner.envs.grid import GridWorld
from runner.envs.sources import env_sizes
from runner.envs.takeaway import TakeAwayGame
from runner.errors import EnvironmentSourceError

__all__ = ["TransitionTable", "change_steps", "phase_tables", "table_from_env", "why_not_table_backed"]

_TABLE_STEP_CLASSES = (FrozenLakeEnv, CliffWalkingEnv, TaxiEnv, GridWorld, TakeAwayGame)
_NEUTRAL_WRAPPERS = (TimeLimit, OrderEnforcing, PassiveEnvChecker)
_WALK_STEPS = 500
"""Steps of a user's class compared with its own table before the class may run on the compiled path."""


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
        return _why_not_own_table(env, layer)
    if getattr(layer, "fickle_passenger", False):
        return "Taxi's fickle_passenger changes the destination outside the transition table"
    return None


def _why_not_own_table(env: gym.Env, base: gym.Env) -> str | None:
    """None when a user's class exposes a valid toy-text table that its own steps follow; else the reason."""
    name = type(base).__name__
    table = getattr(base, "P", None)
    start = getattr(base, "initial_state_distrib", None)
    if table is None or start is None:
        return (
            f"{name} is not a known table-stepped environment and exposes no transition table "
            "(P[s][a] = [(p, next_state, reward, terminated), ...] and initial_state_distrib)"
        )
    try:
        n_states, n_actions = env_sizes(env)
    except EnvironmentSourceError as err:
        return str(err)
    problem = _table_problem(table, start, n_states, n_actions)
    if problem is not None:
        return f"{name}'s table: {problem}"
    strayed = _walk_leaves_table(env, table)
    if strayed is not None:
        return f"{name}'s step left its own table: {strayed}"
    return None


def _table_problem(table: Any, start: Any, n_states: int, n_actions: int) -> str | None:
    """What is wrong with a toy-text table and start distribution of the given sizes (None when nothing)."""
    try:
        start_vector = np.asarray(start, dtype=np.float64)
    except (TypeError, ValueError):
        return "initial_state_distrib is not a vector of numbers"
    if start_vector.shape != (n_states,) or np.any(start_vector < 0) or not np.isclose(start_vector.sum(), 1.0):
        return f"initial_state_distrib must be {n_states} non-negative probabilities summing to 1"
    for s in range(n_states):
        for a in range(n_actions):
            try:
                outcomes = [(float(p), int(n), float(r), bool(t)) for p, n, r, t in table[s][a]]
            except (KeyError, IndexError, TypeError, ValueError):
                return f"P[{s}][{a}] is not a list of (probability, next_state, reward, terminated)"
            probs = np.array([o[0] for o in outcomes])
            if not outcomes or np.any(probs < 0) or not np.isclose(probs.sum(), 1.0):
                return f"P[{s}][{a}]: probabilities must be non-negative and sum to 1"
            if any(not 0 <= o[1] < n_states for o in outcomes):
                return f"P[{s}][{a}]: a next state outside 0..{n_states - 1}"
    return None


def _walk_leaves_table(env: gym.Env, table: Any) -> str | None:
    """Take seeded random steps; the first outcome with no positive probability in the table, else None."""
    actions = np.random.default_rng(0).integers(env.action_space.n, size=_WALK_STEPS)
    try:
        state = int(env.reset(seed=0)[0])
        for action in actions.tolist():
            next_state, reward, terminated, truncated, _ = env.step(action)
            seen = (int(next_state), float(reward), bool(terminated))
            if not any(p > 0 and (int(n), float(r), bool(t)) == seen for p, n, r, t in table[state][action]):
                return f"state {state}, action {action} gave (next_state, reward, terminated) {seen}, not in its table"
            state = int(env.reset()[0]) if terminated or truncated else int(next_state)
    except Exception as err:  # a user's class may raise anything; the trial path reports it, not this check
        return f"its reset or step raised {type(err).__name__}: {' '.join(str(err).split())}"
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
