"""True online Sarsa(lambda): against a numpy transcription of Sutton & Barto (2018) section 12.8's boxed
algorithm, against the online lambda-return algorithm (section 12.4) it is equivalent to, at lambda 0 against
`linear_sarsa`, on both trial paths, and on Mountain Car (slow)."""

import numpy as np
import pytest
from linear_setups import MOUNTAIN_CAR, agent_on_mountain_car, assert_same_rows, episode_lengths, short_trial

from runner.agents.linear_kernels import LINEAR_ARRAYS, W
from runner.features import feature_values

_PENDING = LINEAR_ARRAYS + 1


def _agent(**params):
    agent = agent_on_mountain_car("linear_true_online_sarsa", 7, **params)
    agent.arrays_[W][:] = np.random.default_rng(11).normal(size=agent.arrays_[W].shape)
    return agent


def _dense(agent, obs, action):
    """x(s, a) as one dense vector over all actions' weights (a repeated hashed tile counts twice)."""
    fmap = agent.feature_map()
    n_active = int(fmap[0][6])
    idx, val = np.zeros(n_active, dtype=np.int64), np.zeros(n_active)
    n = feature_values(np.asarray(obs, dtype=np.float64), fmap, idx, val)
    x = np.zeros(agent.arrays_[W].shape)
    np.add.at(x[action], idx[:n], val[:n])
    return x.ravel()


def _drive(agent, lengths, ends, seed):
    """Episodes of random observations and rewards; the agent chooses every action. Each episode is a list of
    (x, reward, x', terminated) with x' the next observation and the action the agent chose for it (its pending
    action), zero at a termination. An episode that does not terminate is truncated: the next one starts
    elsewhere."""
    rng = np.random.default_rng(seed)
    episodes = []
    for length, ended in zip(lengths, ends, strict=True):
        obs = rng.uniform(*MOUNTAIN_CAR, size=(length + 1, 2))
        action = agent.act(obs[0])
        steps = []
        for t in range(length):
            terminated = ended and t == length - 1
            reward = float(rng.normal())
            agent.observe(obs[t], action, reward, obs[t + 1], terminated)
            following = int(agent.arrays_[_PENDING][1])
            x_next = np.zeros(agent.arrays_[W].size) if terminated else _dense(agent, obs[t + 1], following)
            steps.append((_dense(agent, obs[t], action), reward, x_next, terminated))
            if not terminated:
                assert agent.act(obs[t + 1]) == following
            action = following
        episodes.append(steps)
    return episodes


def _book_true_online_sarsa(w, episodes, alpha, gamma, lam):
    """Sutton & Barto (2018), section 12.8, the boxed true online Sarsa(lambda) with dutch traces, in numpy;
    the actions are the ones the agent chose (the box's epsilon-greedy choice of A' is the agent's)."""
    w = w.ravel().copy()
    for episode in episodes:
        z = np.zeros_like(w)
        q_old = 0.0
        for x, reward, x_next, _ in episode:
            q, q_next = w @ x, w @ x_next
            delta = reward + gamma * q_next - q
            z = gamma * lam * z + (1.0 - alpha * gamma * lam * (z @ x)) * x
            w = w + alpha * (delta + q - q_old) * z - alpha * (q - q_old) * x
            q_old = q_next
    return w


@pytest.mark.parametrize("hash_size", [0, 8], ids=["unhashed", "hashed-with-collisions"])
def test_matches_the_books_pseudocode(hash_size):
    """Tile coding (x . x is the number of tilings, so the step alpha / 4 is constant as in the box); three
    episodes: one terminated, one truncated, one still running, so traces must clear at both kinds of start."""
    features = {"kind": "tiles", "tilings": 4, "tiles": 4, "hash_size": hash_size}
    agent = _agent(alpha=0.4, gamma=0.95, lam=0.8, epsilon=0.3, features=features)
    w0 = agent.arrays_[W].copy()
    episodes = _drive(agent, lengths=(9, 7, 5), ends=(True, False, False), seed=1)
    collided = any(x.max() > 1.0 for episode in episodes for x, *_ in episode)
    assert collided == (hash_size > 0)
    expected = _book_true_online_sarsa(w0, episodes, 0.4 / 4, 0.95, 0.8)
    assert np.abs(expected - w0.ravel()).max() > 0.05
    assert np.allclose(agent.arrays_[W].ravel(), expected, rtol=0, atol=1e-12)


def _online_lambda_return(w, episode, alphas, gamma, lam):
    """Sutton & Barto (2018), section 12.4, the online lambda-return algorithm (the forward view, O(T^2)): at
    every horizon h redo the updates of steps 0..h-1 from the episode's first weights towards the truncated
    lambda-returns G^lambda_{t:h}, whose bootstraps use the weights reached at earlier horizons."""
    xs = [x for x, *_ in episode] + [episode[-1][2]]
    rewards = [r for _, r, *_ in episode]
    horizon_weights = [w]
    for h in range(1, len(episode) + 1):
        u = w.copy()
        for t in range(h):

            def n_step(n, t=t):
                ret = sum(gamma**i * rewards[t + i] for i in range(n))
                return ret + gamma**n * (horizon_weights[t + n - 1] @ xs[t + n])

            m = h - t
            target = (1 - lam) * sum(lam ** (n - 1) * n_step(n) for n in range(1, m)) + lam ** (m - 1) * n_step(m)
            u = u + alphas[t] * (target - u @ xs[t]) * xs[t]
        horizon_weights.append(u)
    return horizon_weights[-1]


@pytest.mark.parametrize("ended", [True, False], ids=["terminated", "truncated"])
def test_equals_the_online_lambda_return_algorithm(ended):
    """van Seijen, Mahmood, Pilarski, Machado & Sutton (2016): true online TD(lambda) equals the online
    lambda-return algorithm exactly (their Theorem 1, from memory). With Fourier features x . x varies, so
    this also checks the step size alpha / (x . x) folded into the trace, step by step."""
    agent = _agent(alpha=0.3, gamma=0.9, lam=0.7, epsilon=0.3, features={"kind": "fourier", "order": 2})
    w0 = agent.arrays_[W].ravel().copy()
    (episode,) = _drive(agent, lengths=(8,), ends=(ended,), seed=2)
    alphas = [0.3 / (x @ x) for x, *_ in episode]
    assert max(alphas) > 1.2 * min(alphas)
    expected = _online_lambda_return(w0, episode, alphas, 0.9, 0.7)
    assert np.abs(expected - w0).max() > 0.05
    assert np.allclose(agent.arrays_[W].ravel(), expected, rtol=0, atol=1e-12)


def test_lambda_zero_is_linear_sarsa_on_both_paths():
    """At lambda 0 the dutch trace is alpha_t x and the step is semi-gradient Sarsa's (Sutton & Barto 2018,
    sections 10.1 and 12.8): same seed, same actions and rows; weights equal to rounding (the true online
    step sums two terms where Sarsa's makes one)."""
    env = {"source": "gym", "id": "MountainCar-v0", "options": {}, "step_limit": 150}
    common = {"alpha": 0.5, "gamma": 1.0, "epsilon": 0.1, "features": {"kind": "tiles", "tilings": 4, "hash_size": 128}}

    def run(kind, path, **extra):
        return short_trial(env, kind, {**common, **extra}, 5, 1200, every=400, step_cap=150, path=path)

    for path in ("gymnasium", "compiled"):
        true_online, sarsa = run("linear_true_online_sarsa", path, lam=0.0), run("linear_sarsa", path)
        assert true_online.trial_path == sarsa.trial_path == path
        assert np.allclose(true_online.final_values, sarsa.final_values, rtol=0, atol=1e-12)
        assert np.abs(sarsa.final_values).max() > 1.0
        assert_same_rows(true_online, sarsa)
        traced = run("linear_true_online_sarsa", path, lam=0.9)
        assert traced.rows["real_updates"].tolist() == [0, 400, 800, 1200]
        assert not np.allclose(traced.final_values, sarsa.final_values, rtol=0, atol=1e-3)


def _mean_lengths(lam: float, seeds: int, episodes: int) -> np.ndarray:
    features = {"kind": "tiles", "tilings": 8, "tiles": 8, "hash_size": 0}
    params = {"alpha": 0.5, "gamma": 1.0, "epsilon": 0.0, "lam": lam, "features": features}
    out = [
        episode_lengths(agent_on_mountain_car("linear_true_online_sarsa", seed, **params), 2000 + seed, episodes)
        for seed in range(seeds)
    ]
    return np.mean(out, axis=0)


@pytest.mark.slow
def test_learns_mountain_car():
    """Sutton & Barto (2018), Figures 12.10 and 12.11 (from memory): Sarsa(lambda) on Mountain Car with 8
    tilings of 8x8 tiles learns faster over the first episodes than one-step Sarsa at a good step size, and
    true online Sarsa(lambda) is among the best. Here lambda 0.9, step 0.5/8, gamma 1, no exploration, zero
    weights, 10 seeds: steps per episode fall well below the first episodes', and the first 20 episodes take
    fewer steps than at lambda 0. Seen: 738 steps per episode over the first 3 episodes, 115 over episodes
    80-100; 270 against 423 (lambda 0) over the first 20."""
    traced = _mean_lengths(0.9, seeds=10, episodes=100)
    one_step = _mean_lengths(0.0, seeds=10, episodes=100)
    assert traced[-20:].mean() < 0.5 * traced[:3].mean()
    assert traced[-20:].mean() < 200
    assert traced[:20].mean() < one_step[:20].mean()
