"""Linear Q-learning from a replay buffer: replays 0 is linear Q-learning bit for bit on both paths, each replay is
the semi-gradient Q-learning step on a stored transition, the buffer keeps the last transitions, and replays
save real steps on Mountain Car (slow)."""

import numpy as np
import pytest
from linear_setups import agent_on_mountain_car, assert_same_rows, episode_lengths, fourier_order_2, short_trial

from runner.agents.linear_kernels import LINEAR_ARRAYS, W

_OBS, _ACTIONS, _REWARDS, _NEXT, _ENDED, _FILL = range(LINEAR_ARRAYS, LINEAR_ARRAYS + 6)


def _agent(**params):
    return agent_on_mountain_car("linear_replay_q_learning", **params)


def _q_step(w, s, action, reward, s2, terminated, alpha, gamma):
    """Sutton & Barto (2018), sections 10.1 and 11.1 with Q-learning's target and the step divided by phi . phi
    (as `linear_q_learning`), in numpy."""
    phi = fourier_order_2(s)
    target = reward if terminated else reward + gamma * np.max(w @ fourier_order_2(s2))
    w[action] += alpha / (phi @ phi) * (target - w[action] @ phi) * phi


def test_replays_zero_is_linear_q_learning_bit_for_bit_on_both_paths():
    """As `replay_q_learning` at k = 0 is Q-learning, and `linear_dyna` at 0 is linear Q-learning."""
    env = {"source": "gym", "id": "stepmeter/OverheadCrane-v0", "options": {}, "step_limit": 100}
    common = {
        "alpha": 0.3,
        "gamma": 0.99,
        "epsilon": 0.1,
        "features": {"kind": "tiles", "tilings": 4, "hash_size": 512},
    }

    def run(kind, path, **extra):
        return short_trial(env, kind, {**common, **extra}, 4, 900, every=300, step_cap=100, path=path)

    for path in ("gymnasium", "compiled"):
        replayed, plain = run("linear_replay_q_learning", path, replays=0), run("linear_q_learning", path)
        assert replayed.trial_path == plain.trial_path == path
        assert np.array_equal(replayed.final_values, plain.final_values)
        assert_same_rows(replayed, plain)
        more = run("linear_replay_q_learning", path, replays=3, buffer_size=50)
        assert more.rows["planning_updates"].tolist() == [0, 900, 1800, 2700]
        assert more.rows["model_updates"].tolist() == [0, 0, 0, 0]
        assert not np.array_equal(more.final_values, plain.final_values)


def test_each_replay_is_a_q_learning_step_on_a_stored_transition():
    """With one stored transition every replay draws it: each real step is 1 + replays Q-learning steps on it,
    and the features cached for the next real update survive the replays."""
    agent = _agent(alpha=0.3, gamma=0.9, replays=2, buffer_size=1, features={"kind": "fourier", "order": 2})
    w = np.random.default_rng(0).normal(size=agent.arrays_[W].shape)
    agent.arrays_[W][:] = w
    expected = w.copy()
    s1, s2, s3 = np.array([-0.5, 0.01]), np.array([-0.45, 0.02]), np.array([-0.4, 0.03])
    for s, action, reward, nxt, terminated in (
        (s1, 1, -1.0, s2, False),
        (s2, 2, -1.0, s3, False),
        (s3, 0, 5.0, s1, True),
    ):
        agent.observe(s, action, reward, nxt, terminated)
        for _ in range(3):
            _q_step(expected, s, action, reward, nxt, terminated, 0.3, 0.9)
        assert np.allclose(agent.arrays_[W], expected, rtol=0, atol=1e-12)
    assert agent.counters() == {"real_updates": 3, "planning_updates": 6, "model_updates": 0}
    assert agent.counter_problems(3) == []
    assert agent.counter_problems(4) != []


def test_buffer_keeps_the_last_transitions():
    agent = _agent(replays=1, buffer_size=3)
    obs = np.linspace(-1.0, 0.5, 6)[:, None] * np.array([1.0, 0.01])
    for t in range(5):
        agent.observe(obs[t], t % 3, float(t), obs[t + 1], t == 4)
    arrays = agent.arrays_
    order = [3, 4, 2]  # slots 0, 1, 2 after five stores into three slots
    assert arrays[_FILL].tolist() == [3, 2]
    assert np.array_equal(arrays[_OBS], obs[order]) and np.array_equal(arrays[_NEXT], obs[[t + 1 for t in order]])
    assert arrays[_ACTIONS].tolist() == [t % 3 for t in order]
    assert arrays[_REWARDS].tolist() == [float(t) for t in order]
    assert arrays[_ENDED].tolist() == [0, 1, 0]


@pytest.mark.slow
def test_replays_save_real_steps_on_mountain_car():
    """Lin (1992) reports that replaying experience speeds up learning in real steps (from memory). Here the
    first 20 episodes of Mountain Car (8 tilings of 8x8 tiles, step 0.1/8, gamma 1, no exploration, 10 paired
    seeds) take fewer real steps with 5 replays per real step than with none, in every seed. Seen: 19,814 against
    6,856 real steps on average; paired ratios 2.59 at least, geometric mean 2.89."""
    features = {"kind": "tiles", "tilings": 8, "tiles": 8, "hash_size": 0}
    totals = {}
    for replays in (0, 5):
        totals[replays] = []
        for seed in range(10):
            agent = agent_on_mountain_car(
                "linear_replay_q_learning", seed, alpha=0.1, gamma=1.0, epsilon=0.0, features=features, replays=replays
            )
            totals[replays].append(episode_lengths(agent, 700 + seed, 20).sum())
    ratio = np.array(totals[0]) / np.array(totals[5])
    assert np.all(ratio > 1.5)
