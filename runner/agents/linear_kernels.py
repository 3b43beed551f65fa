"""Compiled building blocks of the linear agents: action values from active features, epsilon-greedy choice
and the semi-gradient update (Sutton & Barto 2018, sections 9.3 and 10.1).

Every linear agent's arrays start with the same entries (`LINEAR_ARRAYS`): the weights (n_actions x n_features),
the five arrays of the feature map (`runner.features.kernels`), scratch rows for the active features of two
observations, and a scratch vector of action values. Kind-specific arrays follow.
"""

import numpy as np
from numba import njit

from runner.agents.kernels import NO_REFCOUNTS, argmax_random_tie
from runner.features.kernels import feature_values
from runner.streams import below, uniform

__all__ = [
    "LINEAR_ARRAYS",
    "STATE",
    "acting_values",
    "action_values",
    "copy_into",
    "epsilon_greedy_values",
    "largest",
    "linear_arrays",
    "linear_greedy",
    "observation_values",
    "remember_next",
    "remember_visit",
    "same_observation",
    "semi_gradient_update",
    "state_features",
]

W, INTS, FLOATS, LOW, HIGH, TABLE, IDX, VAL, Q, CACHED_OBS, CACHED = range(11)
LINEAR_ARRAYS = 11
STATE = 2
"""Scratch row 2 holds the features of the observation being learned from; when it equals the last next
observation (`CACHED_OBS`, valid while `CACHED[0]` is 1) they are reused instead of computed again."""


def linear_arrays(n_actions: int, feature_map: tuple[np.ndarray, ...]) -> tuple[np.ndarray, ...]:
    """The shared leading arrays: zero weights, the feature map, scratch space and the features' cache."""
    ints = feature_map[0]
    dims, n_features, n_active = int(ints[1]), int(ints[5]), int(ints[6])
    return (
        np.zeros((n_actions, n_features), dtype=np.float64),
        *feature_map,
        np.zeros((3, n_active), dtype=np.int64),
        np.zeros((3, n_active), dtype=np.float64),
        np.zeros(n_actions, dtype=np.float64),
        np.zeros(dims, dtype=np.float64),
        np.zeros(1, dtype=np.int64),
    )


@njit(cache=True, inline="always")
def features_into(arrays, obs, slot):
    """Active features of an observation into scratch row `slot` (0 or 1; 2 is `STATE`); returns how many."""
    fmap = (arrays[INTS], arrays[FLOATS], arrays[LOW], arrays[HIGH], arrays[TABLE])
    return feature_values(obs, fmap, arrays[IDX][slot], arrays[VAL][slot])


@njit(cache=True, inline="always")
def state_features(arrays, state):
    """The features of the observation learned from, into row `STATE`: reused when it is the last next
    observation (the usual case within an episode), else computed."""
    if arrays[CACHED][0] == 1 and same_observation(arrays[CACHED_OBS], state):
        return arrays[INTS][6]
    return features_into(arrays, state, STATE)


@njit(cache=True, inline="always")
def same_observation(a, b):
    """Whether two observations are equal entry by entry (no temporary array, unlike numpy.array_equal)."""
    same = True
    for i in range(a.shape[0]):
        if a[i] != b[i]:
            same = False
            break
    return same


@njit(cache=True, inline="always")
def copy_into(dst, src):
    """dst[:] = src without the view and broadcasting machinery of a slice assignment."""
    for i in range(dst.shape[0]):
        dst[i] = src[i]


@njit(cache=True, inline="always")
def remember_next(arrays, next_state, terminated):
    """Keep the next observation's features (row 1) in row `STATE` for the next update (not after an end)."""
    if terminated:
        arrays[CACHED][0] = 0
        return
    idx, val = arrays[IDX], arrays[VAL]
    for i in range(idx.shape[1]):
        idx[STATE, i] = idx[1, i]
        val[STATE, i] = val[1, i]
    copy_into(arrays[CACHED_OBS], next_state)
    arrays[CACHED][0] = 1


@njit(cache=True, inline="always")
def remember_visit(memory, memory_action, meta, state, action):
    """Add a visited (observation, action) to the ring buffer that planning starts from; `meta` holds
    (how many are kept, where the next one goes)."""
    memory[meta[1]] = state
    memory_action[meta[1]] = action
    meta[1] = (meta[1] + 1) % memory.shape[0]
    meta[0] = min(meta[0] + 1, memory.shape[0])


@njit(cache=True, inline="always")
def largest(values):
    """The largest value, or the first NaN met (as numba's np.max; without the iterator it allocates)."""
    best = values[0]
    if np.isnan(best):
        return best
    for i in range(1, values.shape[0]):
        v = values[i]
        if np.isnan(v):
            return v
        if v > best:
            best = v
    return best


@njit(cache=True, inline="always")
def action_values(w, idx, val, n, out):
    """out[a] = w[a] . phi for the n active features (idx, val)."""
    for a in range(w.shape[0]):
        total = 0.0
        for i in range(n):
            total += w[a, idx[i]] * val[i]
        out[a] = total


@njit(cache=True, inline="always")
def observation_values(arrays, obs, slot):
    """Action values of an observation (into the scratch vector, returned); its features stay in `slot`."""
    n = features_into(arrays, obs, slot)
    action_values(arrays[W], arrays[IDX][slot], arrays[VAL][slot], n, arrays[Q])
    return arrays[Q]


@njit(cache=True, inline="always")
def acting_values(arrays, obs):
    """Action values of the observation acted on (into the scratch vector, returned): from the cached features
    when it is the last next observation (the usual case within an episode; the same reuse as `state_features`),
    else computed in scratch row 0."""
    if arrays[CACHED][0] == 1 and same_observation(arrays[CACHED_OBS], obs):
        action_values(arrays[W], arrays[IDX][STATE], arrays[VAL][STATE], arrays[INTS][6], arrays[Q])
        return arrays[Q]
    return observation_values(arrays, obs, 0)


@njit(cache=True, **NO_REFCOUNTS)
def epsilon_greedy_values(q, epsilon, rng):
    """With probability epsilon a uniform action, else a greedy one with random ties (draws as the tabular
    `epsilon_greedy` does)."""
    if uniform(rng) < epsilon:
        return below(rng, q.shape[0])
    return argmax_random_tie(q, rng)


@njit(cache=True, **NO_REFCOUNTS)
def linear_greedy(arrays, hyper, state, rng):
    """The evaluation kernel of every linear agent: greedy on the linear action values, ties from `rng`."""
    return argmax_random_tie(observation_values(arrays, state, 0), rng)


@njit(cache=True, **NO_REFCOUNTS)
def semi_gradient_update(w, action, idx, val, n, target, alpha):
    """w[action] += alpha / (phi . phi) * (target - w[action] . phi) * phi: the semi-gradient step with the step
    size divided by the squared feature norm (the number of tilings for tile coding, as Sutton & Barto 2018,
    section 9.5.4, state step sizes), so `alpha` means the same for every feature kind."""
    value = 0.0
    norm = 0.0
    for i in range(n):
        value += w[action, idx[i]] * val[i]
        norm += val[i] * val[i]
    if norm == 0.0:
        return
    step = alpha / norm * (target - value)
    for i in range(n):
        w[action, idx[i]] += step * val[i]
