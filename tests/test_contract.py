"""One shared contract suite over every registered agent kind (and the shipped example of an own agent) and
every environment source, each check chosen by the tags the two sides declare."""

import sys
from pathlib import Path

import pytest

from runner.agents import AGENTS, agent_class, make_agent
from runner.agents.q_learning import QLearning
from runner.checks import ContractError, _drive, agent_checks, check_agent, environment_checks
from runner.envs.bins import resolve_bins
from runner.envs.sources import SOURCES, build_env, environment_tags
from runner.tags import AgentTags, pairing_problem

sys.path.insert(0, str(Path(__file__).resolve().parent.parent / "examples"))

KINDS = [*AGENTS.names(), "linear_q:LinearQ"]
"""Every registered kind, and the README's example of a user's own agent (a plain numpy class)."""
AGENT_CASES = [(kind, name, run) for kind in KINDS for name, run in agent_checks(kind)]


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
CLASSIC = ("CartPole-v1", "MountainCar-v0", "Acrobot-v1", "Pendulum-v1", "MountainCarContinuous-v0")
_BOUNDS = {"CartPole-v1": (-3.0, 3.0), "Acrobot-v1": (-13.0, 13.0), "stepmeter/OverheadCrane-v0": (-3.0, 3.0)}


def _gym(env_id: str, **extra) -> dict:
    return {"source": "gym", "id": env_id, "options": {}, "step_limit": 100, **extra}


def _binned(env_id: str, count: int) -> dict:
    """The id with a grid of bins (unbounded dimensions clipped at common-practice ranges)."""
    env = build_env(_gym(env_id))
    low, high = _BOUNDS.get(env_id, (None, None))
    data = {"counts": count} if low is None else {"counts": count, "low": low, "high": high}
    spec = _gym(env_id, bins=resolve_bins(data, env.observation_space))
    env.close()
    return spec


for _id in (*CLASSIC, "stepmeter/OverheadCrane-v0"):
    ENV_SPECS[f"gym-{_id}"] = _gym(_id)
for _id in ("CartPole-v1", "MountainCar-v0", "Acrobot-v1", "stepmeter/OverheadCrane-v0"):
    ENV_SPECS[f"gym-{_id}-bins"] = _binned(_id, 3)
ENV_SPECS["entry-line"] = {"source": "entry", "entry": "runner.envs.line:LineWalk", "options": {}, "step_limit": 50}
ENV_SPECS["entry-line-continuous"] = {
    "source": "entry",
    "entry": "runner.envs.line:LineWalk",
    "options": {"continuous": True},
    "step_limit": 50,
}
ENV_CASES = [(label, name, run) for label, spec in ENV_SPECS.items() for name, run in environment_checks(spec)]


def test_every_source_is_covered():
    assert {spec["source"] for spec in ENV_SPECS.values()} == set(SOURCES)


def test_every_kind_declares_tags():
    for kind in KINDS:
        assert isinstance(agent_class(kind).tags, AgentTags), kind


def _tags(spec):
    env = build_env(spec)
    try:
        return environment_tags(env, spec)
    finally:
        env.close()


PAIRS = [(kind, label) for kind in KINDS for label in ENV_SPECS]


@pytest.mark.parametrize(("kind", "label"), PAIRS, ids=[f"{k}-{e}" for k, e in PAIRS])
def test_tags_decide_which_pairs_run(kind, label):
    """A pair the tags accept runs 40 real steps; a pair they refuse is refused with a sentence naming both."""
    agent = make_agent(kind, {})
    problem = pairing_problem(kind, agent.tags, agent.uses_table(), label, _tags(ENV_SPECS[label]))
    if problem is None:
        assert len(_drive(agent, ENV_SPECS[label], 40, seed=0)) == 40
    else:
        assert kind in problem and label in problem


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
