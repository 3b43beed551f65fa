"""Compiled building blocks shared by the tabular agents: action choice and one-step value updates.

Every random draw comes from a stream passed in (see `runner.streams`), so a trial is fixed by its seed.
"""

import numpy as np
from numba import njit

from runner.streams import below, uniform

__all__ = ["argmax_random_tie", "epsilon_greedy", "greedy_action", "q_learning_update", "q_table_greedy"]


@njit(cache=True)
def argmax_random_tie(values, rng):
    """Index of the largest value; ties are broken uniformly at random."""
    best = values[0]
    count = 1
    choice = 0
    for i in range(1, values.shape[0]):
        v = values[i]
        if v > best:
            best = v
            count = 1
            choice = i
        elif v == best:
            count += 1
            if below(rng, count) == 0:
                choice = i
    return choice


@njit(cache=True)
def epsilon_greedy(q, state, epsilon, rng):
    """With probability epsilon a uniform action, else a greedy one with random tie-breaking."""
    if uniform(rng) < epsilon:
        return below(rng, q.shape[1])
    return argmax_random_tie(q[state], rng)


@njit(cache=True)
def greedy_action(q, state, rng):
    """The greedy action of a Q-table; the evaluation policy of every tabular agent."""
    return argmax_random_tie(q[state], rng)


@njit(cache=True)
def q_table_greedy(arrays, hyper, state, rng):
    """The default evaluation kernel: greedy on the Q-table in `arrays[0]`."""
    return argmax_random_tie(arrays[0][state], rng)


@njit(cache=True)
def q_learning_update(q, state, action, reward, next_state, terminated, alpha, gamma):
    """One Q-learning backup; a terminated transition does not bootstrap."""
    target = reward
    if not terminated:
        target += gamma * np.max(q[next_state])
    q[state, action] += alpha * (target - q[state, action])
