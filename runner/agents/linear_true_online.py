"""True online Sarsa(lambda) with dutch traces (van Seijen, Mahmood, Pilarski, Machado & Sutton 2016; Sutton &
Barto 2018, section 12.8), linear in the shared features.

The trace e has the step size folded in (the form of van Seijen & Sutton 2014, from memory; the tests check it
against section 12.4's online lambda-return algorithm), so the step may change from step to step:
alpha_t = alpha / (phi . phi), as in every linear kind (constant for tile coding). Per real step, with
x = phi(S, A), x' = phi(S', A') (zero when S' ends the episode), Q = w . x, Q' = w . x' and Q_old the last
step's Q':

    e <- gamma lambda e + alpha_t x - alpha_t gamma lambda (e . x) x
    w <- w + (R + gamma Q' - Q_old) e - alpha_t (Q - Q_old) x

which is the section's boxed algorithm when alpha_t is constant (e = alpha z), and at lambda 0 is the
semi-gradient Sarsa step of `linear_sarsa`. Traces and Q_old are cleared when an episode starts: a step starts
one when its observation is not the last step's next observation (`runner.agents.linear_kernels.state_features`'
rule), which covers termination, truncation at a step limit and the first step. The kernels see `terminated`
only, so a truncated episode whose restart observation equals its last next observation exactly would carry its
traces on (a measure-zero event for continuous observations).

Cost: the trace is dense (n_actions x n_features), but only entries touched since the episode started can be
nonzero, so the decay and the weight step run over a list of those: O(distinct (action, feature) pairs active
so far this episode) per real step, at most O(n_actions x n_features), which it reaches with dense features
(RBF, Fourier, raw) or long episodes; clearing at an episode's start costs the same once. Traces are kept
exactly (no small trace is dropped), so the kernel equals the pseudocode to rounding. A dense decay over all
entries would cost O(n_actions x n_features) every step; `benchmarks/true_online_speed.py` times both.
"""

import numpy as np
from numba import njit

from runner.agents.linear import LINEAR_SCHEMA, LinearSarsa, linear_sarsa_act
from runner.agents.linear_kernels import (
    CACHED,
    CACHED_OBS,
    IDX,
    LINEAR_ARRAYS,
    STATE,
    VAL,
    W,
    epsilon_greedy_values,
    observation_values,
    remember_next,
    same_observation,
    state_features,
)
from runner.params import Param

__all__ = ["LinearTrueOnlineSarsa", "clear_trace", "dutch_trace_update"]

_ALPHA, _GAMMA, _EPSILON, _LAMBDA = range(4)
_PENDING_OBS, _PENDING = LINEAR_ARRAYS, LINEAR_ARRAYS + 1  # as linear_sarsa's, so its act kernel serves
_TRACE, _TOUCHED, _MARKS, _COUNT, _Q_OLD = range(LINEAR_ARRAYS + 2, LINEAR_ARRAYS + 7)


@njit(cache=True)
def clear_trace(trace, touched, marks, count):
    """Zero the trace where it was touched and forget the touched list (an episode starts)."""
    flat = trace.reshape(trace.size)
    for k in range(count[0]):
        flat[touched[k]] = 0.0
        marks[touched[k]] = 0
    count[0] = 0


@njit(cache=True)
def dutch_trace_update(w, trace, touched, marks, count, action, idx, val, n, target, alpha, decay, q_old):
    """One true online step for x = the n active (idx, val) features of `action`, towards `target` = R + gamma
    Q' (R alone at the end), with `decay` = gamma lambda and alpha_t = alpha / (x . x). `touched` lists the flat
    indices (action * n_features + feature) where the trace may be nonzero, `marks` flags them, `count[0]` is
    how many. Returns Q = w . x before the step."""
    n_features = w.shape[1]
    flat_w = w.reshape(w.size)
    flat_e = trace.reshape(trace.size)
    q = 0.0
    norm = 0.0
    ex = 0.0
    for i in range(n):
        q += w[action, idx[i]] * val[i]
        ex += trace[action, idx[i]] * val[i]
        norm += val[i] * val[i]
    step = alpha / norm if norm > 0.0 else 0.0
    for k in range(count[0]):
        flat_e[touched[k]] *= decay
    added = step * (1.0 - decay * ex)
    for i in range(n):
        j = action * n_features + idx[i]
        if marks[j] == 0:
            marks[j] = 1
            touched[count[0]] = j
            count[0] += 1
        flat_e[j] += added * val[i]
    scale = target - q_old
    for k in range(count[0]):
        j = touched[k]
        flat_w[j] += scale * flat_e[j]
    change = step * (q - q_old)
    for i in range(n):
        w[action, idx[i]] -= change * val[i]
    return q


@njit(cache=True)
def true_online_sarsa_observe(arrays, hyper, counters, state, action, reward, next_state, terminated, rng):
    """Clear the traces if an episode starts, choose the next action now (as `linear_sarsa`), then one true
    online step towards R + gamma Q(S', A')."""
    if not (arrays[CACHED][0] == 1 and same_observation(arrays[CACHED_OBS], state)):
        clear_trace(arrays[_TRACE], arrays[_TOUCHED], arrays[_MARKS], arrays[_COUNT])
        arrays[_Q_OLD][0] = 0.0
    gamma = hyper[_GAMMA]
    target = reward
    q_next = 0.0
    pending = arrays[_PENDING]
    pending[0] = 0
    if not terminated:
        q = observation_values(arrays, next_state, 1)
        following = epsilon_greedy_values(q, hyper[_EPSILON], rng)
        q_next = q[following]
        target += gamma * q_next
        pending[0] = 1
        pending[1] = following
        arrays[_PENDING_OBS][:] = next_state
    n = state_features(arrays, state)
    dutch_trace_update(
        arrays[W],
        arrays[_TRACE],
        arrays[_TOUCHED],
        arrays[_MARKS],
        arrays[_COUNT],
        action,
        arrays[IDX][STATE],
        arrays[VAL][STATE],
        n,
        target,
        hyper[_ALPHA],
        gamma * hyper[_LAMBDA],
        arrays[_Q_OLD][0],
    )
    arrays[_Q_OLD][0] = q_next
    counters[0] += 1
    remember_next(arrays, next_state, terminated)


class LinearTrueOnlineSarsa(LinearSarsa):
    """True online Sarsa(lambda): dutch traces over the linear features; lam 0 is linear Sarsa's update."""

    kind = "linear_true_online_sarsa"
    summary = "model-free true online Sarsa(lambda) with dutch traces, linear in tile, RBF, Fourier or raw features"
    source = "van Seijen, Mahmood, Pilarski, Machado & Sutton (2016); Sutton & Barto (2018), section 12.8"
    schema = (
        *LINEAR_SCHEMA[:3],
        Param("lam", "float", 0.9, "trace decay lambda (0: one-step Sarsa; 1: Monte Carlo-like)", low=0.0, high=1.0),
        LINEAR_SCHEMA[3],
    )

    def make_arrays(self, n_states, n_actions):
        shared = super().make_arrays(n_states, n_actions)
        size = shared[W].size
        return (
            *shared,
            np.zeros(shared[W].shape),
            np.zeros(size, dtype=np.int64),
            np.zeros(size, dtype=np.uint8),
            np.zeros(1, dtype=np.int64),
            np.zeros(1),
        )

    def make_hyper(self):
        return [*super().make_hyper(), self._params["lam"]]

    act_kernel = staticmethod(linear_sarsa_act)
    observe_kernel = staticmethod(true_online_sarsa_observe)
