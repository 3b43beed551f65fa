"""Prioritized sweeping over features for linear Dyna (Sutton, Szepesvari, Geramifard & Bowling 2008, section 5
and their prioritized-sweeping algorithms; the steps below as recalled from the paper, not checked against it).

The queue holds features, not states. After a real transition with TD error delta, every active feature i is
queued with priority |delta phi(i)|. A planning step pops the feature i of largest priority and backs up each of
its predecessors: the pairs (feature j, action a) with F_a[i, j] != 0, i.e. whose unit feature vector e_j the
model says leads to feature i under a. The backup treats e_j as a state (its squared norm is 1, so the value step
is `alpha` itself): w_a[j] moves by alpha towards b_a[j] + gamma max_a' w_a' . F_a e_j, and j is queued with
priority |TD error| of that backup. A priority at or below `threshold` is not queued.

The paper backs up state values and repeats p pops per real step, each pop backing up all its predecessors;
here the values are per action (as the rest of `linear_dyna`) and the budget counts backups, `planning_steps`
of them per real step at most (fewer when the queue runs dry: the counters say how many were made). When the
budget ends in the middle of a popped feature's predecessors, the next real step's planning resumes there before
popping another (the cursor in `meta`).

Finding the predecessors of feature i by reading F_a[i, :] would touch one number per cache line (F is stored by
columns); instead `predecessors[i, a, j]` marks every (a, j) whose F_a[i, j] has ever been non-zero (kept up by
`note_predecessors` from the columns a real step changed, with `seen` in F's own layout so that stays a
contiguous scan), and the sweep confirms F_a[i, j] != 0 before backing up.
"""

import numpy as np
from numba import njit

from runner.agents.priority_queue import queue_pop, queue_raise

__all__ = ["note_predecessors", "queue_surprise", "sweep_arrays", "sweep_backup", "sweep_plan"]

_SIZE, _FEATURE, _ACTION, _NEXT = range(4)


def sweep_arrays(n_actions: int, n_features: int, on: bool) -> tuple[np.ndarray, ...]:
    """(heap, pos, pri, meta, seen, predecessors): the feature queue, the cursor `meta` = (queue size, popped
    feature or -1, next action, next feature to look at) and the predecessor marks (empty when `on` is False)."""
    k, m = (n_features, n_actions) if on else (0, 0)
    return (
        np.zeros(n_features, dtype=np.int64),
        np.full(n_features, -1, dtype=np.int64),
        np.zeros(n_features, dtype=np.float64),
        np.array([0, -1, 0, 0], dtype=np.int64),
        np.zeros((m, k, k), dtype=np.int8),
        np.zeros((k, m, k), dtype=np.int8),
    )


@njit(cache=True)
def note_predecessors(f, seen, predecessors, action, idx, n):
    """Mark (action, j) as a predecessor of every feature i where column j of F_action (j active, so just
    updated) has become non-zero."""
    for k in range(n):
        j = idx[k]
        column, marked = f[action, j], seen[action, j]
        for i in range(column.shape[0]):
            if marked[i] == 0 and column[i] != 0.0:
                marked[i] = 1
                predecessors[i, action, j] = 1


@njit(cache=True)
def queue_surprise(queue, idx, val, n, delta, threshold):
    """Queue every active feature i of a real transition with priority |delta phi(i)| (above `threshold`)."""
    heap, pos, pri, meta = queue
    for k in range(n):
        priority = abs(delta * val[k])
        if priority > threshold:
            queue_raise(heap, pos, pri, meta[_SIZE:_FEATURE], idx[k], priority)


@njit(cache=True)
def sweep_backup(w, f, b, action, j, alpha, gamma):
    """Back up the unit feature vector e_j under `action` through the model; returns the TD error."""
    best = -np.inf
    for a in range(w.shape[0]):
        best = max(best, np.dot(w[a], f[action, j]))
    delta = b[action, j] + gamma * best - w[action, j]
    w[action, j] += alpha * delta
    return delta


@njit(cache=True)
def sweep_plan(w, f, b, queue, predecessors, budget, alpha, gamma, threshold):
    """Up to `budget` backups of the predecessors of the queued features, highest priority first; returns how
    many were made."""
    heap, pos, pri, meta = queue
    size = meta[_SIZE:_FEATURE]
    n_actions, n_features = w.shape
    done = 0
    while done < budget:
        if meta[_FEATURE] < 0:
            if size[0] == 0:
                break
            meta[_FEATURE] = queue_pop(heap, pos, pri, size)
            meta[_ACTION] = 0
            meta[_NEXT] = 0
        i = meta[_FEATURE]
        while meta[_ACTION] < n_actions and done < budget:
            a = meta[_ACTION]
            marks = predecessors[i, a]
            while meta[_NEXT] < n_features and done < budget:
                j = meta[_NEXT]
                meta[_NEXT] += 1
                if marks[j] != 0 and f[a, j, i] != 0.0:
                    delta = sweep_backup(w, f, b, a, j, alpha, gamma)
                    done += 1
                    if abs(delta) > threshold:
                        queue_raise(heap, pos, pri, size, j, abs(delta))
            if meta[_NEXT] == n_features:
                meta[_ACTION] += 1
                meta[_NEXT] = 0
        if meta[_ACTION] == n_actions:
            meta[_FEATURE] = -1
    return done
