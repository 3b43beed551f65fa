"""Contract checks that any agent kind or environment must pass; users can run them on their own additions.

`agent_checks(kind)` and `environment_checks(spec)` list small named checks; `check_agent` and
`check_environment` run them all and raise `ContractError` on the first breach.
"""

from __future__ import annotations

import json
from collections.abc import Callable, Iterator
from typing import Any

import numpy as np

from runner.agents import AGENTS, OwnAgent, TabularAgent, agent_class, setup_agent
from runner.envs.sources import build_env, env_sizes, environment_tags
from runner.errors import EnvironmentSourceError
from runner.metrics import METRIC_COLUMNS, TIMING_COLUMNS
from runner.planning.negamax import solve_negamax
from runner.streams import new_stream
from runner.trial import resolve_path, run_trial
from runner.trial_spec import TrialSpec

__all__ = ["ContractError", "agent_checks", "check_agent", "check_environment", "environment_checks"]

CORRIDOR = {
    "source": "grid",
    "map": "S...G",
    "slip": 0.0,
    "step_reward": 0.0,
    "goal_reward": 1.0,
    "hazard_penalty": -1.0,
    "hazard_ends": True,
    "step_limit": 50,
}
"""A trivial task: walk east to the goal. Any learner must end up preferring east everywhere."""

SLIPPERY = {
    "source": "grid",
    "map": "S.~.\n.#~X\n...G",
    "slip": 0.3,
    "step_reward": -0.01,
    "goal_reward": 1.0,
    "hazard_penalty": -1.0,
    "hazard_ends": True,
    "step_limit": 30,
}
"""A small stochastic task with a hazard, for determinism and accounting checks."""

GAME = {
    "source": "entry",
    "entry": "runner.envs.takeaway:TakeAwayGame",
    "options": {"heaps": [2, 3, 4], "opponent": "random"},
    "step_limit": None,
}
"""A small take-away game (60 positions) standing in for the grid tasks for kinds that search a game's rules
(`needs_rules = True`): the grid maps have no game rules to search."""

LINE = {"source": "entry", "entry": "runner.envs.line:LineWalk", "options": {}, "step_limit": 50}
"""The corridor for kinds that take box observations: walk east along [0, 1] (`runner.envs.line`)."""

LINE_CONTINUOUS = {**LINE, "options": {"continuous": True}}
"""The same line walked with a box action (a push in [-1, 1]; east is positive)."""

_EAST = 1
_LINE_POINTS = (0.0, 0.25, 0.5, 0.75)

AnyAgent = TabularAgent | OwnAgent


def _task(cls: type[AnyAgent], usual: dict) -> dict:
    """The environment a check runs a kind on, chosen by its tags: the usual grid task, GAME for kinds that need
    game rules, the line walk for kinds that take only box observations."""
    if cls.needs_rules():
        return GAME
    if "discrete" not in cls.tags.observations:
        return LINE if "discrete" in cls.tags.actions else LINE_CONTINUOUS
    return usual


def _kind_name(cls: type[AnyAgent]) -> str:
    """What a trial spec names the class by: its registered kind, else its 'module:Class' entry point."""
    if issubclass(cls, OwnAgent):
        return cls.kind
    entry = f"{cls.__module__}:{cls.__qualname__}"
    return cls.kind if AGENTS.entries.get(cls.kind) == entry else entry


class ContractError(AssertionError):
    """An agent kind or environment breaks the contract; the message says which rule and what was seen."""


def _reader(env: Any) -> Callable[[Any], Any]:
    """Observations as the trial loop hands them to agents: whole numbers, or float64 vectors."""
    if env.observation_space.__class__.__name__ == "Discrete":
        return int
    return lambda obs: np.asarray(obs, dtype=np.float64)


def _plain(action: Any) -> Any:
    """An action as a comparable value (an int, or a tuple of floats for box actions)."""
    if np.ndim(action) == 0:
        return action.item() if isinstance(action, np.generic) else action
    return tuple(np.asarray(action, dtype=np.float64).ravel().tolist())


def _drive(agent: AnyAgent, env_spec: dict, steps: int, seed: int) -> list[Any]:
    """Set the agent up on the environment and learn for `steps` real steps; return the actions taken."""
    env = build_env(env_spec)
    rules = env.unwrapped.game_rules() if hasattr(env.unwrapped, "game_rules") else None
    setup_agent(agent, env, seed, rules=rules)
    read = _reader(env)
    state = read(env.reset(seed=seed)[0])
    actions = []
    for _ in range(steps):
        action = agent.act(state)
        actions.append(_plain(action))
        nxt, reward, terminated, truncated, _ = env.step(action)
        nxt = read(nxt)
        agent.observe(state, action, float(reward), nxt, bool(terminated), bool(truncated))
        state = read(env.reset()[0]) if terminated or truncated else nxt
    env.close()
    return actions


def _probes(agent: AnyAgent) -> list[Any]:
    """Observations to ask an agent's greedy policy about: every state, or 20 points of a bounded box."""
    if isinstance(agent, TabularAgent):
        if "box" not in agent.tags.observations:
            return list(range(agent.n_states_))
        bounds = agent.bounds_
    elif agent.observation_space_.__class__.__name__ == "Discrete":
        return list(range(int(agent.observation_space_.n)))
    else:
        bounds = (agent.observation_space_.low, agent.observation_space_.high)
    low = np.maximum(np.asarray(bounds[0], dtype=np.float64), -10.0)
    high = np.minimum(np.asarray(bounds[1], dtype=np.float64), 10.0)
    rng = np.random.default_rng(0)
    return [rng.uniform(low, high) for _ in range(20)]


def _learned_state(agent: AnyAgent) -> list[Any]:
    """What two equally seeded agents must agree on: their arrays, or (own agents) their greedy actions."""
    if isinstance(agent, TabularAgent):
        return [a.tolist() for a in agent.arrays_]
    stream = new_stream(0)
    return [_plain(agent.greedy(obs, stream)) for obs in _probes(agent)]


def _trial_spec(kind: str, params: dict, env_spec: dict, seed: int) -> dict[str, Any]:
    """A short trial of the kind on an environment, as `runner.plan` would make it."""
    return TrialSpec.build(
        env_spec, kind, params, seed, 600, every=200, episodes=3, step_cap=30, training_window=5
    ).as_dict()


def _check_params_round_trip(cls: type[AnyAgent], params: dict) -> None:
    agent = cls(**params)
    got = agent.get_params()
    if set(got) != {p.name for p in cls.schema}:
        raise ContractError(f"get_params() keys {sorted(got)} differ from the schema's {[p.name for p in cls.schema]}")
    if cls(**got).get_params() != got:
        raise ContractError("an agent rebuilt from get_params() has different parameters")
    try:
        json.dumps(got)
    except TypeError as err:
        raise ContractError(f"parameters must be JSON values so trial specs can store them: {err}") from None


def _check_same_seed_same_run(cls: type[AnyAgent], params: dict) -> None:
    a, b = cls(**params), cls(**params)
    task = _task(cls, SLIPPERY)
    if _drive(a, task, 400, seed=7) != _drive(b, task, 400, seed=7):
        raise ContractError("two runs with the same seed chose different actions")
    if _learned_state(a) != _learned_state(b):
        raise ContractError("two runs with the same seed learned different arrays (or greedy policies)")


def _check_different_seeds_differ(cls: type[AnyAgent], params: dict) -> None:
    task = _task(cls, SLIPPERY)
    if _drive(cls(**params), task, 400, seed=1) == _drive(cls(**params), task, 400, seed=2):
        raise ContractError("runs with seeds 1 and 2 chose exactly the same 400 actions; is the stream used?")


def _check_actions_valid(cls: type[AnyAgent], params: dict) -> None:
    agent = cls(**params)
    task = _task(cls, SLIPPERY)
    actions = _drive(agent, task, 300, seed=3)
    stream = new_stream(0)
    greedy = [_plain(agent.greedy(s, stream)) for s in _probes(agent)]
    env = build_env(task)
    space = env.action_space
    env.close()
    bad = [a for a in actions + greedy if not space.contains(np.asarray(a, dtype=space.dtype).reshape(space.shape))]
    if bad:
        raise ContractError(f"actions outside the action space {space}: {bad[:5]}")


def _east(action: Any) -> bool:
    return action == _EAST if np.ndim(action) == 0 else float(np.asarray(action).ravel()[0]) > 0


def _check_learning_changes_behaviour(cls: type[AnyAgent], params: dict) -> None:
    if cls.needs_rules():
        _check_plays_the_game(cls, params)
        return
    agent = cls(**params)
    task = _task(cls, CORRIDOR)
    _drive(agent, task, 3000, seed=5)
    stream = new_stream(11)
    points = [np.array([x]) for x in _LINE_POINTS] if task is not CORRIDOR else list(range(4))
    for state in points:
        chosen = [_plain(agent.greedy(state, stream)) for _ in range(20)]
        if not all(_east(a) for a in chosen):
            raise ContractError(f"after 3000 steps in a corridor the greedy actions at {state} are {set(chosen)}")


def _check_plays_the_game(cls: type[AnyAgent], params: dict) -> None:
    """For kinds that search a game (their behaviour comes from search, not learning): after 300 steps of GAME,
    the greedy move from at least 90% of the positions won for the player to move (exact negamax solve) leads to
    a position lost for the opponent."""
    agent = cls(**params)
    _drive(agent, GAME, 300, seed=5)
    next_position, is_terminal, terminal_value = agent.rules_[0], agent.rules_[1], agent.rules_[2]
    value = solve_negamax(next_position, is_terminal, terminal_value)
    stream = new_stream(11)
    won = [s for s in range(agent.n_states_) if not is_terminal[s] and value[s] > 0]
    good = sum(value[next_position[s, agent.greedy(s, stream)]] < 0 for s in won)
    if good < 0.9 * len(won):
        raise ContractError(f"the greedy move keeps the win in only {good} of {len(won)} won positions of GAME")


def _check_params_unchanged(cls: type[AnyAgent], params: dict) -> None:
    agent = cls(**params)
    before = agent.get_params()
    _drive(agent, _task(cls, SLIPPERY), 300, seed=4)
    if agent.get_params() != before:
        raise ContractError("learning changed the agent's parameters")


def _check_counters_add_up(cls: type[AnyAgent], params: dict) -> None:
    agent = cls(**params)
    _drive(agent, _task(cls, SLIPPERY), 500, seed=6)
    problems = agent.counter_problems(500)
    if problems:
        raise ContractError("counters do not add up: " + "; ".join(problems))


def _check_trial_rows_reproducible(cls: type[AnyAgent], params: dict) -> None:
    """On every path the trial can take (compiled when its tags and the task allow it, and step by step)."""
    columns = [c for c in METRIC_COLUMNS if c not in TIMING_COLUMNS]
    kind, task = _kind_name(cls), _task(cls, SLIPPERY)
    for path in dict.fromkeys((resolve_path(_trial_spec(kind, params, task, seed=9)), "gymnasium")):
        first = run_trial(_trial_spec(kind, params, task, seed=9), path).rows
        again = run_trial(_trial_spec(kind, params, task, seed=9), path).rows
        other = run_trial(_trial_spec(kind, params, task, seed=10), path).rows
        for c in columns:
            if not np.array_equal(first[c], again[c], equal_nan=True):
                raise ContractError(f"on the {path} path the same trial spec gave different {c!r} rows")
        if all(np.array_equal(first[c], other[c], equal_nan=True) for c in columns):
            raise ContractError(f"on the {path} path trials with seeds 9 and 10 gave identical metric rows")


def _check_model_predicts(cls: type[AnyAgent], params: dict) -> None:
    """Kinds whose tags say they learn a function model predict an observation of the right shape and a finite
    reward for every probe (the trial measures their error on held-out transitions)."""
    if cls.tags.learned_model != "function":
        return
    agent = cls(**params)
    task = _task(cls, SLIPPERY)
    _drive(agent, task, 200, seed=8)
    env = build_env(task)
    space = env.observation_space
    env.close()
    for obs in _probes(agent):
        predicted, reward = agent.predict(obs, agent.greedy(obs, new_stream(0)))
        if np.shape(predicted) != space.shape or not np.isfinite(float(reward)):
            raise ContractError(f"predict gave {predicted!r} and reward {reward!r} for {obs!r}")


_AGENT_CHECKS: tuple[Callable[[type[AnyAgent], dict], None], ...] = (
    _check_params_round_trip,
    _check_same_seed_same_run,
    _check_different_seeds_differ,
    _check_actions_valid,
    _check_learning_changes_behaviour,
    _check_params_unchanged,
    _check_counters_add_up,
    _check_trial_rows_reproducible,
    _check_model_predicts,
)


def agent_checks(kind: str, params: dict | None = None) -> Iterator[tuple[str, Callable[[], None]]]:
    """(check name, zero-argument callable) for every contract check of an agent kind. Without `params`, a kind's
    `check_params` (neural kinds: a smaller network that learns the checks' short tasks) or its defaults."""
    cls = agent_class(kind)
    given = params if params is not None else dict(getattr(cls, "check_params", {}))
    full = cls(**given).get_params()
    for check in _AGENT_CHECKS:
        yield check.__name__.removeprefix("_check_"), lambda check=check: check(cls, full)


def check_agent(kind: str, params: dict | None = None) -> None:
    """Run every agent contract check; raise ContractError naming the first one that fails."""
    for name, run in agent_checks(kind, params):
        try:
            run()
        except ContractError as err:
            raise ContractError(f"{kind}: {name}: {err}") from None


def _check_spaces(spec: dict) -> None:
    env = build_env(spec)
    try:
        environment_tags(env, spec)
    except EnvironmentSourceError as err:
        raise ContractError(str(err)) from None
    finally:
        env.close()


def _valid_observation(env: Any, obs: Any) -> bool:
    space = env.observation_space
    if space.__class__.__name__ == "Discrete":
        return 0 <= int(obs) < int(space.n)
    values = np.asarray(obs)
    return values.shape == space.shape and bool(np.all(np.isfinite(values)))


def _check_reset_and_step_types(spec: dict) -> None:
    env = build_env(spec)
    state, info = env.reset(seed=0)
    if not _valid_observation(env, state) or not isinstance(info, dict):
        raise ContractError(
            f"reset() must give an observation of {env.observation_space} and an info dict, got {state!r}"
        )
    env.action_space.seed(0)
    for _ in range(200):
        out = env.step(env.action_space.sample())
        if len(out) != 5:
            raise ContractError(
                f"step() must return 5 values (state, reward, terminated, truncated, info), got {len(out)}"
            )
        state, reward, terminated, truncated, _ = out
        if not _valid_observation(env, state) or not np.isfinite(float(reward)):
            raise ContractError(f"step() gave state {state!r} and reward {reward!r}")
        if terminated or truncated:
            env.reset()
    env.close()


def _trajectory(spec: dict, seed: int) -> list[tuple[Any, float, bool]]:
    env = build_env(spec)
    env.reset(seed=seed)
    env.action_space.seed(seed)
    out = []
    for _ in range(100):
        state, reward, terminated, truncated, _ = env.step(env.action_space.sample())
        out.append((_plain(state), float(reward), bool(terminated)))
        if terminated or truncated:
            env.reset()
    env.close()
    return out


def _check_seeded_reset_repeats(spec: dict) -> None:
    if _trajectory(spec, 3) != _trajectory(spec, 3):
        raise ContractError("the same reset seed and actions gave different trajectories")


def _check_table_is_a_distribution(spec: dict) -> None:
    env = build_env(spec)
    table = getattr(env.unwrapped, "P", None)
    if table is None or not environment_tags(env, spec).table_backed:
        env.close()
        return
    n_states, n_actions = env_sizes(env)
    env.close()
    for s in range(n_states):
        for a in range(n_actions):
            outcomes = table[s][a]
            total = sum(o[0] for o in outcomes)
            if abs(total - 1.0) > 1e-9 or any(not 0 <= o[1] < n_states for o in outcomes):
                raise ContractError(f"P[{s}][{a}] is not a distribution over valid states: {outcomes}")


_ENV_CHECKS: tuple[Callable[[dict], None], ...] = (
    _check_spaces,
    _check_reset_and_step_types,
    _check_seeded_reset_repeats,
    _check_table_is_a_distribution,
)


def environment_checks(spec: dict) -> Iterator[tuple[str, Callable[[], None]]]:
    """(check name, zero-argument callable) for every contract check of a resolved environment spec."""
    for check in _ENV_CHECKS:
        yield check.__name__.removeprefix("_check_"), lambda check=check: check(spec)


def check_environment(spec: dict) -> None:
    """Run every environment contract check; raise ContractError naming the first one that fails."""
    for name, run in environment_checks(spec):
        try:
            run()
        except ContractError as err:
            raise ContractError(f"{name}: {err}") from None
