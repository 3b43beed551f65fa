"""A whole trial in compiled code for compiled agent kinds that take box observations (the linear kinds) on
compiled environment dynamics: agent kernels x environment kernels, resolved by name when the loop compiles.

The loop mirrors `runner.compiled_dynamics_trial` (which serves the tabular kinds through bins) but hands the
agent the observation itself (float32-rounded values as float64, as the step-by-step path does). Truncation at the
step limit is the loop's, as gymnasium's `TimeLimit` does; an agent bootstraps on a truncated step. Start states
come from a compiled stream, so this path and the step-by-step one are the same experiment in distribution. At
every evaluation point a kind with a compiled function model has its held-out errors measured in compiled code
(`runner.models.held_out_function`), on the same held-out transitions and by the same definition as the
step-by-step path (`runner.models.held_out`); other kinds get NaN there.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import gymnasium as gym
import numpy as np
from numba import literally, njit, typeof, types

from runner.agents.linear_kernels import copy_into
from runner.clock import cpu_clock, wall_clock
from runner.compiled_dynamics_trial import _time_limit
from runner.compiled_rows import record_point, record_times
from runner.compiled_trial import agent_act, agent_greedy, agent_observe
from runner.envs.dynamics import DYNAMICS
from runner.envs.dynamics.compiled import env_observation, env_reset, env_step
from runner.models.held_out import HeldOut
from runner.models.held_out_bins import held_out_arrays
from runner.models.held_out_function import function_model_errors

__all__ = ["BoxDynamics", "box_dynamics", "run_box_kind_trial", "run_box_trial"]


@dataclass(frozen=True)
class BoxDynamics:
    """What the compiled loop needs of an environment with compiled dynamics and box observations."""

    env_id: str
    params: np.ndarray
    step_limit: int
    state_size: int
    obs_size: int
    action_kind: str = "discrete"  # "box" on Pendulum-v1 and the continuous crane: only neural kinds run those


def box_dynamics(spec: dict[str, Any], env: gym.Env) -> BoxDynamics | str:
    """The compiled form of a built environment seen as a box, or why it has none (a few words)."""
    dynamics = DYNAMICS.get(spec.get("id", "")) if spec.get("source") == "gym" else None
    if dynamics is None:
        return "no compiled dynamics for this environment"
    if spec.get("bins"):
        return f"{dynamics.env_id} is seen through bins here"
    try:
        params = dynamics.default_params(**(spec.get("options") or {}))
    except TypeError as err:
        return f"its options differ from what the compiled dynamics take ({err})"
    limit = _time_limit(env)
    if limit >= np.iinfo(np.int64).max:
        return "it has no step limit"
    return BoxDynamics(dynamics.env_id, params, limit, dynamics.state_size, dynamics.obs_size, dynamics.action_kind)


@njit(cache=True)
def _evaluate(kind, env_id, arrays, hyper, params, cap, episodes, state, obs, env_stream, policy_stream):
    total = 0.0
    for _ in range(episodes):
        env_reset(literally(env_id), state, params, env_stream)
        env_observation(literally(env_id), state, params, obs)
        for _ in range(cap):
            a = agent_greedy(literally(kind), arrays, hyper, obs, policy_stream)
            reward, done = env_step(literally(env_id), state, a, params, state)
            total += reward
            if done:
                break
            env_observation(literally(env_id), state, params, obs)
    return total / episodes


@njit(cache=True)
def run_box_trial(
    kind,
    env_id,
    arrays,
    hyper,
    counters,
    agent_stream,
    params,
    sizes,
    held,
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
    columns of `runner.metrics.METRIC_COLUMNS`) and the episode arrays. `sizes` is (state size, observation size,
    step limit), `held` the held-out real transitions of `runner.models.held_out_bins.held_out_arrays` (no runs:
    no model error measured). Returns the number of finished training episodes, or -1 past `time_limit` seconds
    (0: none)."""
    state_size, obs_size, step_limit = sizes
    state = np.zeros(state_size)
    obs = np.zeros(obs_size)
    next_obs = np.zeros(obs_size)
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
    episode_return = 0.0
    episode_length = 0
    for step in range(budget + 1):
        if time_limit > 0 and step % 4096 == 0 and wall_clock() - started > time_limit:
            return -1
        if step > 0:
            a = agent_act(literally(kind), arrays, hyper, obs, agent_stream)
            reward, done = env_step(literally(env_id), state, a, params, state)
            env_observation(literally(env_id), state, params, next_obs)
            agent_observe(literally(kind), arrays, hyper, counters, obs, a, reward, next_obs, done, agent_stream)
            episode_return += reward
            earned += reward
            episode_length += 1
            copy_into(obs, next_obs)
            if done or episode_length >= step_limit:
                episode_returns[n_episodes] = episode_return
                episode_lengths[n_episodes] = episode_length
                n_episodes += 1
                episode_return = 0.0
                episode_length = 0
                env_reset(literally(env_id), state, params, env_stream)
                env_observation(literally(env_id), state, params, obs)
        if step % every == 0:
            measuring = cpu_clock()
            value = _evaluate(
                kind,
                env_id,
                arrays,
                hyper,
                params,
                cap,
                eval_episodes,
                eval_state,
                eval_obs,
                eval_env_stream,
                eval_stream,
            )
            one_step, reward_error, short, long = function_model_errors(kind, arrays, held)
            errors = (np.nan, reward_error, one_step, short, long)
            record_point(rows, point, step, earned, n_episodes, value, episode_returns, window, counters, errors, 0)
            measured = record_times(rows, point, started, cpu_started, measuring, measured)
            point += 1
    return n_episodes


_ENTRY_POINTS: dict[tuple, Callable[..., int]] = {}
_run_box_trial_uncached = njit(cache=False)(run_box_trial.py_func)
"""The same loop for agent kinds from the user's own modules (see `runner.compiled_trial`)."""


def run_box_kind_trial(kind: str, dynamics: BoxDynamics, *args: Any, held: HeldOut | None = None) -> int:
    """Call `run_box_trial` for agent kind `kind` on `dynamics`, compiled once per kind, environment id and
    argument types (as `runner.compiled_dynamics_trial.run_dynamics_kind_trial`). `args` are the agent's
    (arrays, hyper, counters, stream) and then the loop's arguments from the environment stream on; `held` the
    held-out transitions its function model is measured on (None: none measured)."""
    sizes = (dynamics.state_size, dynamics.obs_size, dynamics.step_limit)
    call = (dynamics.params, sizes, held_out_arrays(held, dynamics.obs_size), *args[4:])
    head = args[:4]
    arg_types = tuple(typeof(arg) for arg in (*head, *call))
    key = (kind, dynamics.env_id, arg_types)
    entry = _ENTRY_POINTS.get(key)
    if entry is None:
        loop = _run_box_trial_uncached if ":" in kind else run_box_trial
        entry = loop.compile((types.literal(kind), types.literal(dynamics.env_id), *arg_types))
        _ENTRY_POINTS[key] = entry
    return entry(kind, dynamics.env_id, *head, *call)
