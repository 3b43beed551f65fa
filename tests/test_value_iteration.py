"""`solve_dense_mdp` against independent solutions: a linear solve, a linear program, and closed forms."""

import numpy as np
import pytest
from scipy.optimize import linprog

from runner.planning.value_iteration import solve_dense_mdp

GAMMA = 0.9


def _random_mdp(seed: int = 20240611, n_states: int = 5, n_actions: int = 3) -> tuple[np.ndarray, np.ndarray]:
    """A stochastic MDP whose rows sometimes sum to less than 1 (the rest is 'episode ended', worth 0).

    Built from a fixed Generator: Dirichlet rows over the next states, then a per-pair ending probability
    (zero for about half the pairs, so both kinds of row are present); rewards of both signs.
    """
    rng = np.random.default_rng(seed)
    p = rng.dirichlet(np.full(n_states, 0.7), size=(n_states, n_actions))
    ending = np.where(rng.random((n_states, n_actions)) < 0.5, rng.uniform(0.05, 0.6, (n_states, n_actions)), 0.0)
    p *= (1.0 - ending)[:, :, None]
    rewards = rng.normal(0.0, 1.0, (n_states, n_actions))
    return p, rewards


def test_random_mdp_has_both_row_kinds():
    """Guard on the fixture itself: some rows end the episode with positive probability, some never do."""
    p, _ = _random_mdp()
    ended = 1.0 - p.sum(axis=2)
    assert (ended > 1e-3).sum() >= 3
    assert (np.abs(ended) < 1e-12).sum() >= 3
    assert np.all(p >= 0.0)


def test_value_equals_exact_policy_evaluation_of_its_greedy_policy():
    # Reference: numpy.linalg.solve on the Bellman expectation equations V = r_pi + gamma P_pi V, i.e.
    # V = (I - gamma P_pi)^-1 r_pi (Puterman 1994, Markov Decision Processes, section 6.1, from memory;
    # Sutton & Barto 2018, eq. 4.4, from memory). Missing row mass = episode ended, contributing 0.
    p, r = _random_mdp()
    v, q, sweeps = solve_dense_mdp(p, r, GAMMA, tol=1e-12)
    n = p.shape[0]
    assert 1 <= sweeps < 100_000
    policy = np.argmax(q, axis=1)
    p_pi = p[np.arange(n), policy]
    r_pi = r[np.arange(n), policy]
    v_exact = np.linalg.solve(np.eye(n) - GAMMA * p_pi, r_pi)
    np.testing.assert_allclose(v, v_exact, rtol=0, atol=1e-8)
    # q is the one-step lookahead on v (same semantics), and v is its row maximum.
    np.testing.assert_allclose(q, r + GAMMA * p @ v, rtol=0, atol=1e-8)
    np.testing.assert_allclose(v, q.max(axis=1), rtol=0, atol=1e-12)


def test_value_equals_linear_programming_optimum():
    # Reference: scipy.optimize.linprog (HiGHS) on the primal LP of a discounted MDP -- minimise sum_s V(s)
    # subject to V(s) >= r(s,a) + gamma sum_s' P(s'|s,a) V(s') for every (s, a); its unique optimum is V*
    # (Puterman 1994, section 6.9, from memory).
    p, r = _random_mdp()
    v, _, _ = solve_dense_mdp(p, r, GAMMA, tol=1e-12)
    n, m, _ = p.shape
    a_ub = np.zeros((n * m, n))
    b_ub = np.zeros(n * m)
    for s in range(n):
        for a in range(m):
            row = GAMMA * p[s, a].copy()
            row[s] -= 1.0
            a_ub[s * m + a] = row  # gamma P V - V(s) <= -r
            b_ub[s * m + a] = -r[s, a]
    result = linprog(np.ones(n), A_ub=a_ub, b_ub=b_ub, bounds=[(None, None)] * n, method="highs")
    assert result.status == 0, result.message
    np.testing.assert_allclose(v, result.x, rtol=0, atol=1e-6)


def test_optimal_value_beats_every_deterministic_policy():
    """Brute force over all 3^5 deterministic policies (numpy.linalg.solve each): V* is their pointwise max."""
    p, r = _random_mdp()
    v, _, _ = solve_dense_mdp(p, r, GAMMA, tol=1e-12)
    n, m, _ = p.shape
    best = np.full(n, -np.inf)
    for code in range(m**n):
        policy = np.array([(code // m**k) % m for k in range(n)])
        v_pi = np.linalg.solve(np.eye(n) - GAMMA * p[np.arange(n), policy], r[np.arange(n), policy])
        assert np.all(v_pi <= v + 1e-8)
        best = np.maximum(best, v_pi)
    np.testing.assert_allclose(v, best, rtol=0, atol=1e-8)


def test_two_state_chain_closed_form():
    # State 1 loops on itself with reward 1: V(1) = sum_t gamma^t = 1 / (1 - gamma) (geometric series).
    # State 0: action 0 moves to state 1 with reward 0 -> gamma / (1 - gamma) = 9 at gamma 0.9;
    # action 1 ends the episode at once with reward 5 (row sums to 0) -> 5. So V(0) = 9 and action 0 is greedy.
    p = np.zeros((2, 2, 2))
    p[0, 0, 1] = 1.0
    p[1, :, 1] = 1.0
    r = np.array([[0.0, 5.0], [1.0, 1.0]])
    v, q, _ = solve_dense_mdp(p, r, GAMMA)
    assert v[1] == pytest.approx(1.0 / (1.0 - GAMMA), abs=1e-8)
    assert v[0] == pytest.approx(GAMMA / (1.0 - GAMMA), abs=1e-8)
    assert q[0, 1] == pytest.approx(5.0, abs=1e-12)
    assert int(np.argmax(q[0])) == 0


def test_partial_row_means_episode_ends_worth_zero():
    # One state, reward 1, stays with probability 0.5 and otherwise the episode ends (row sums to 0.5):
    # V = 1 + gamma * 0.5 * V  ->  V = 1 / (1 - 0.5 gamma) = 1 / 0.55 at gamma 0.9.
    p = np.full((1, 1, 1), 0.5)
    r = np.ones((1, 1))
    v, _, _ = solve_dense_mdp(p, r, GAMMA)
    assert v[0] == pytest.approx(1.0 / (1.0 - 0.5 * GAMMA), abs=1e-8)


def test_terminal_only_row_has_value_equal_to_reward():
    # A row of all zeros ends the episode with probability 1, so Q = r exactly, whatever gamma.
    p = np.zeros((1, 2, 1))
    r = np.array([[-2.0, 3.5]])
    v, q, _ = solve_dense_mdp(p, r, 0.99)
    np.testing.assert_array_equal(q, r)
    assert v[0] == 3.5
