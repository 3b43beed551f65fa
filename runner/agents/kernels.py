"""Compiled building blocks shared by the tabular agents: action choice and one-step value updates.

Every random draw comes from a stream passed in (see `runner.streams`), so a trial is fixed by its seed.
"""

import numpy as np
from numba import njit

from runner.streams import below, uniform

NO_REFCOUNTS = {"_nrt": False}
"""numba options of kernels on the per-step path: compiled without numba's reference counting (NRT).

With it, a compiled function takes a reference to each array it is passed (each array of a tuple too) on entry and
drops it on exit, each an atomic instruction that numba's pruning pass leaves in place across calls (numba issue
#2345); with the linear agents' tuples of 11-13 arrays that was most of a step: linear Sarsa on Mountain Car went
from about 1.4 us to about 0.12 us a step without them (measured). numba passes the option down to the functions
such a kernel calls (those that set none of their own), so a kernel with it, and all it calls, may not allocate
(numba refuses to compile that) and may not return an array (numba accepts returning an argument, which the
caller would then free early): they return numbers or nothing. Values are unchanged: only memory bookkeeping goes.
"""

__all__ = [
    "NO_REFCOUNTS",
    "argmax_random_tie",
    "epsilon_greedy",
    "greedy_action",
    "q_learning_update",
    "q_table_greedy",
]


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
