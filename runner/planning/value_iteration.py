"""Value iteration on a tabular model stored as successor lists (count-weighted next states).

The model of each (state, action) is `n_succ[s, a]` successor indices with weights, their total `visits[s, a]`
and a reward sum; successor index `n_states` stands for "episode ended" and is worth 0. Pairs with no
visits get either a fixed optimistic value or a self-loop with zero reward.
"""

from __future__ import annotations

import numpy as np
from numba import njit

__all__ = ["UNVISITED_OPTIMISTIC", "UNVISITED_SELF_LOOP", "solve_dense_mdp", "sweep_until_converged"]

UNVISITED_OPTIMISTIC = 0
UNVISITED_SELF_LOOP = 1


@njit(cache=True)
def sweep_until_converged(
    q,
    v,
    succ_states,
    succ_weights,
    n_succ,
    visits,
    reward_sum,
    gamma,
    tol,
    max_sweeps,
    unvisited,
    optimistic,
    known_after=1.0,
):
    """In-place (Gauss-Seidel) sweeps until the largest value change is below tol or max_sweeps is hit.

    Pairs tried fewer than `known_after` times count as unknown (valued by `unvisited`). Returns (sweeps done,
    backups done); `v` has n_states + 1 entries, the last being the ended state.
    """
    n_states, n_actions = q.shape
    sweeps = 0
    for _ in range(max_sweeps):
        delta = 0.0
        for s in range(n_states):
            best = -np.inf
            for a in range(n_actions):
                total = visits[s, a]
                if total < known_after or total == 0.0:
                    value = optimistic if unvisited == UNVISITED_OPTIMISTIC else gamma * v[s]
                else:
                    acc = 0.0
                    for j in range(n_succ[s, a]):
                        acc += succ_weights[s, a, j] * v[succ_states[s, a, j]]
                    value = (reward_sum[s, a] + gamma * acc) / total
                q[s, a] = value
                if value > best:
                    best = value
            change = abs(best - v[s])
            if change > delta:
                delta = change
            v[s] = best
        sweeps += 1
        if delta < tol:
            break
    return sweeps, sweeps * n_states * n_actions


def solve_dense_mdp(
    transitions: np.ndarray, rewards: np.ndarray, gamma: float, tol: float = 1e-10, max_sweeps: int = 100_000
) -> tuple[np.ndarray, np.ndarray, int]:
    """Value iteration on a known MDP through the same compiled kernel the agents use.

    Parameters
    ----------
    transitions : ndarray of shape (n_states, n_actions, n_states)
        Transition probabilities; a row may sum to less than 1, the rest meaning "episode ended".
    rewards : ndarray of shape (n_states, n_actions)
        Expected reward of each pair.

    Returns
    -------
    v : ndarray of shape (n_states,); q : ndarray of shape (n_states, n_actions); sweeps : int
    """
    p = np.asarray(transitions, dtype=np.float64)
    n_states, n_actions, _ = p.shape
    ended = np.clip(1.0 - p.sum(axis=2), 0.0, 1.0)
    succ_states = np.zeros((n_states, n_actions, n_states + 1), dtype=np.int64)
    succ_weights = np.zeros((n_states, n_actions, n_states + 1), dtype=np.float64)
    n_succ = np.zeros((n_states, n_actions), dtype=np.int64)
    for s in range(n_states):
        for a in range(n_actions):
            targets = list(np.flatnonzero(p[s, a]))
            weights = list(p[s, a, targets])
            if ended[s, a] > 0:
                targets.append(n_states)
                weights.append(ended[s, a])
            n_succ[s, a] = len(targets)
            succ_states[s, a, : len(targets)] = targets
            succ_weights[s, a, : len(targets)] = weights
    visits = np.ones((n_states, n_actions))
    q = np.zeros((n_states, n_actions))
    v = np.zeros(n_states + 1)
    sweeps, _ = sweep_until_converged(
        q,
        v,
        succ_states,
        succ_weights,
        n_succ,
        visits,
        np.asarray(rewards, dtype=np.float64),
        float(gamma),
        float(tol),
        int(max_sweeps),
        UNVISITED_OPTIMISTIC,
        0.0,
    )
    return v[:n_states].copy(), q, int(sweeps)
