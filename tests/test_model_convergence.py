"""The certainty-equivalence agent's count-based model converges to FrozenLake-v1's own transition table."""

import gymnasium as gym
import numpy as np
import pytest
from scipy.stats import chisquare

from runner.agents.certainty_equivalence import CertaintyEquivalence

REAL_STEPS = 50_000
MIN_VISITS = 200
REPLAN_EVERY = 1000  # value iteration is not what is tested here; re-planning rarely keeps the run short
# Per-probability tolerance: 4.5 binomial standard errors sqrt(p (1 - p) / n) plus 1e-9 for float rounding.
# A two-sided normal tail beyond 4.5 sd is about 7e-6 (from memory), so over the ~150 non-zero probabilities
# checked the chance of a false alarm is about 1e-3; a probability of 0 gets no slack at all.
N_SE = 4.5
SLACK = 1e-9
FAMILY_ALPHA = 0.01  # Bonferroni: each chi-square test is run at FAMILY_ALPHA / number of tests


def _true_model(env: gym.Env) -> np.ndarray:
    """Gymnasium's own table (FrozenLakeEnv.P) as (n_states, n_actions, n_states + 1), last column = ended.

    FrozenLake lists the same next state several times when slips bump into the edge, so entries are summed;
    every terminated outcome (hole or goal) goes to the ended column, as the agent records it there.
    """
    table = env.unwrapped.P
    n_states, n_actions = env.observation_space.n, env.action_space.n
    truth = np.zeros((n_states, n_actions, n_states + 1))
    for s in range(n_states):
        for a in range(n_actions):
            for prob, nxt, _reward, terminated in table[s][a]:
                truth[s, a, n_states if terminated else nxt] += prob
    return truth


@pytest.fixture(scope="module")
def learned():
    """Drive the agent by hand on slippery FrozenLake-v1 with uniformly random actions for REAL_STEPS steps."""
    env = gym.make("FrozenLake-v1")  # is_slippery=True by default, 100-step time limit
    n_states, n_actions = int(env.observation_space.n), int(env.action_space.n)
    agent = CertaintyEquivalence(epsilon=1.0, replan_every=REPLAN_EVERY)
    agent.setup(n_states, n_actions, 20240611)
    state, _ = env.reset(seed=12345)
    state = int(state)
    episodes = 0
    for _ in range(REAL_STEPS):
        action = agent.act(state)
        next_state, reward, terminated, truncated, _ = env.step(action)
        agent.observe(state, action, float(reward), int(next_state), bool(terminated))
        state = int(next_state)
        if terminated or truncated:
            episodes += 1
            state = int(env.reset()[0])
    truth = _true_model(env)
    env.close()
    return agent, truth, episodes


def test_truth_table_is_a_distribution(learned):
    _, truth, _ = learned
    np.testing.assert_allclose(truth.sum(axis=2), 1.0, atol=1e-12)
    # Slippery FrozenLake: from the start, action 0 (left) stays put with 2/3 and goes down with 1/3
    # (gymnasium FrozenLakeEnv, slip to either perpendicular side with 1/3 each; from memory).
    assert truth[0, 0, 0] == pytest.approx(2 / 3)
    assert truth[0, 0, 4] == pytest.approx(1 / 3)


def test_estimate_shape_and_normalisation(learned):
    agent, truth, episodes = learned
    estimate = agent.transition_estimate()
    assert estimate.shape == truth.shape
    assert episodes > 1000
    visits = agent.arrays_[5]
    assert visits.sum() == REAL_STEPS
    visited = visits > 0
    np.testing.assert_allclose(estimate.sum(axis=2)[visited], 1.0, atol=1e-12)
    assert np.all(estimate[~visited] == 0.0)
    # Holes and the goal end every episode, so they are never a state the agent acts from.
    for s in (5, 7, 11, 12, 15):
        assert not visited[s].any()


def test_probabilities_within_sampling_error(learned):
    agent, truth, _ = learned
    estimate = agent.transition_estimate()
    visits = agent.arrays_[5]
    pairs = np.argwhere(visits >= MIN_VISITS)
    assert len(pairs) >= 24  # the well-visited part of the map must actually be tested
    tested_ended = 0
    for s, a in pairs:
        n = visits[s, a]
        p = truth[s, a]
        bound = N_SE * np.sqrt(p * (1.0 - p) / n) + SLACK
        error = np.abs(estimate[s, a] - p)
        assert np.all(error <= bound), (int(s), int(a), int(n), estimate[s, a], p)
        tested_ended += p[-1] > 0
    assert tested_ended >= 5  # the 'ended' column (holes) is among the probabilities checked


def test_chi_square_goodness_of_fit_per_pair(learned):
    # Reference: scipy.stats.chisquare (Pearson's goodness-of-fit test), one test per well-visited pair, over
    # the outcomes of non-zero true probability (terminated outcomes merged into the single ended column);
    # outcomes of true probability 0 must have count exactly 0, checked separately.
    agent, truth, _ = learned
    estimate = agent.transition_estimate()
    visits = agent.arrays_[5]
    tests = []
    for s, a in np.argwhere(visits >= MIN_VISITS):
        n = visits[s, a]
        counts = np.rint(estimate[s, a] * n)
        np.testing.assert_allclose(counts, estimate[s, a] * n, atol=1e-6)
        support = truth[s, a] > 0
        assert np.all(counts[~support] == 0), (int(s), int(a))
        assert counts.sum() == n
        if support.sum() >= 2:
            expected = truth[s, a, support] / truth[s, a, support].sum() * n
            tests.append((int(s), int(a), chisquare(counts[support], expected).pvalue))
    assert len(tests) >= 24
    level = FAMILY_ALPHA / len(tests)
    failing = [t for t in tests if t[2] < level]
    assert not failing, failing


def test_counters_of_certainty_equivalence(learned):
    agent, _, _ = learned
    counters = agent.counters()
    n_pairs = agent.n_states_ * agent.n_actions_
    assert counters["model_updates"] == REAL_STEPS
    assert counters["real_updates"] == 0
    assert counters["planning_updates"] > 0
    assert counters["planning_updates"] % n_pairs == 0
    # One re-plan every REPLAN_EVERY steps, each between 1 and max_sweeps (default 50) full sweeps.
    replans = REAL_STEPS // REPLAN_EVERY
    assert replans * n_pairs <= counters["planning_updates"] <= replans * 50 * n_pairs
