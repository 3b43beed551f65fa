"""A whole trial of a neural kind as compiled JAX loops, on an environment with JAX dynamics.

Between two evaluation points the trial runs as `lax.scan` chunks of at most `CHUNK_STEPS` real steps, each one
compiled call doing, per step, the agent's action, the environment step, the buffer write and the due updates;
an evaluation is one compiled call playing all its greedy episodes as a batch (`vmap`) on a separate copy of the
environment. So Python dispatch is paid once per chunk, not once per step. The wall-clock limit is checked between
chunks. A core with `refit_steps(budget)` and `refit(state)` (model-predictive control) has its host work (a model
refit) run between chunks, which end at those steps. Rows fill `runner.metrics.METRIC_COLUMNS` as the other paths
do: for a kind that learns a function model (`has_function_model`), the model columns on the held-out set the
trial passes in (`runner.models.held_out.held_out_columns`: the agent's `model_honesty` once it gives one, else the
errors of its `predict`), NaN otherwise; `cpu_seconds` excludes evaluation and the model errors but includes
refits, and compiling happens before the clocks start.

Randomness: the agent's key comes from the trial's agent stream, the training environment's from its env stream and
the evaluation environment's from its own (`runner.seeding`), so two runs of one spec give the same rows bit for
bit on the same machine. Episodes are truncated at the environment's step limit (bootstrapping), as gymnasium's
`TimeLimit` does.
"""

from __future__ import annotations

import functools
import itertools
import math
import os
import time
from pathlib import Path
from typing import Any, NamedTuple

import jax
import jax.numpy as jnp
import numpy as np

from runner.agents.neural import NeuralAgent
from runner.compiled_box_trial import BoxDynamics
from runner.errors import TrialTimeout
from runner.metrics import METRIC_COLUMNS
from runner.models.held_out import HeldOut, held_out_columns
from runner.neural.dynamics import JaxDynamics, jax_dynamics
from runner.seeding import TrialStreams, jax_key_data

__all__ = ["CACHE_VARIABLE", "CHUNK_STEPS", "run_neural_trial"]

CHUNK_STEPS = 2048
"""Most real steps in one compiled call: the time limit is checked at least this often (a chunk of a 2x64
Q-network with one update per step takes a fraction of a second)."""


CACHE_VARIABLE = "STEPMETER_JAX_CACHE"
"""Folder of JAX's persistent compilation cache for the neural trials (default `~/.cache/stepmeter/jax`, or under
`XDG_CACHE_HOME`); `off` keeps compiled loops in memory only. Compiling a trial's loops takes seconds, so later
processes (workers, later runs) load them from here, as numba's cache does for the tabular kinds."""


@functools.cache
def _use_compilation_cache() -> None:
    """Point JAX's persistent compilation cache at our folder, unless the user set one or turned ours off."""
    chosen = os.environ.get(CACHE_VARIABLE, "")
    if chosen == "off" or jax.config.jax_compilation_cache_dir:
        return
    base = Path(os.environ.get("XDG_CACHE_HOME") or Path.home() / ".cache")
    jax.config.update("jax_compilation_cache_dir", chosen or str(base / "stepmeter" / "jax"))


class _Carry(NamedTuple):
    agent: Any
    state: jax.Array
    obs: jax.Array
    episode_return: jax.Array
    episode_length: jax.Array
    key: jax.Array


def _chunk_function(core: Any, env: JaxDynamics, params: jax.Array, step_limit: int, length: int):
    """The compiled call running `length` real steps; it returns the carry and per step (episode ended, its
    return, its length, the step's reward)."""

    def one_step(carry: _Carry, _: None) -> tuple[_Carry, tuple[jax.Array, ...]]:
        agent, action = core.act(carry.agent, carry.obs)
        state, reward, terminated = env.step(carry.state, action, params)
        next_obs = env.observation(state, params)
        agent = core.observe(agent, carry.obs, action, reward.astype(jnp.float32), next_obs, terminated)
        episode_return = carry.episode_return + reward
        episode_length = carry.episode_length + 1
        ended = terminated | (episode_length >= step_limit)
        key, reset_key = jax.random.split(carry.key)
        start = env.reset(reset_key, params)
        state = jnp.where(ended, start, state)
        obs = jnp.where(ended, env.observation(start, params), next_obs)
        out = (ended, episode_return, episode_length, reward)
        zero_return, zero_length = jnp.zeros_like(episode_return), jnp.zeros_like(episode_length)
        carry = _Carry(
            agent,
            state,
            obs,
            jnp.where(ended, zero_return, episode_return),
            jnp.where(ended, zero_length, episode_length),
            key,
        )
        return carry, out

    def chunk(carry: _Carry) -> tuple[_Carry, tuple[jax.Array, ...]]:
        return jax.lax.scan(one_step, carry, None, length=length)

    return chunk


def _evaluation_function(core: Any, env: JaxDynamics, params: jax.Array, episodes: int, cap: int):
    """The compiled call playing `episodes` greedy episodes at once, each cut at `cap` steps: the mean return."""

    def evaluate(online: Any, key: jax.Array) -> jax.Array:
        starts = jax.vmap(env.reset, in_axes=(0, None))(jax.random.split(key, episodes), params)
        observe = jax.vmap(env.observation, in_axes=(0, None))
        step = jax.vmap(env.step, in_axes=(0, 0, None))

        def running(loop: tuple[jax.Array, ...]) -> jax.Array:
            _, _, active, _, t = loop
            return jnp.any(active) & (t < cap)

        def advance(loop: tuple[jax.Array, ...]) -> tuple[jax.Array, ...]:
            states, obs, active, totals, t = loop
            actions = core.greedy(online, obs)
            states, rewards, terminated = step(states, actions, params)
            totals = totals + jnp.where(active, rewards, 0.0)
            return states, observe(states, params), active & ~terminated, totals, t + 1

        start = (starts, observe(starts, params), jnp.ones(episodes, bool), jnp.zeros(episodes), jnp.int64(0))
        return jax.lax.while_loop(running, advance, start)[3].mean()

    return evaluate


_COMPILED: dict[tuple, Any] = {}
"""Compiled chunks and evaluations by (what, core, env id, env params, step limit, sizes): later trials of one
setting in this process reuse them."""


def _compiled(key: tuple, carry: _Carry, eval_key: jax.Array) -> Any:
    """The compiled call `key` names (a chunk of `key[-1]` steps, or an evaluation of `key[-2]` episodes cut at
    `key[-1]` steps), compiled on first use for the shapes of `carry`."""
    if key not in _COMPILED:
        what, core, env_id, params, step_limit = key[:5]
        env, env_params = jax_dynamics(env_id), jnp.asarray(params, dtype=jnp.float64)
        if what == "chunk":
            call = jax.jit(_chunk_function(core, env, env_params, step_limit, key[5]), donate_argnums=0)
            _COMPILED[key] = call.lower(carry).compile()
        else:
            call = jax.jit(_evaluation_function(core, env, env_params, key[5], key[6]))
            _COMPILED[key] = call.lower(carry.agent.online, eval_key).compile()
    return _COMPILED[key]


def _chunk_plan(budget: int, every: int, breaks: list[int] | tuple[int, ...] = ()) -> list[list[int]]:
    """The chunk lengths between consecutive evaluation points (the last entry: the steps after the last point,
    when `every` does not divide the budget); a chunk also ends at every step in `breaks` (the agent's host work,
    such as a model refit, runs there)."""
    plan = []
    for start in range(0, budget, every):
        end = min(start + every, budget)
        cuts = sorted({start, end, *(b for b in breaks if start < b < end)})
        sizes = []
        for left, right in itertools.pairwise(cuts):
            span = right - left
            sizes += [CHUNK_STEPS] * (span // CHUNK_STEPS) + ([span % CHUNK_STEPS] if span % CHUNK_STEPS else [])
        plan.append(sizes)
    return plan


def _key(sequence: np.random.SeedSequence) -> jax.Array:
    return jax.random.wrap_key_data(jax_key_data(sequence))


def run_neural_trial(
    spec: dict[str, Any],
    box: BoxDynamics,
    agent: NeuralAgent,
    streams: TrialStreams,
    time_limit: float,
    held: HeldOut | None = None,
) -> Any:
    """Run the trial of a set-up neural agent on `box`'s environment in compiled chunks; the `TrialResult` of
    `runner.trial` (rows, training episodes, the path). `held`: the held-out real transitions the agent's model is
    measured on (None: no model errors). Raises TrialTimeout past `time_limit` seconds (0: none)."""
    _use_compilation_cache()
    with jax.enable_x64(True):
        return _run(spec, box, agent, streams, time_limit, held)


def _run(
    spec: dict[str, Any],
    box: BoxDynamics,
    agent: NeuralAgent,
    streams: TrialStreams,
    time_limit: float,
    held: HeldOut | None,
) -> Any:
    from runner.trial import TrialResult

    ev = spec["evaluation"]
    budget, every = int(spec["real_steps"]), int(ev["every"])
    window = int(ev["training_window"])
    env = jax_dynamics(box.env_id)
    params = jnp.asarray(box.params, dtype=jnp.float64)
    core = agent.core_
    started = time.perf_counter()
    deadline = started + time_limit if time_limit > 0 else math.inf

    env_key, start_key = jax.random.split(_key(streams.env))
    start = env.reset(start_key, params)
    carry = _Carry(agent.state_, start, env.observation(start, params), jnp.float64(0.0), jnp.int64(0), env_key)
    carry = jax.tree_util.tree_map(jnp.array, carry)  # every leaf its own buffer: the chunks donate the carry
    eval_key = _key(streams.eval_env)
    cap = min(int(ev["step_cap"]), box.step_limit)
    setting = (core, box.env_id, tuple(box.params.tolist()), box.step_limit)
    evaluate = _compiled(("evaluation", *setting, int(ev["episodes"]), cap), carry, eval_key)
    refit_steps = core.refit_steps(budget) if hasattr(core, "refit_steps") else []
    plan = _chunk_plan(budget, every, refit_steps)
    refit_at = set(refit_steps)
    predict = agent.predict if held is not None else None
    honesty = getattr(agent, "model_honesty", None) if held is not None else None
    chunks = {n: _compiled(("chunk", *setting, n), carry, eval_key) for sizes in plan for n in sizes}

    n_points = budget // every + 1
    rows = {name: np.full(n_points, np.nan) for name in METRIC_COLUMNS}
    returns: list[float] = []
    episode_lengths: list[int] = []
    earned = 0.0
    cpu_start = time.process_time()
    measured = 0.0

    def record(point: int, steps: int) -> None:
        nonlocal measured, eval_key
        measuring = time.process_time()
        rows["cpu_seconds"][point] = measuring - cpu_start - measured
        eval_key, this_key = jax.random.split(eval_key)
        rows["real_steps"][point] = steps
        rows["episodes"][point] = len(returns)
        rows["eval_return"][point] = float(evaluate(carry.agent.online, this_key))
        rows["train_return"][point] = np.mean(returns[-window:]) if returns else np.nan
        rows["reward_earned"][point] = earned
        counts = np.asarray(core.counters(carry.agent))
        rows["real_updates"][point], rows["planning_updates"][point], rows["model_updates"][point] = counts
        if held is not None:
            agent.state_ = carry.agent
        for name, value in held_out_columns(held, honesty, predict).items():
            rows[name][point] = value
        rows["env_phase"][point] = 0
        rows["wall_seconds"][point] = time.perf_counter() - started
        measured += time.process_time() - measuring

    record(0, 0)
    steps = 0
    for point, sizes in enumerate(plan, start=1):
        for n in sizes:
            if time.perf_counter() > deadline:
                raise TrialTimeout(f"the trial ran past its limit of {time_limit:g} wall seconds")
            carry, (ended, episode_returns, episode_steps, rewards) = chunks[n](carry)
            ended = np.asarray(ended)
            returns.extend(np.asarray(episode_returns)[ended].tolist())
            episode_lengths.extend(np.asarray(episode_steps)[ended].tolist())
            earned += float(np.asarray(rewards).sum())
            steps += n
            if steps in refit_at:
                carry = carry._replace(agent=core.refit(carry.agent))
        if point < n_points:
            record(point, steps)
    agent.state_ = carry.agent
    agent.counters_[:] = np.asarray(core.counters(carry.agent))
    return TrialResult(
        rows=rows,
        episode_returns=np.asarray(returns, dtype=np.float64),
        episode_lengths=np.asarray(episode_lengths, dtype=np.int64),
        trial_path="compiled",
    )
