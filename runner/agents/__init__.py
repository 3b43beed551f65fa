"""Agent kinds, their registry, and users' own agents named by entry point."""

from __future__ import annotations

from typing import Any

import gymnasium as gym

from runner.agents.base import COUNTER_NAMES, TabularAgent
from runner.agents.own import OwnAgent, own_agent_class
from runner.registry import Registry, import_entry_point

__all__ = ["AGENTS", "COUNTER_NAMES", "OwnAgent", "TabularAgent", "agent_class", "make_agent", "setup_agent"]

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
    },
    base=TabularAgent,
    base_name="runner.agents.TabularAgent",
)


def agent_class(kind: str) -> type[TabularAgent] | type[OwnAgent]:
    """The class of a registered kind, or of a 'package.module:Class' entry point: a `TabularAgent` subclass, or
    a plain class following the own-agent protocol (`runner.agents.own`), wrapped. Anything else (a function, a
    class of another kind) is refused before it is called."""
    if ":" not in kind:
        return AGENTS.load(kind)
    found = import_entry_point(kind)
    if isinstance(found, type) and issubclass(found, TabularAgent):
        return found
    return own_agent_class(found, kind)


def make_agent(kind: str, params: dict) -> TabularAgent | OwnAgent:
    """Build an agent from its kind and (already validated) parameters."""
    return agent_class(kind)(**params)


def setup_agent(
    agent: TabularAgent | OwnAgent, env: gym.Env, stream: Any, table: tuple | None = None, rules: tuple | None = None
) -> None:
    """Set an agent up on a built environment: tabular kinds get its sizes (and the table or rules they may use),
    own agents its spaces."""
    if isinstance(agent, OwnAgent):
        agent.setup(env.observation_space, env.action_space, stream)
        return
    from runner.envs.sources import env_sizes

    n_states, n_actions = env_sizes(env)
    agent.setup(n_states, n_actions, stream, table, rules)
