"""A whole trial in compiled code on compiled environment dynamics: agent kernels x environment kernels.

For a gymnasium id with compiled dynamics (`runner.envs.dynamics.DYNAMICS`: the classic-control ids and the
crane) seen through `bins:`, the loop steps the environment's kernels, bins each observation as
`runner.envs.bins.BinnedObservation` does, and calls the agent kind's kernels, both resolved by name when the
loop compiles (`env_step(literally(env_id), ...)`, `agent_act(literally(kind), ...)`), so a new agent kind or a
new environment needs no change here. Truncation at the step limit is the loop's, as gymnasium's `TimeLimit` does.
The kernels reproduce gymnasium's steps bit for bit; the start states come from a compiled stream instead of
gymnasium's generator, so the two paths are the same experiment in distribution, not bit for bit.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import gymnasium as gym
import numpy as np
from numba import literally, njit, typeof, types

from runner.clock import cpu_clock, wall_clock
from runner.compiled_rows import record_point, record_times
from runner.compiled_trial import agent_act, agent_greedy, agent_observe
from runner.envs.bins import BinnedObservation, bin_index
from runner.envs.dynamics import DYNAMICS
from runner.envs.dynamics.compiled import env_observation, env_reset, env_step
from runner.models.held_out_bins import bin_arrays, bin_model_errors

__all__ = ["CompiledDynamics", "compiled_dynamics", "run_dynamics_kind_trial", "run_dynamics_trial"]


@dataclass(frozen=True)
class CompiledDynamics:
    """What the compiled loop needs of a binned environment with compiled dynamics."""

    env_id: str
    params: np.ndarray
    step_limit: int
    state_size: int
    obs_size: int
    bins: tuple  # (edges, edge_offsets, strides) as `runner.envs.bins.bin_index` reads them
    grid: tuple  # (centres, centre_offsets, strides) as the bin-model prediction kernels read it


def _time_limit(env: gym.Env) -> int:
    """The step at which gymnasium's wrappers (or the environment itself, as the crane does) truncate."""
    limit = np.iinfo(np.int64).max
    layer = env
    while isinstance(layer, gym.Wrapper):
        if isinstance(layer, gym.wrappers.TimeLimit):
            limit = min(limit, int(layer._max_episode_steps))
        layer = layer.env
    own = getattr(layer, "step_limit", None)
    return min(limit, int(own)) if isinstance(own, int) else limit


def compiled_dynamics(spec: dict[str, Any], env: gym.Env) -> CompiledDynamics | str:
    """The compiled form of a built environment, or why it has none (a few words)."""
    dynamics = DYNAMICS.get(spec.get("id", "")) if spec.get("source") == "gym" else None
    if dynamics is None:
        return "no compiled dynamics for this environment"
    if dynamics.action_kind != "discrete":
        return f"{dynamics.env_id} has box actions"
    if not isinstance(env, BinnedObservation):
        return f"{dynamics.env_id} gives box observations (the compiled agent kinds take bins)"
    try:
        params = dynamics.default_params(**(spec.get("options") or {}))
    except TypeError as err:
        return f"its options differ from what the compiled dynamics take ({err})"
    limit = _time_limit(env)
    if limit >= np.iinfo(np.int64).max:
        return "it has no step limit"
    bins, grid = bin_arrays(spec["bins"]["edges"], env.env.observation_space)
    return CompiledDynamics(
        env_id=dynamics.env_id,
        params=params,
        step_limit=limit,
        state_size=dynamics.state_size,
        obs_size=dynamics.obs_size,
        bins=bins,
        grid=grid,
    )


@njit(cache=True)
def _evaluate(kind, env_id, arrays, hyper, params, bins, cap, episodes, state, obs, env_stream, policy_stream):
    edges, edge_offsets, strides = bins
    total = 0.0
    for _ in range(episodes):
        env_reset(literally(env_id), state, params, env_stream)
        env_observation(literally(env_id), state, params, obs)
        s = bin_index(obs, edges, edge_offsets, strides)
        for _ in range(cap):
            a = agent_greedy(literally(kind), arrays, hyper, s, policy_stream)
            reward, done = env_step(literally(env_id), state, a, params, state)
            total += reward
            if done:
                break
            env_observation(literally(env_id), state, params, obs)
            s = bin_index(obs, edges, edge_offsets, strides)
    return total / episodes


@njit(cache=True)
def run_dynamics_trial(
    kind,
    env_id,
    arrays,
    hyper,
    counters,
    agent_stream,
    params,
    bins,
    grid,
    held,
    sizes,
    env_stream,
    eval_env_stream,
    eval_stream,
    budget,
    every,
    eval_episodes,
    step_cap,
    window,
    time_limit,
    rows,
    episode_returns,
    episode_lengths,
):
    """Run the trial of agent kind `kind` on the compiled environment `env_id`; fill `rows` (n_points x the
    columns of `runner.metrics.METRIC_COLUMNS`) and the episode arrays.

    `bins` is (edges, edge_offsets, strides), `grid` the bins' centres (`runner.models.bin_prediction`), `held`
    the held-out real transitions of `runner.models.held_out_bins.held_out_arrays` (no runs: no model error
    measured) and `sizes` (state size, observation size, step limit). Returns the number of finished training
    episodes, or -1 when the trial ran past `time_limit` seconds (0: no limit).
    """
    edges, edge_offsets, strides = bins
    state_size, obs_size, step_limit = sizes
    state = np.zeros(state_size)
    obs = np.zeros(obs_size)
    eval_state = np.zeros(state_size)
    eval_obs = np.zeros(obs_size)
    cap = step_cap if step_cap < step_limit else step_limit
    started = wall_clock()
    cpu_started = cpu_clock()
    measured = 0.0
    earned = 0.0
    n_episodes = 0
    point = 0
    env_reset(literally(env_id), state, params, env_stream)
    env_observation(literally(env_id), state, params, obs)
    s = bin_index(obs, edges, edge_offsets, strides)
    episode_return = 0.0
    episode_length = 0
    for step in range(budget + 1):
        if time_limit > 0 and step % 4096 == 0 and wall_clock() - started > time_limit:
            return -1
        if step > 0:
            a = agent_act(literally(kind), arrays, hyper, s, agent_stream)
            reward, done = env_step(literally(env_id), state, a, params, state)
            env_observation(literally(env_id), state, params, obs)
            s2 = bin_index(obs, edges, edge_offsets, strides)
            agent_observe(literally(kind), arrays, hyper, counters, s, a, reward, s2, done, agent_stream)
            episode_return += reward
            earned += reward
            episode_length += 1
            s = s2
            if done or episode_length >= step_limit:
                episode_returns[n_episodes] = episode_return
                episode_lengths[n_episodes] = episode_length
                n_episodes += 1
                episode_return = 0.0
                episode_length = 0
                env_reset(literally(env_id), state, params, env_stream)
                env_observation(literally(env_id), state, params, obs)
                s = bin_index(obs, edges, edge_offsets, strides)
        if step % every == 0:
            measuring = cpu_clock()
            value = _evaluate(
                kind,
                env_id,
                arrays,
                hyper,
                params,
                bins,
                cap,
                eval_episodes,
                eval_state,
                eval_obs,
                eval_env_stream,
                eval_stream,
            )
            one_step, reward_error, short, long = bin_model_errors(kind, arrays, bins, grid, held)
            errors = (np.nan, reward_error, one_step, short, long)
            record_point(rows, point, step, earned, n_episodes, value, episode_returns, window, counters, errors, 0)
            measured = record_times(rows, point, started, cpu_started, measuring, measured)
            point += 1
    return n_episodes


_ENTRY_POINTS: dict[tuple, Callable[..., int]] = {}
_run_dynamics_trial_uncached = njit(cache=False)(run_dynamics_trial.py_func)
"""The same loop for agent kinds from the user's own modules (see `runner.compiled_trial`)."""


def run_dynamics_kind_trial(kind: str, dynamics: CompiledDynamics, held: tuple, *args: Any) -> int:
    """Call `run_dynamics_trial` for agent kind `kind` on `dynamics` with the held-out arrays `held`, compiled once
    per kind, environment id and argument types and called straight through its entry point (as
    `runner.compiled_trial.run_kind_trial`)."""
    sizes = (dynamics.state_size, dynamics.obs_size, dynamics.step_limit)
    call = (dynamics.params, dynamics.bins, dynamics.grid, held, sizes, *args[4:])
    head = args[:4]
    arg_types = tuple(typeof(arg) for arg in (*head, *call))
    key = (kind, dynamics.env_id, arg_types)
    entry = _ENTRY_POINTS.get(key)
    if entry is None:
        loop = _run_dynamics_trial_uncached if ":" in kind else run_dynamics_trial
        entry = loop.compile((types.literal(kind), types.literal(dynamics.env_id), *arg_types))
        _ENTRY_POINTS[key] = entry
    return entry(kind, dynamics.env_id, *head, *call)
