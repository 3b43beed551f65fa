"""One shared contract suite over every registered agent kind and every environment source."""

import pytest

from runner.agents import AGENTS
from runner.agents.q_learning import QLearning
from runner.checks import ContractError, agent_checks, check_agent, environment_checks

AGENT_CASES = [(kind, name, run) for kind in AGENTS.names() for name, run in agent_checks(kind)]


@pytest.mark.parametrize(("kind", "check", "run"), AGENT_CASES, ids=[f"{k}-{n}" for k, n, _ in AGENT_CASES])
def test_agent_contract(kind, check, run):
    run()


GRID = {
    "source": "grid",
    "map": "S.~\n.XG",
    "slip": 0.2,
    "step_reward": 0.0,
    "goal_reward": 1.0,
    "hazard_penalty": -1.0,
    "hazard_ends": True,
    "step_limit": 20,
}
ENV_SPECS = {
    "gym-FrozenLake-v1": {"source": "gym", "id": "FrozenLake-v1", "options": {}, "step_limit": None},
    "gym-FrozenLake8x8-v1": {"source": "gym", "id": "FrozenLake8x8-v1", "options": {}, "step_limit": None},
    "gym-Taxi-v4": {"source": "gym", "id": "Taxi-v4", "options": {}, "step_limit": None},
    "gym-CliffWalking-v1": {"source": "gym", "id": "CliffWalking-v1", "options": {}, "step_limit": 100},
    "gym-FrozenLake-v1-not-slippery": {
        "source": "gym",
        "id": "FrozenLake-v1",
        "options": {"is_slippery": False},
        "step_limit": None,
    },
    "grid": GRID,
    "entry-takeaway": {
        "source": "entry",
        "entry": "runner.envs.takeaway:TakeAwayGame",
        "options": {"heaps": [2, 3, 4], "opponent": "random"},
        "step_limit": None,
    },
    "entry": {
        "source": "entry",
        "entry": "runner.envs.grid:GridWorld",
        "options": {"map": "S..\n.#G", "slip": 0.1},
        "step_limit": 25,
    },
}
ENV_CASES = [(label, name, run) for label, spec in ENV_SPECS.items() for name, run in environment_checks(spec)]


@pytest.mark.parametrize(("label", "check", "run"), ENV_CASES, ids=[f"{e}-{n}" for e, n, _ in ENV_CASES])
def test_environment_contract(label, check, run):
    run()


class Stubborn(QLearning):
    """Always moves north and never draws from its stream: the contract must catch it."""

    kind = "stubborn"

    def act(self, state):
        return 0


def test_check_agent_names_the_broken_rule(monkeypatch):
    monkeypatch.setitem(AGENTS.entries, "stubborn", f"{__name__}:Stubborn")
    with pytest.raises(ContractError, match="stubborn: different_seeds_differ"):
        check_agent("stubborn")
