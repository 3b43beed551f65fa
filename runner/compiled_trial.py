"""A whole trial in compiled code, for environments known as a transition table.

It does what `runner.trial` does step by step through gymnasium (acting, learning, planning, greedy evaluation
on a separate environment copy, metric rows), calling the very same agent kernels. The agent kind is passed as a
literal string and resolved to its kernels when the loop compiles: passing the kernels themselves as arguments
would make numba's disk cache miss in every new process (the key would hold the kernels' identities), so each
worker would compile the loop again. Only the environment's randomness differs from the gymnasium path: it
comes from a compiled stream instead of gymnasium's generator, so the two paths are the same experiment in
distribution, not bit for bit.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import numpy as np
from numba import literally, njit, typeof, types
from numba.extending import overload

from runner.agents import agent_class
from runner.agents.kernels import NO_REFCOUNTS
from runner.clock import cpu_clock, wall_clock
from runner.compiled_rows import record_point, record_times
from runner.streams import uniform

__all__ = ["run_kind_trial", "run_table_trial", "sample_outcome", "sample_start"]


def agent_act(kind, arrays, hyper, state, stream):
    """The act kernel of agent kind `kind` (a compile-time literal); callable only from compiled code."""
    raise NotImplementedError("agent_act is resolved inside compiled code")


def agent_observe(kind, arrays, hyper, counters, state, action, reward, next_state, terminated, stream):
    """The observe kernel of agent kind `kind` (a compile-time literal); callable only from compiled code."""
    raise NotImplementedError("agent_observe is resolved inside compiled code")


def agent_greedy(kind, arrays, hyper, state, stream):
    """The evaluation kernel of agent kind `kind` (a compile-time literal); callable only from compiled code."""
    raise NotImplementedError("agent_greedy is resolved inside compiled code")


def _kernel(kind, attribute: str, refcount_free: bool) -> Any:
    """Kernel `attribute` of the literal agent kind `kind` if it is compiled with reference counting
    (`refcount_free` False) or without (`runner.agents.kernels.NO_REFCOUNTS`, True), else None.

    Each kernel is called through a small compiled function of the same option: one with reference counts would
    take one on every array of the agent's tuple per call (about a third of a microsecond a call, measured), and
    one without would impose the option on every function that a counting kernel calls (numba passes it down).
    """
    if not isinstance(kind, types.StringLiteral):
        return None
    kernel = getattr(agent_class(kind.literal_value), attribute)
    free = getattr(kernel, "targetoptions", {}).get("_nrt") is False
    return kernel if free == refcount_free else None


def _choose(kind, attribute: str, refcount_free: bool) -> Any:
    """An implementation calling the action-choosing kernel `attribute` (act or greedy) of the literal kind."""
    kernel = _kernel(kind, attribute, refcount_free)
    if kernel is None:
        return None

    def impl(kind, arrays, hyper, state, stream):
        return kernel(arrays, hyper, state, stream)

    return impl


@overload(agent_greedy)
def _agent_greedy(kind, arrays, hyper, state, stream):
    return _choose(kind, "greedy_kernel", False)


@overload(agent_greedy, jit_options=NO_REFCOUNTS)
def _agent_greedy_free(kind, arrays, hyper, state, stream):
    return _choose(kind, "greedy_kernel", True)


def agent_model_error(kind, arrays, table):
    """The model-error kernel of agent kind `kind` (a compile-time literal); callable only from compiled code."""
    raise NotImplementedError("agent_model_error is resolved inside compiled code")


@overload(agent_model_error)
def _agent_model_error(kind, arrays, table):
    if not isinstance(kind, types.StringLiteral):
        return None
    kernel = agent_class(kind.literal_value).model_error_kernel

    def impl(kind, arrays, table):
        return kernel(arrays, table)

    return impl


def agent_predict(kind, arrays, state, action, grid, out):
    """The bin-model prediction kernel of agent kind `kind` (a compile-time literal); compiled code only."""
    raise NotImplementedError("agent_predict is resolved inside compiled code")


@overload(agent_predict)
def _agent_predict(kind, arrays, state, action, grid, out):
    if not isinstance(kind, types.StringLiteral):
        return None
    kernel = agent_class(kind.literal_value).predict_kernel

    def impl(kind, arrays, state, action, grid, out):
        return kernel(arrays, state, action, grid, out)

    return impl


def agent_function_predict(kind, arrays, observation, action, out):
    """The function-model prediction kernel of agent kind `kind` (a compile-time literal); compiled code only."""
    raise NotImplementedError("agent_function_predict is resolved inside compiled code")


@overload(agent_function_predict)
def _agent_function_predict(kind, arrays, observation, action, out):
    if not isinstance(kind, types.StringLiteral):
        return None
    kernel = agent_class(kind.literal_value).function_predict_kernel

    def impl(kind, arrays, observation, action, out):
        return kernel(arrays, observation, action, out)

    return impl


@overload(agent_act)
def _agent_act(kind, arrays, hyper, state, stream):
    return _choose(kind, "act_kernel", False)


@overload(agent_act, jit_options=NO_REFCOUNTS)
def _agent_act_free(kind, arrays, hyper, state, stream):
    return _choose(kind, "act_kernel", True)


def _observe(kind, refcount_free):
    kernel = _kernel(kind, "observe_kernel", refcount_free)
    if kernel is None:
        return None

    def impl(kind, arrays, hyper, counters, state, action, reward, next_state, terminated, stream):
        kernel(arrays, hyper, counters, state, action, reward, next_state, terminated, stream)

    return impl


@overload(agent_observe)
def _agent_observe(kind, arrays, hyper, counters, state, action, reward, next_state, terminated, stream):
    return _observe(kind, False)


@overload(agent_observe, jit_options=NO_REFCOUNTS)
def _agent_observe_free(kind, arrays, hyper, counters, state, action, reward, next_state, terminated, stream):
    return _observe(kind, True)


@njit(cache=True)
def sample_start(start_cdf, stream):
    """A start state drawn from the cumulative start distribution."""
    u = uniform(stream)
    for s in range(start_cdf.shape[0]):
        if u < start_cdf[s]:
            return s
    return start_cdf.shape[0] - 1


@njit(cache=True)
def sample_outcome(offsets, cdf, pair, stream):
    """Index of the outcome of a (state, action) pair; a pair with one outcome draws nothing."""
    first = offsets[pair]
    last = offsets[pair + 1] - 1
    if first == last:
        return first
    u = uniform(stream)
    for j in range(first, last):
        if u < cdf[j]:
            return j
    return last


@njit(cache=True)
def _past_deadline(watch, deadline):
    """Whether the wall clock is past `deadline`, looking at the clock only every so many calls.

    `watch` holds (calls left before the next look, calls between looks, time of the last look). The gap
    doubles while looks come less than 10 ms apart and halves when they come more than 100 ms apart, so a
    limit holds within about a tenth of a second whatever a step costs, and cheap steps rarely pay for the
    clock (a look leaves compiled code).
    """
    watch[0] -= 1.0
    if watch[0] > 0.0:
        return False
    now = wall_clock()
    since = now - watch[2]
    if since < 0.01 and watch[1] < 1048576.0:
        watch[1] *= 2.0
    elif since > 0.1 and watch[1] > 1.0:
        watch[1] = max(1.0, np.floor(watch[1] / 2.0))
    watch[0] = watch[1]
    watch[2] = now
    return now > deadline


@njit(cache=True)
def _evaluate(kind, arrays, hyper, table, step_cap, episodes, env_stream, policy_stream, watch, deadline):
    """Mean return of greedy episodes, and whether `deadline` (0: none) passed while they ran."""
    start_cdf, offsets, cdf, next_state, reward, terminated, step_limit = table
    n_actions = arrays[0].shape[1]
    cap = step_cap if step_limit == 0 or step_cap < step_limit else step_limit
    total = 0.0
    for _ in range(episodes):
        s = sample_start(start_cdf, env_stream)
        for _ in range(cap):
            if deadline > 0.0 and _past_deadline(watch, deadline):
                return total / episodes, True
            a = agent_greedy(literally(kind), arrays, hyper, s, policy_stream)
            j = sample_outcome(offsets, cdf, s * n_actions + a, env_stream)
            total += reward[j]
            s = next_state[j]
            if terminated[j]:
                break
    return total / episodes, False


@njit(cache=True)
def run_table_trial(
    kind,
    arrays,
    hyper,
    counters,
    agent_stream,
    tables,
    change_steps,
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
    """Run the trial of agent kind `kind`; fill `rows` (n_points x the columns of
    `runner.metrics.METRIC_COLUMNS`) and the episode arrays.

    `tables` holds one table per phase of the environment, each (start_cdf, offsets, cdf, next_state, reward,
    terminated, step_limit); the environment moves to phase k + 1 once `change_steps[k]` real steps are done
    (the last entry lies past the budget). Returns the number of finished training episodes, or -1 when the
    trial ran past `time_limit` seconds (0: no limit), in training or in an evaluation.
    """
    phase = 0
    table = tables[0]
    start_cdf, offsets, cdf, next_state, reward, terminated, step_limit = table
    q = arrays[0]
    n_actions = q.shape[1]
    started = wall_clock()
    deadline = started + time_limit if time_limit > 0 else 0.0
    watch = np.array([1.0, 64.0, started])
    cpu_started = cpu_clock()
    measured = 0.0
    earned = 0.0
    n_episodes = 0
    point = 0
    s = sample_start(start_cdf, env_stream)
    episode_return = 0.0
    episode_length = 0
    for step in range(budget + 1):
        if deadline > 0.0 and _past_deadline(watch, deadline):
            return -1
        if step > change_steps[phase]:
            phase += 1
            table = tables[phase]
            start_cdf, offsets, cdf, next_state, reward, terminated, step_limit = table
        if step > 0:
            a = agent_act(literally(kind), arrays, hyper, s, agent_stream)
            j = sample_outcome(offsets, cdf, s * n_actions + a, env_stream)
            s2 = next_state[j]
            done = terminated[j]
            agent_observe(literally(kind), arrays, hyper, counters, s, a, reward[j], s2, done, agent_stream)
            episode_return += reward[j]
            earned += reward[j]
            episode_length += 1
            s = s2
            if done or (step_limit > 0 and episode_length >= step_limit):
                episode_returns[n_episodes] = episode_return
                episode_lengths[n_episodes] = episode_length
                n_episodes += 1
                episode_return = 0.0
                episode_length = 0
                s = sample_start(start_cdf, env_stream)
        if step % every == 0:
            measuring = cpu_clock()
            value, late = _evaluate(
                kind, arrays, hyper, table, step_cap, eval_episodes, eval_env_stream, eval_stream, watch, deadline
            )
            if late:
                return -1
            tv, reward_error = agent_model_error(literally(kind), arrays, table)
            errors = (tv, reward_error, np.nan, np.nan, np.nan)
            record_point(rows, point, step, earned, n_episodes, value, episode_returns, window, counters, errors, phase)
            measured = record_times(rows, point, started, cpu_started, measuring, measured)
            point += 1
    return n_episodes


_ENTRY_POINTS: dict[tuple, Callable[..., int]] = {}

_run_table_trial_uncached = njit(cache=False)(run_table_trial.py_func)
"""The same loop for agent kinds from the user's own modules: numba's disk cache would not notice when the
user edits their kernels (it only watches the file of the cached function), so those loops compile afresh in
each process."""


def run_kind_trial(kind: str, *args: Any) -> int:
    """Call `run_table_trial(kind, *args)` from Python without numba's per-call literal dispatch.

    The loop is compiled (or loaded from the disk cache) once per kind and argument types, for exactly that
    signature with the kind as a literal, and then called straight through its entry point: dispatching by
    value would cost tens of milliseconds per trial, often more than the trial. The argument types are part of
    the key, so an entry point never sees arguments of other types (say, a different number of map phases).
    """
    arg_types = tuple(typeof(arg) for arg in args)
    key = (kind, arg_types)
    entry = _ENTRY_POINTS.get(key)
    if entry is None:
        loop = _run_table_trial_uncached if ":" in kind else run_table_trial
        entry = loop.compile((types.literal(kind), *arg_types))
        _ENTRY_POINTS[key] = entry
    return entry(kind, *args)
