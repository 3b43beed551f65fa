"""Linear model-free agents: their updates against numpy, both trial paths' inputs, and Mountain Car (Sutton &
Barto 2018, Example 10.1)."""

import numpy as np
import pytest
from linear_setups import agent_on_mountain_car as _agent
from linear_setups import episode_lengths
from linear_setups import fourier_order_2 as _fourier
from numba import njit

from runner.agents.linear_kernels import W, largest
from runner.trial import run_trial
from runner.trial_spec import TrialSpec

FOURIER = {"kind": "fourier", "order": 2}


def test_q_learning_update_is_the_normalised_semi_gradient_step():
    """Sutton & Barto (2018), section 10.1 with Q-learning's target: w_a += alpha/|phi|^2 (r + g max w.phi' -
    w_a.phi) phi; here checked against the same sum in numpy."""
    agent = _agent("linear_q_learning", alpha=0.3, gamma=0.9, features=FOURIER)
    rng = np.random.default_rng(0)
    w = rng.normal(size=agent.arrays_[W].shape)
    agent.arrays_[W][:] = w
    s, s2 = np.array([-0.5, 0.01]), np.array([-0.45, 0.02])
    agent.observe(s, 1, -1.0, s2, False)
    phi, phi2 = _fourier(s), _fourier(s2)
    expected = w.copy()
    expected[1] += 0.3 / (phi @ phi) * (-1.0 + 0.9 * np.max(w @ phi2) - w[1] @ phi) * phi
    assert np.allclose(agent.arrays_[W], expected, rtol=0, atol=1e-12)
    agent.observe(s2, 0, 5.0, s, True)
    phi_end = expected[0] @ phi2
    expected[0] += 0.3 / (phi2 @ phi2) * (5.0 - phi_end) * phi2
    assert np.allclose(agent.arrays_[W], expected, rtol=0, atol=1e-12)


@njit
def _numba_max(values):
    return np.max(values)


def test_largest_is_np_max_to_the_bit():
    """`largest` stands in for np.max in the kernels compiled without reference counts (np.max allocates there):
    the same result as numba's np.max, to the bit (signed zeros: the first of equal values; the first NaN wins),
    and the same value as numpy.max."""
    rng = np.random.default_rng(4)
    cases = [rng.normal(size=n) for n in (1, 3, 7)] + [
        np.array([0.0, -0.0]),
        np.array([-0.0, 0.0]),
        np.array([1.0, np.nan, 2.0]),
        np.array([np.nan, -np.nan, 1.0]),
        np.array([-np.inf, -np.inf]),
        np.array([2.0, 5.0, 5.0]),
    ]
    for q in cases:
        got = largest(q)
        assert np.float64(got).tobytes() == np.float64(_numba_max(q)).tobytes()
        assert np.array_equal(got, np.max(q), equal_nan=True)


def test_sarsa_takes_the_action_it_backed_up():
    agent = _agent("linear_sarsa", epsilon=0.5, features={"kind": "tiles", "tilings": 4, "tiles": 4})
    s, s2 = np.array([-0.5, 0.0]), np.array([-0.49, 0.001])
    for _ in range(20):
        agent.observe(s, agent.act(s), -1.0, s2, False)
        pending = int(agent.arrays_[-1][1])
        assert agent.act(s2) == pending
        assert agent.arrays_[-1][0] == 0


@pytest.mark.parametrize("env_id", ["CartPole-v1", "MountainCar-v0", "Acrobot-v1", "stepmeter/OverheadCrane-v0"])
@pytest.mark.parametrize("kind", ["linear_q_learning", "linear_sarsa"])
def test_runs_on_both_paths_on_classic_control(kind, env_id):
    env = {"source": "gym", "id": env_id, "options": {}, "step_limit": 100}
    params = {"features": {"kind": "tiles", "tilings": 4, "tiles": 4, "hash_size": 512}}
    spec = TrialSpec.build(env, kind, params, 0, 300, every=150, episodes=1, step_cap=50, training_window=3).as_dict()
    for path in ("gymnasium", "auto"):
        result = run_trial(spec, path)
        assert result.trial_path == ("gymnasium" if path == "gymnasium" else "compiled")
        assert result.rows["real_updates"].tolist() == [0, 150, 300]
        assert np.all(np.isfinite(result.rows["eval_return"]))


def _steps_per_episode(alpha: float, seeds: int, episodes: int) -> np.ndarray:
    features = {"kind": "tiles", "tilings": 8, "tiles": 8}
    out = [
        episode_lengths(
            _agent("linear_sarsa", seed, alpha=alpha, gamma=1.0, epsilon=0.0, features=features),
            1000 + seed,
            episodes,
            100_000,
        )
        for seed in range(seeds)
    ]
    return np.mean(out, axis=0)


@pytest.mark.slow
def test_mountain_car_example_10_1():
    """Sutton & Barto (2018), Example 10.1 and Figure 10.2: semi-gradient Sarsa, 8 tilings of 8x8 tiles, zero
    (optimistic) weights, no exploration, gamma 1. Steps per episode start at several hundred and fall below
    about 200 within a few hundred episodes; step size 0.5/8 learns faster early than 0.1/8 (the figure's
    ordering). The figures are from memory; 10 seeds here (the book averages 100 runs). Seen here: about 1000
    steps over the first 3 episodes and 122 over episodes 250-300 at 0.5/8; 277 against 553 over the first 50."""
    fast = _steps_per_episode(0.5, seeds=10, episodes=300)
    slow = _steps_per_episode(0.1, seeds=10, episodes=300)
    assert fast[:3].mean() > 300
    assert fast[-50:].mean() < 200
    assert fast[:50].mean() < slow[:50].mean()
