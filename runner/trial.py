"""One trial: one environment, one agent, one seed, run for a budget of real environment steps.

Evaluation runs greedy episodes on a separate environment instance with its own stream; those steps never
count as samples. A metric row is written at step 0 and then every `every` real steps. A trial runs on one of
two paths: whole in compiled code when the agent kind has compiled kernels and the environment is a known
transition table (`runner.compiled_trial`) or has compiled dynamics seen through bins
(`runner.compiled_dynamics_trial`) or, for kinds that take boxes, seen as a box (`runner.compiled_box_trial`);
else step by step through gymnasium. Both call the same agent kernels.
"""

from __future__ import annotations

import functools
import json
import math
import time
from collections import deque
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import gymnasium as gym
import numpy as np

from runner.agents import (
    COUNTER_NAMES,
    NeuralAgent,
    OwnAgent,
    TabularAgent,
    agent_class,
    make_agent,
    observation_bounds,
)
from runner.compiled_box_trial import BoxDynamics, box_dynamics, run_box_kind_trial
from runner.compiled_dynamics_trial import CompiledDynamics, compiled_dynamics, run_dynamics_kind_trial
from runner.compiled_trial import run_kind_trial
from runner.envs.sources import build_env, environment_tags
from runner.envs.table import TransitionTable, change_steps, phase_tables, why_not_table_backed
from runner.errors import EnvironmentSourceError, TrialTimeout
from runner.metrics import HONESTY_COLUMNS, METRIC_COLUMNS, METRIC_INDEX
from runner.models.held_out import HeldOut, collect_held_out, held_out_columns
from runner.models.held_out_bins import bin_arrays, bin_predictor, held_out_arrays
from runner.neural import JAX_DYNAMICS_IDS
from runner.seeding import TrialStreams, held_out_sequence, trial_streams
from runner.streams import new_stream
from runner.tags import EnvTags

__all__ = [
    "METRIC_COLUMNS",
    "TRIAL_PATHS",
    "TrialResult",
    "environment_path",
    "evaluate_greedy",
    "resolve_path",
    "run_trial",
]

TRIAL_PATHS = ("auto", "compiled", "gymnasium")
"""`auto` takes the compiled path whenever the agent has compiled kernels (its tags say so) and the environment
is table-backed or has compiled dynamics (through bins, or as a box for kinds that take boxes)."""


@dataclass
class TrialResult:
    """Metric rows (one array per column, one entry per evaluation point), the training episodes and the
    action values the agent ended with (shape (n_states, n_actions); what its greedy evaluation policy reads)."""

    rows: dict[str, np.ndarray]
    episode_returns: np.ndarray
    episode_lengths: np.ndarray
    trial_path: str
    final_values: np.ndarray | None = None


def _reader(kind: str):
    """What the agent is handed as an observation: a whole number (discrete) or a float64 vector (box)."""
    if kind == "discrete":
        return int
    return lambda obs: np.asarray(obs, dtype=np.float64)


def evaluate_greedy(
    agent: TabularAgent | NeuralAgent | OwnAgent,
    env: gym.Env,
    episodes: int,
    step_cap: int,
    stream: np.ndarray,
    deadline: float = math.inf,
) -> float:
    """Mean undiscounted return of `episodes` greedy episodes, each cut at `step_cap` steps.

    Raises TrialTimeout once `time.perf_counter()` passes `deadline`, so a huge step cap cannot outlive a limit.
    """
    read = _reader("discrete" if isinstance(env.observation_space, gym.spaces.Discrete) else "box")
    total = 0.0
    for _ in range(episodes):
        state, _ = env.reset()
        for _ in range(step_cap):
            if time.perf_counter() > deadline:
                raise TrialTimeout("the trial ran past its wall-clock limit during an evaluation")
            state, reward, terminated, truncated, _ = env.step(agent.greedy(read(state), stream))
            total += float(reward)
            if terminated or truncated:
                break
    return total / episodes


@dataclass(frozen=True)
class _EnvFacts:
    tags: EnvTags
    not_table_reason: str | None
    tables: tuple[TransitionTable, ...] | None
    change_steps: tuple[int, ...]
    rules: tuple | None
    dynamics: CompiledDynamics | None
    not_dynamics_reason: str
    bin_layout: tuple | None  # (bins, grid) of `runner.models.held_out_bins.bin_arrays` for binned environments
    bounds: tuple[np.ndarray, np.ndarray] | None = None
    box: BoxDynamics | None = None
    not_box_reason: str = ""

    @property
    def table(self) -> TransitionTable | None:
        """The table the environment starts with (None when it is not table-backed)."""
        return self.tables[0] if self.tables else None


@functools.lru_cache(maxsize=16)
def _env_facts(env_json: str) -> _EnvFacts:
    """Tags and transition table of an environment spec, worked out once per process."""
    spec = json.loads(env_json)
    env = build_env(spec)
    try:
        tags = environment_tags(env, spec)
        reason = why_not_table_backed(env)
        tables = phase_tables(env) if reason is None else None
        rules = env.unwrapped.game_rules() if hasattr(env.unwrapped, "game_rules") else None
        steps = change_steps(env)
        dynamics = compiled_dynamics(spec, env)
        layout = bin_arrays(spec["bins"]["edges"], env.env.observation_space) if spec.get("bins") else None
        bounds = observation_bounds(env.observation_space)
        box = box_dynamics(spec, env)
    finally:
        env.close()
    box_facts = (None, box) if isinstance(box, str) else (box, "")
    if isinstance(dynamics, str):
        return _EnvFacts(tags, reason, tables, steps, rules, None, dynamics, layout, bounds, *box_facts)
    return _EnvFacts(tags, reason, tables, steps, rules, dynamics, "", layout, bounds, *box_facts)


def resolve_path(spec: dict[str, Any], path: str = "auto") -> str:
    """The path a trial will take: "compiled" or "gymnasium" ("auto" prefers compiled when it can: an agent kind
    with compiled kernels on a table-backed environment, on a binned one with compiled dynamics, or on compiled
    dynamics seen as a box by a kind that takes boxes)."""
    if path not in TRIAL_PATHS:
        raise ValueError(f"path must be one of {TRIAL_PATHS}, got {path!r}")
    facts = _env_facts(json.dumps(spec["env"], sort_keys=True))
    kind = spec["agent"]["kind"]
    tags = agent_class(kind).tags
    compiled_agent = tags.compiled
    box = facts.box is not None and "box" in tags.observations and facts.box.action_kind in tags.actions
    compiled_env = facts.table is not None or facts.dynamics is not None or box
    if tags.engine == "jax":
        compiled_env = box and spec["env"].get("id") in JAX_DYNAMICS_IDS
        if path == "compiled" and not compiled_env:
            raise EnvironmentSourceError(
                f"the compiled path of neural kinds needs an environment with JAX dynamics seen as a box "
                f"({', '.join(JAX_DYNAMICS_IDS)}, without bins); {facts.not_box_reason or 'this one has none'}"
            )
    if path == "compiled" and not compiled_env:
        raise EnvironmentSourceError(
            "the compiled path needs a table-backed environment or compiled dynamics seen through bins (or seen "
            f"as a box by kinds that take boxes): {facts.not_table_reason}; {facts.not_dynamics_reason}; "
            f"{facts.not_box_reason}"
        )
    if path == "compiled" and not compiled_agent:
        raise EnvironmentSourceError(f"the compiled path needs an agent kind with compiled kernels; {kind} has none")
    return "compiled" if path != "gymnasium" and compiled_env and compiled_agent else "gymnasium"


def environment_path(env_spec: dict[str, Any]) -> str:
    """How trials of agent kinds with compiled kernels run on this environment, in a few words (for `check`)."""
    facts = _env_facts(json.dumps(env_spec, sort_keys=True))
    if facts.table is not None:
        return "compiled kinds run whole trials compiled (table-backed)"
    if facts.dynamics is not None:
        return "compiled kinds run whole trials compiled (compiled dynamics through bins)"
    if facts.box is not None and facts.box.action_kind == "box":
        if env_spec.get("id") in JAX_DYNAMICS_IDS:
            return "neural kinds that take box actions run whole trials compiled (JAX dynamics)"
        return "trials run step by step"
    if facts.box is not None:
        return "compiled kinds that take boxes run whole trials compiled (compiled dynamics)"
    return "trials run step by step"


def run_trial(spec: dict[str, Any], path: str = "auto", time_limit: float = 0.0) -> TrialResult:
    """Run one trial spec (see `runner.plan`) on the compiled path when possible, or as `path` demands.

    A trial still running after `time_limit` wall seconds (0: no limit) raises TrialTimeout.
    """
    chosen = resolve_path(spec, path)
    facts = _env_facts(json.dumps(spec["env"], sort_keys=True))
    streams = trial_streams(spec["seed"])
    agent = make_agent(spec["agent"]["kind"], spec["agent"]["params"])
    if isinstance(agent, (OwnAgent, NeuralAgent)):
        env = build_env(spec["env"])
        agent.setup(env.observation_space, env.action_space, streams.agent)
        env.close()
    else:
        agent.setup(
            facts.tags.observation_size,
            facts.tags.action_size,
            streams.agent,
            facts.table.as_tuple() if facts.table else None,
            facts.rules,
            facts.bounds,
        )
    if chosen == "gymnasium":
        return _run_gymnasium(spec, agent, streams, time_limit, facts)
    if isinstance(agent, NeuralAgent):
        from runner.neural.trial import run_neural_trial

        held = _held_out(spec) if agent.has_function_model() else None
        return run_neural_trial(spec, facts.box, agent, streams, time_limit, held=held)
    return _run_compiled(spec, facts, agent, streams, time_limit)


def _run_compiled(
    spec: dict[str, Any], facts: _EnvFacts, agent: TabularAgent, streams: TrialStreams, time_limit: float
) -> TrialResult:
    ev = spec["evaluation"]
    budget = int(spec["real_steps"])
    rows = np.zeros((budget // ev["every"] + 1, len(METRIC_COLUMNS)))
    rows[:, [METRIC_INDEX[name] for name in HONESTY_COLUMNS]] = np.nan
    returns = np.zeros(budget, dtype=np.float64)
    lengths = np.zeros(budget, dtype=np.int64)
    agent_args = (agent.arrays_, agent.hyper_, agent.counters_, agent.stream_)
    loop_args = (
        new_stream(streams.env),
        new_stream(streams.eval_env),
        streams.evaluation,
        budget,
        int(ev["every"]),
        int(ev["episodes"]),
        int(ev["step_cap"]),
        int(ev["training_window"]),
        float(time_limit),
        rows,
        returns,
        lengths,
    )
    kind = spec["agent"]["kind"]
    if facts.tables:
        tables = tuple(t.as_tuple() for t in facts.tables)
        changes = np.array([*facts.change_steps, budget + 1], dtype=np.int64)
        n_episodes = run_kind_trial(kind, *agent_args, tables, changes, *loop_args)
    elif facts.dynamics is not None:
        held = _held_out(spec) if agent.has_bin_model() else None
        held_arrays = held_out_arrays(held, facts.dynamics.obs_size)
        n_episodes = run_dynamics_kind_trial(kind, facts.dynamics, held_arrays, *agent_args, *loop_args)
    else:
        held = _held_out(spec) if agent.has_function_model() else None
        n_episodes = run_box_kind_trial(kind, facts.box, *agent_args, *loop_args, held=held)
    if n_episodes < 0:
        raise TrialTimeout(f"the trial ran past its limit of {time_limit:g} wall seconds")
    return TrialResult(
        rows={name: rows[:, i].copy() for i, name in enumerate(METRIC_COLUMNS)},
        episode_returns=returns[:n_episodes].copy(),
        episode_lengths=lengths[:n_episodes].copy(),
        trial_path="compiled",
        final_values=agent.arrays_[0].copy(),
    )


def _predictor(
    agent: TabularAgent | NeuralAgent | OwnAgent, facts: _EnvFacts
) -> Callable[[np.ndarray, Any], Any] | None:
    """The agent's `predict(observation, action) -> (next observation, reward)` that the trial measures on
    held-out real transitions, or None: on box observations an own agent with `predict` or a kind whose tags say
    `learned_model="function"`; on bins a kind with a learned table model (the expected bin centre,
    `runner.models.bin_prediction`)."""
    if facts.bin_layout is not None:
        return (
            bin_predictor(agent, *facts.bin_layout)
            if isinstance(agent, TabularAgent) and agent.has_bin_model()
            else None
        )
    if facts.tags.observation != "box":
        return None
    if isinstance(agent, OwnAgent):
        return agent.predict if agent.has_model() else None
    if isinstance(agent, NeuralAgent):
        return agent.predict if agent.has_function_model() else None
    function_model = agent.tags.learned_model == "function" and callable(getattr(agent, "predict", None))
    return agent.predict if function_model else None


def _held_out(spec: dict[str, Any]) -> HeldOut:
    """The trial's held-out real transitions, on a copy of its environment that gives box observations."""
    held_env = build_env({**spec["env"], "bins": None})
    try:
        return collect_held_out(held_env, held_out_sequence(spec["seed"]))
    finally:
        held_env.close()


def _run_gymnasium(
    spec: dict[str, Any],
    agent: TabularAgent | NeuralAgent | OwnAgent,
    streams: TrialStreams,
    time_limit: float,
    facts: _EnvFacts,
) -> TrialResult:
    ev = spec["evaluation"]
    budget = int(spec["real_steps"])
    env = build_env(spec["env"])
    eval_env = build_env(spec["env"])
    eval_env.reset(seed=streams.reset_seed(streams.eval_env))
    n_points = budget // ev["every"] + 1
    rows = {name: np.zeros(n_points, dtype=np.float64) for name in METRIC_COLUMNS}
    returns: list[float] = []
    lengths: list[int] = []
    recent: deque[float] = deque(maxlen=ev["training_window"])
    tables = [t.as_tuple() for t in facts.tables] if facts.tables else None
    read = _reader(facts.tags.observation)
    predict = _predictor(agent, facts)
    honesty = getattr(agent, "model_honesty", None) if facts.tags.observation == "box" and predict else None
    held = _held_out(spec) if predict is not None or honesty is not None else None
    phase = 0
    earned = 0.0
    start = time.perf_counter()
    deadline = start + time_limit if time_limit > 0 else math.inf
    cpu_start = time.process_time()
    measured = 0.0

    def record(point: int, steps: int) -> None:
        nonlocal measured
        measuring = time.process_time()
        rows["cpu_seconds"][point] = measuring - cpu_start - measured
        rows["real_steps"][point] = steps
        rows["reward_earned"][point] = earned
        rows["episodes"][point] = len(returns)
        rows["eval_return"][point] = evaluate_greedy(
            agent, eval_env, ev["episodes"], ev["step_cap"], streams.evaluation, deadline
        )
        rows["train_return"][point] = np.mean(recent) if recent else np.nan
        for name, value in zip(COUNTER_NAMES, agent.counters_, strict=True):
            rows[name][point] = value
        errors = agent.model_error(tables[phase]) if tables is not None else (np.nan, np.nan)
        rows["model_tv_error"][point], rows["model_reward_error"][point] = errors
        for name in ("model_error_1", "model_error_5", "model_error_20", *HONESTY_COLUMNS):
            rows[name][point] = np.nan
        for name, value in held_out_columns(held, honesty, predict).items():
            rows[name][point] = value
        rows["env_phase"][point] = phase
        rows["wall_seconds"][point] = time.perf_counter() - start
        measured += time.process_time() - measuring

    try:
        record(0, 0)
        state = read(env.reset(seed=streams.reset_seed(streams.env))[0])
        episode_return, episode_length, point = 0.0, 0, 1
        for step in range(1, budget + 1):
            if time.perf_counter() > deadline:
                raise TrialTimeout(f"the trial ran past its limit of {time_limit:g} wall seconds")
            if phase < len(facts.change_steps) and step > facts.change_steps[phase]:
                phase += 1
                env.unwrapped.set_phase(phase)
                eval_env.unwrapped.set_phase(phase)
            action = agent.act(state)
            next_state, reward, terminated, truncated, _ = env.step(action)
            next_state = read(next_state)
            agent.observe(state, action, float(reward), next_state, bool(terminated), bool(truncated))
            episode_return += float(reward)
            earned += float(reward)
            episode_length += 1
            state = next_state
            if terminated or truncated:
                returns.append(episode_return)
                lengths.append(episode_length)
                recent.append(episode_return)
                episode_return, episode_length = 0.0, 0
                state = read(env.reset()[0])
            if step % ev["every"] == 0:
                record(point, step)
                point += 1
    finally:
        env.close()
        eval_env.close()
    return TrialResult(
        rows=rows,
        episode_returns=np.asarray(returns, dtype=np.float64),
        episode_lengths=np.asarray(lengths, dtype=np.int64),
        trial_path="gymnasium",
        final_values=agent.arrays_[0].copy() if isinstance(agent, TabularAgent) else None,
    )
