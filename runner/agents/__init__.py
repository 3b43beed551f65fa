"""Agent kinds, their registry, and users' own agents named by entry point."""

from __future__ import annotations

from typing import Any

import gymnasium as gym
import numpy as np

from runner.agents.base import COUNTER_NAMES, TabularAgent
from runner.agents.neural import NeuralAgent
from runner.agents.own import OwnAgent, own_agent_class
from runner.errors import EnvironmentSourceError
from runner.registry import Registry, import_entry_point
from runner.tags import space_kind

__all__ = [
    "AGENTS",
    "COUNTER_NAMES",
    "NeuralAgent",
    "OwnAgent",
    "TabularAgent",
    "agent_class",
    "make_agent",
    "observation_bounds",
    "setup_agent",
]

AGENTS = Registry(
    "agent kind",
    {
        "q_learning": "runner.agents.q_learning:QLearning",
        "dyna_q": "runner.agents.dyna_q:DynaQ",
        "certainty_equivalence": "runner.agents.certainty_equivalence:CertaintyEquivalence",
        "sarsa": "runner.agents.sarsa:Sarsa",
        "expected_sarsa": "runner.agents.sarsa:ExpectedSarsa",
        "replay_q_learning": "runner.agents.replay_q:ReplayQLearning",
        "dyna_q_plus": "runner.agents.dyna_q_plus:DynaQPlus",
        "rmax": "runner.agents.rmax:RMax",
        "prioritized_sweeping": "runner.agents.prioritized_sweeping:PrioritizedSweeping",
        "negamax_search": "runner.agents.self_play:NegamaxSearch",
        "uct_search": "runner.agents.tree_search:UCTSearch",
        "puct_search": "runner.agents.tree_search:PUCTSearch",
        "linear_q_learning": "runner.agents.linear:LinearQLearning",
        "linear_sarsa": "runner.agents.linear:LinearSarsa",
        "linear_true_online_sarsa": "runner.agents.linear_true_online:LinearTrueOnlineSarsa",
        "linear_replay_q_learning": "runner.agents.linear_replay:LinearReplayQLearning",
        "linear_dyna": "runner.agents.linear_dyna:LinearDyna",
        "linear_gaussian": "runner.agents.linear_gaussian:LinearGaussian",
        "q_network": "runner.agents.q_network:QNetwork",
        "mpc": "runner.agents.mpc:ModelPredictiveControl",
        "neural_dyna": "runner.agents.neural_dyna:NeuralDyna",
        "soft_actor_critic": "runner.agents.soft_actor_critic:SoftActorCritic",
    },
    base=(TabularAgent, NeuralAgent),
    base_name="runner.agents.TabularAgent or runner.agents.NeuralAgent",
)
"""Every built-in kind: `TabularAgent` subclasses (numba kernels; the tabular and linear families) and
`NeuralAgent` subclasses (JAX; they need the `neural` extra only when a trial runs them)."""


def agent_class(kind: str) -> type[TabularAgent] | type[NeuralAgent] | type[OwnAgent]:
    """The class of a registered kind, or of a 'package.module:Class' entry point: a `TabularAgent` or
    `NeuralAgent` subclass, or a plain class following the own-agent protocol (`runner.agents.own`), wrapped.
    Anything else (a function, a class of another kind) is refused before it is called."""
    if ":" not in kind:
        return AGENTS.load(kind)
    found = import_entry_point(kind)
    if isinstance(found, type) and issubclass(found, (TabularAgent, NeuralAgent)):
        return found
    return own_agent_class(found, kind)


def make_agent(kind: str, params: dict) -> TabularAgent | NeuralAgent | OwnAgent:
    """Build an agent from its kind and (already validated) parameters."""
    return agent_class(kind)(**params)


def observation_bounds(space: gym.Space) -> tuple[np.ndarray, np.ndarray] | None:
    """A box observation space's (low, high) as float64 arrays; None for other spaces."""
    if isinstance(space, gym.spaces.Box):
        return np.asarray(space.low, dtype=np.float64).ravel(), np.asarray(space.high, dtype=np.float64).ravel()
    return None


def _sizes(agent: TabularAgent, env: gym.Env) -> tuple[int, int]:
    """(states or box observation dimensions, actions) as a compiled kind is set up with."""
    from runner.envs.sources import env_sizes

    observed, acted = space_kind(env.observation_space), space_kind(env.action_space)
    if observed is None or observed[0] != "box" or "box" not in agent.tags.observations:
        return env_sizes(env)
    if acted is None or acted[0] != "discrete":
        raise EnvironmentSourceError(f"{agent.kind} needs a Discrete action space, got {env.action_space}")
    return observed[1], acted[1]


def setup_agent(
    agent: TabularAgent | NeuralAgent | OwnAgent,
    env: gym.Env,
    stream: Any,
    table: tuple | None = None,
    rules: tuple | None = None,
) -> None:
    """Set an agent up on a built environment: numba kinds get its sizes (and the table, rules or observation
    bounds they may use), neural and own agents its spaces."""
    if isinstance(agent, (OwnAgent, NeuralAgent)):
        agent.setup(env.observation_space, env.action_space, stream)
        return
    n_states, n_actions = _sizes(agent, env)
    agent.setup(n_states, n_actions, stream, table, rules, observation_bounds(env.observation_space))
