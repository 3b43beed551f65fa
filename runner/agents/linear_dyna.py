"""Linear Dyna (Sutton, Szepesvari, Geramifard & Bowling 2008): a linear expectation model learned online from
real transitions, and `planning_steps` simulated updates per real step from previously visited states.

Per action a, the model predicts the next feature vector as F_a phi and the reward as b_a . phi, both learned
by least-mean-squares steps on every real transition (the paper's model updates; the step is divided by
phi . phi, like the value step). The values are linear action values w_a . phi learned by semi-gradient
Q-learning (so `planning_steps: 0` is `linear_q_learning` bit for bit); a planning update takes a visited
(observation, action) pair uniformly from a memory of the last `memory` real steps and backs up
b_a . phi + gamma max_a' w_a' . (F_a phi). A terminal next state has the zero feature vector, so the model
learns how likely an episode is to end. F_a is n_features x n_features: keep the features few (hash the tiles).
Beside F_a and b_a the model keeps an observation head H_a (the next observation as H_a phi, learned by the same
least-mean-squares steps): planning does not use it; it is what `predict` answers with, so the trial can measure
the model's error in observation units (`runner.models.held_out`).

`sweeping: prioritized` replaces the uniform choice of what to plan from by the paper's prioritized sweeping
over features (`runner.agents.linear_sweeping`): `planning_steps` backups per real step at most, of the features
that lead to the features whose values changed most; `sweeping: none` is the agent above, unchanged.
"""

from dataclasses import replace

import numpy as np
from numba import njit

from runner.agents.linear import LINEAR_SCHEMA, PlanningLinearAgent, linear_q_act, linear_q_update
from runner.agents.linear_kernels import (
    IDX,
    INTS,
    LINEAR_ARRAYS,
    STATE,
    VAL,
    W,
    features_into,
    observation_values,
    remember_next,
    remember_visit,
    semi_gradient_update,
    state_features,
)
from runner.agents.linear_sweeping import note_predecessors, queue_surprise, sweep_arrays, sweep_plan
from runner.errors import EnvironmentSourceError
from runner.features import DEFAULT_FEATURES, FEATURES_PARAM
from runner.params import PLANNING_BUDGET, Param
from runner.streams import below
from runner.tags import AgentTags

__all__ = ["MAX_MODEL_ENTRIES", "LinearDyna", "linear_model_update"]

_ALPHA, _GAMMA, _EPSILON, _PLANNING, _MODEL_ALPHA, _SWEEPING, _THRESHOLD = range(7)
_F, _B, _PRED, _TARGET, _MEMORY, _MEMORY_ACTION, _MEMORY_META, _H, _OBS = range(LINEAR_ARRAYS, LINEAR_ARRAYS + 9)
_HEAP, _POS, _PRI, _QUEUE_META, _SEEN, _PREDECESSORS = range(LINEAR_ARRAYS + 9, LINEAR_ARRAYS + 15)
_SWEEPING_CODES = {"none": 0.0, "prioritized": 1.0}
_N_ACTIVE = 6

MAX_MODEL_ENTRIES = 1 << 24
"""Most numbers in the model's matrices (n_actions x n_features**2, 128 MB of float64)."""


@njit(cache=True)
def predict_features(f, b, action, idx, val, n, out):
    """out = F_action phi (dense); returns the predicted reward b_action . phi. `f[a, j]` is column j of F_a."""
    out[:] = 0.0
    reward = 0.0
    for i in range(n):
        out += val[i] * f[action, idx[i]]
        reward += b[action, idx[i]] * val[i]
    return reward


@njit(cache=True)
def linear_model_update(f, b, action, idx, val, n, next_idx, next_val, n_next, terminated, reward, alpha, pred, target):
    """One least-mean-squares step of F_a and b_a towards phi' (zero when terminated) and r, with the step
    divided by phi . phi. `pred` and `target` are scratch vectors of length n_features."""
    norm = 0.0
    for i in range(n):
        norm += val[i] * val[i]
    if norm == 0.0:
        return
    predicted_reward = predict_features(f, b, action, idx, val, n, pred)
    target[:] = 0.0
    if not terminated:
        for k in range(n_next):
            target[next_idx[k]] += next_val[k]
    step = alpha / norm
    reward_step = step * (reward - predicted_reward)
    for i in range(n):
        f[action, idx[i]] += step * val[i] * (target - pred)
        b[action, idx[i]] += reward_step * val[i]


@njit(cache=True)
def observation_head_update(h, action, idx, val, n, next_state, alpha, out):
    """One least-mean-squares step of the observation head H_a (the next observation as H_a phi) towards the real
    next observation, step divided by phi . phi; `out` is scratch of the observation's length."""
    norm = 0.0
    out[:] = 0.0
    for i in range(n):
        norm += val[i] * val[i]
        out += val[i] * h[action, idx[i]]
    if norm == 0.0:
        return
    step = alpha / norm
    for i in range(n):
        h[action, idx[i]] += step * val[i] * (next_state - out)


@njit(cache=True)
def linear_dyna_predict(arrays, obs, action, out):
    """The observation head's next observation H_a phi into `out`; returns the planning model's reward b_a . phi."""
    n = features_into(arrays, obs, 0)
    idx, val, h = arrays[IDX][0], arrays[VAL][0], arrays[_H]
    out[:] = 0.0
    reward = 0.0
    for i in range(n):
        for d in range(out.shape[0]):
            out[d] += val[i] * h[action, idx[i], d]
        reward += arrays[_B][action, idx[i]] * val[i]
    return reward


@njit(cache=True)
def linear_dyna_plan(arrays, hyper, counters, n_updates, rng):
    """`n_updates` Q-learning backups through the model from visited (observation, action) pairs."""
    w, f, b, pred = arrays[W], arrays[_F], arrays[_B], arrays[_PRED]
    meta = arrays[_MEMORY_META]
    for _ in range(n_updates):
        j = below(rng, meta[0])
        action = arrays[_MEMORY_ACTION][j]
        n = features_into(arrays, arrays[_MEMORY][j], 0)
        idx, val = arrays[IDX][0], arrays[VAL][0]
        reward = predict_features(f, b, action, idx, val, n, pred)
        best = -np.inf
        for a in range(w.shape[0]):
            best = max(best, np.dot(w[a], pred))
        semi_gradient_update(w, action, idx, val, n, reward + hyper[_GAMMA] * best, hyper[_ALPHA])
    counters[1] += n_updates


@njit(cache=True, inline="always")
def _queue(arrays):
    """The feature queue of prioritized sweeping (`runner.agents.linear_sweeping`)."""
    return arrays[_HEAP], arrays[_POS], arrays[_PRI], arrays[_QUEUE_META]


@njit(cache=True)
def td_error(arrays, hyper, state, action, reward, next_state, terminated):
    """The TD error of the direct Q-learning update before it is made (features into rows 1 and `STATE`, as
    `linear_q_update` leaves them, which computes the same numbers again)."""
    target = reward
    if not terminated:
        target += hyper[_GAMMA] * np.max(observation_values(arrays, next_state, 1))
    n = state_features(arrays, state)
    idx, val = arrays[IDX][STATE], arrays[VAL][STATE]
    value = 0.0
    for i in range(n):
        value += arrays[W][action, idx[i]] * val[i]
    return target - value


@njit(cache=True)
def linear_dyna_observe(arrays, hyper, counters, state, action, reward, next_state, terminated, rng):
    """The direct Q-learning update, the model update, the visited pair remembered, then the planning budget
    (uniformly from visited pairs, or by prioritized sweeping over features)."""
    sweeping = hyper[_SWEEPING] != 0.0
    delta = td_error(arrays, hyper, state, action, reward, next_state, terminated) if sweeping else 0.0
    linear_q_update(arrays, hyper, counters, state, action, reward, next_state, terminated)
    n = arrays[INTS][_N_ACTIVE]
    linear_model_update(
        arrays[_F],
        arrays[_B],
        action,
        arrays[IDX][STATE],
        arrays[VAL][STATE],
        n,
        arrays[IDX][1],
        arrays[VAL][1],
        n,
        terminated,
        reward,
        hyper[_MODEL_ALPHA],
        arrays[_PRED],
        arrays[_TARGET],
    )
    observation_head_update(
        arrays[_H], action, arrays[IDX][STATE], arrays[VAL][STATE], n, next_state, hyper[_MODEL_ALPHA], arrays[_OBS]
    )
    counters[2] += 1
    if sweeping:
        idx, val = arrays[IDX][STATE], arrays[VAL][STATE]
        note_predecessors(arrays[_F], arrays[_SEEN], arrays[_PREDECESSORS], action, idx, n)
        queue_surprise(_queue(arrays), idx, val, n, delta, hyper[_THRESHOLD])
    remember_next(arrays, next_state, terminated)
    remember_visit(arrays[_MEMORY], arrays[_MEMORY_ACTION], arrays[_MEMORY_META], state, action)
    if sweeping:
        counters[1] += sweep_plan(
            arrays[W],
            arrays[_F],
            arrays[_B],
            _queue(arrays),
            arrays[_PREDECESSORS],
            np.int64(hyper[_PLANNING]),
            hyper[_ALPHA],
            hyper[_GAMMA],
            hyper[_THRESHOLD],
        )
    else:
        linear_dyna_plan(arrays, hyper, counters, np.int64(hyper[_PLANNING]), rng)


class LinearDyna(PlanningLinearAgent):
    """Linear Dyna: linear Q-learning plus planning through a learned linear expectation model."""

    tags = AgentTags(observations=("box",), learned_model="function")
    kind = "linear_dyna"
    summary = "linear Q-learning plus n simulated updates per real step through a learned linear expectation model"
    source = "Sutton, Szepesvari, Geramifard & Bowling (2008); Sutton & Barto (2018), section 8.2"
    schema = (
        *LINEAR_SCHEMA[:3],
        replace(FEATURES_PARAM, default={**DEFAULT_FEATURES, "hash_size": 1024}),
        Param(
            "planning_steps",
            "int",
            5,
            "simulated updates per real step (0 gives linear_q_learning)",
            low=0,
            role=PLANNING_BUDGET,
        ),
        Param(
            "model_alpha",
            "float",
            0.1,
            "step size of the model's updates, divided by the squared feature norm",
            low=0.0,
            high=1.0,
            low_open=True,
        ),
        Param("memory", "int", 100_000, "visited (observation, action) pairs kept to plan from", low=1, high=10**7),
        Param(
            "sweeping",
            "choice",
            "none",
            "what planning backs up: uniformly drawn visited pairs, or features by prioritized sweeping",
            choices=tuple(_SWEEPING_CODES),
        ),
        Param(
            "priority_threshold",
            "float",
            0.0,
            "with prioritized sweeping, the largest priority that stays out of the queue",
            low=0.0,
        ),
    )

    def make_arrays(self, n_states, n_actions):
        shared = super().make_arrays(n_states, n_actions)
        n_features = shared[W].shape[1]
        if n_actions * n_features**2 > MAX_MODEL_ENTRIES:
            raise EnvironmentSourceError(
                f"linear_dyna: {n_features:,} features make a model of {n_actions} x {n_features:,}^2 numbers, more "
                f"than {MAX_MODEL_ENTRIES:,}; use fewer features (e.g. features.hash_size: 1024)"
            )
        return (
            *shared,
            np.zeros((n_actions, n_features, n_features)),
            np.zeros((n_actions, n_features)),
            np.zeros(n_features),
            np.zeros(n_features),
            np.zeros((self._params["memory"], n_states)),
            np.zeros(self._params["memory"], dtype=np.int64),
            np.zeros(2, dtype=np.int64),
            np.zeros((n_actions, n_features, n_states)),
            np.zeros(n_states),
            *sweep_arrays(n_actions, n_features, self._params["sweeping"] == "prioritized"),
        )

    def make_hyper(self):
        p = self._params
        return [
            *super().make_hyper(),
            float(p["planning_steps"]),
            p["model_alpha"],
            _SWEEPING_CODES[p["sweeping"]],
            p["priority_threshold"],
        ]

    def spends_whole_budget(self) -> bool:
        """Uniform planning makes every update of its budget; prioritized sweeping stops when its queue is empty."""
        return self._params["sweeping"] == "none"

    def predict(self, observation: np.ndarray, action: int) -> tuple[np.ndarray, float]:
        """The next observation by the model's observation head H_a phi and the reward b_a . phi (for the
        model-error contract: F_a predicts features, which have no observation to compare with)."""
        obs = np.asarray(observation, dtype=np.float64)
        out = np.zeros(obs.size)
        reward = linear_dyna_predict(self.arrays_, obs, int(action), out)
        return out, float(reward)

    act_kernel = staticmethod(linear_q_act)
    observe_kernel = staticmethod(linear_dyna_observe)
    function_predict_kernel = staticmethod(linear_dyna_predict)
