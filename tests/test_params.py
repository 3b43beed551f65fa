"""Tests for parameter roles: the planning budget is declared on the parameter, not guessed from its name."""

import pytest

from runner.agents import AGENTS, agent_class
from runner.params import PLANNING_BUDGET, Param, budget_params


def test_unknown_role_is_rejected_with_the_parameter_name():
    with pytest.raises(ValueError, match="parameter 'n': role must be one of"):
        Param("n", "int", 1, "steps", role="budget")


def test_budget_params_lists_only_declared_roles():
    schema = (
        Param("planning_steps", "int", 5, "declared", role=PLANNING_BUDGET),
        Param("planning_depth", "int", 3, "named like one, not declared"),
    )
    assert budget_params(schema) == ("planning_steps",)


def test_every_planning_kind_declares_its_budget():
    declared = {kind: budget_params(agent_class(kind).schema) for kind in AGENTS.names()}
    assert declared["dyna_q"] == ("planning_steps",)
    assert declared["dyna_q_plus"] == ("planning_steps",)
    assert declared["prioritized_sweeping"] == ("planning_steps",)
    assert declared["replay_q_learning"] == ("replays",)
    assert declared["uct_search"] == ("simulations",)
    assert declared["puct_search"] == ("simulations",)
    assert declared["negamax_search"] == ("simulations",)
    assert declared["q_learning"] == ()
