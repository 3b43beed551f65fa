"""Model error against the true table: exact on hand-made cases, shrinking as a count model learns."""

import numpy as np
import pytest

from runner.agents.certainty_equivalence import CertaintyEquivalence
from runner.agents.dyna_q import DynaQ
from runner.agents.q_learning import QLearning
from runner.envs.sources import build_env
from runner.envs.table import _closed_cdfs, table_from_env
from runner.trial import run_trial
from runner.trial_spec import TrialSpec

# One state, one action: with probability 0.7 stay (reward 1), with 0.3 the episode ends (reward 0).


def _table():
    """One state, one action: with probability 0.7 stay (reward 1), with 0.3 the episode ends (reward 0)."""
    probs = np.array([0.7, 0.3])
    offsets = np.array([0, 2])
    return (
        np.array([1.0]),
        offsets,
        _closed_cdfs(probs, offsets),
        np.array([0, 0]),
        np.array([1.0, 0.0]),
        np.array([False, True]),
        0,
    )


def test_count_model_error_is_exact_on_a_hand_made_table():
    table = _table()
    agent = CertaintyEquivalence(replan_every=1000)
    agent.setup(1, 1, 0)
    for _ in range(7):
        agent.observe(0, 0, 1.0, 0, False)
    for _ in range(3):
        agent.observe(0, 0, 0.0, 0, True)
    tv, reward = agent.model_error(table)
    assert tv == pytest.approx(0.0, abs=1e-12)
    assert reward == pytest.approx(0.0, abs=1e-12)  # mean reward 0.7 both learned and true
    for _ in range(4):
        agent.observe(0, 0, 0.0, 0, True)  # now 7 stays and 7 ends: 0.5 / 0.5 against 0.7 / 0.3
    tv, reward = agent.model_error(table)
    assert tv == pytest.approx(0.2)
    assert reward == pytest.approx(0.2)  # learned mean reward 0.5 against 0.7


def test_last_outcome_model_error_is_exact_on_a_hand_made_table():
    table = _table()
    agent = DynaQ(planning_steps=0)
    agent.setup(1, 1, 0)
    agent.observe(0, 0, 1.0, 0, False)
    assert agent.model_error(table) == pytest.approx((0.3, 0.3))  # point mass on "stay"; reward 1 vs 0.7
    agent.observe(0, 0, 0.0, 0, True)
    assert agent.model_error(table) == pytest.approx((0.7, 0.7))


def test_model_free_agents_have_no_model_error():
    table = _table()
    agent = QLearning()
    agent.setup(1, 1, 0)
    assert all(np.isnan(agent.model_error(table)))


def _spec(agent, steps):
    return TrialSpec.build(
        {"source": "gym", "id": "FrozenLake-v1", "options": {}, "step_limit": None},
        agent.kind,
        agent.get_params(),
        3,
        steps,
        every=steps // 10,
        episodes=2,
        step_cap=100,
        training_window=5,
    ).as_dict()


@pytest.mark.parametrize("path", ["compiled", "gymnasium"])
def test_count_model_error_shrinks_on_frozen_lake(path):
    rows = run_trial(_spec(CertaintyEquivalence(epsilon=1.0, replan_every=500), 20_000), path).rows
    tv = rows["model_tv_error"]
    assert np.isnan(tv[0])  # nothing tried before the first step
    assert tv[-1] < tv[1] and tv[-1] < 0.05
    # FrozenLake's slippery moves have three outcomes of 1/3 (gymnasium's env.unwrapped.P): a last-outcome model
    # is always a point mass, so its error stays near 2/3 however long it learns.
    last = run_trial(_spec(DynaQ(planning_steps=0, epsilon=1.0), 20_000), path).rows["model_tv_error"]
    assert last[-1] > 0.4


def test_table_of_frozen_lake_feeds_the_error():
    env = build_env({"source": "gym", "id": "FrozenLake-v1", "options": {}, "step_limit": None})
    table = table_from_env(env).as_tuple()
    agent = CertaintyEquivalence()
    agent.setup(16, 4, 0)
    assert all(np.isnan(agent.model_error(table)))  # no pair tried yet
