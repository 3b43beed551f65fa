"""Tabular agent kinds and their registry."""

from runner.agents.base import COUNTER_NAMES, TabularAgent
from runner.registry import Registry

__all__ = ["AGENTS", "COUNTER_NAMES", "TabularAgent", "agent_class", "make_agent"]

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


def agent_class(kind: str) -> type[TabularAgent]:
    """The class of a registered kind (or of a 'package.module:Class' entry point)."""
    return AGENTS.load(kind)


def make_agent(kind: str, params: dict) -> TabularAgent:
    """Build an agent from its kind and (already validated) parameters."""
    return agent_class(kind)(**params)
