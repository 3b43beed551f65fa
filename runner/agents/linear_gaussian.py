"""A linear-Gaussian model agent: Bayesian linear regression, per action, of the change of observation, the
reward and the end of the episode on the features of the observation; planning by simulated transitions from
visited observations through the posterior predictive, feeding linear Q-learning updates.

The model (Bishop 2006, section 3.3): outputs y = (s' - s, r, ended) with weights W_a ~ N(0, prior_var I) per
output and Gaussian noise of variance noise_var; after transitions with features Phi the posterior of each output's
weights is N(mu, Sigma) with Sigma = (I / prior_var + Phi^T Phi / noise_var)^-1 and mu = Sigma Phi^T y / noise_var
(the ridge solution with penalty noise_var / prior_var), updated one transition at a time by the rank-one
(Sherman-Morrison) form; the predictive variance at phi is noise_var + phi^T Sigma phi.

Planning: `planning_steps` simulated transitions per real step, in rollouts of up to `rollout_length` steps,
each starting from a visited (observation, action) pair; the rollout's later actions are epsilon-greedy.
`sampling: mean` takes the predictive mean (and bootstraps with weight 1 - P(ended)); `sampling: predictive`
draws the change and the reward from the posterior predictive and the end with probability P(ended).
With `planning_steps: 0` the agent is `linear_q_learning` bit for bit.
"""

import math
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
    epsilon_greedy_values,
    features_into,
    observation_values,
    remember_next,
    remember_visit,
    semi_gradient_update,
)
from runner.errors import EnvironmentSourceError
from runner.features import FEATURES_PARAM
from runner.params import PLANNING_BUDGET, Param
from runner.streams import below, uniform
from runner.tags import AgentTags

__all__ = ["MAX_MODEL_ENTRIES", "LinearGaussian", "posterior_update", "predictive"]

_ALPHA, _GAMMA, _EPSILON, _PLANNING, _PRIOR, _NOISE, _ROLLOUT, _SAMPLING = range(8)
(_COV, _MEAN, _GAIN, _PRED, _Y, _SIM, _SIM_NEXT, _MEMORY, _MEMORY_ACTION, _MEMORY_META) = range(
    LINEAR_ARRAYS, LINEAR_ARRAYS + 10
)
_N_ACTIVE = 6
_SAMPLING_CODES = {"mean": 0.0, "predictive": 1.0}

MAX_MODEL_ENTRIES = 1 << 24
"""Most numbers in the posterior covariances (n_actions x n_features**2, 128 MB of float64)."""


@njit(cache=True)
def standard_normal(rng):
    """A standard normal draw from two uniforms of the stream (Box-Muller; common practice)."""
    u = 1.0 - uniform(rng)
    return math.sqrt(-2.0 * math.log(u)) * math.cos(2.0 * math.pi * uniform(rng))


@njit(cache=True)
def predictive_mean(mean, action, idx, val, n, out):
    """Predictive mean into `out` (one entry per output): mu^T phi."""
    out[:] = 0.0
    for i in range(n):
        out += val[i] * mean[action, idx[i]]


@njit(cache=True)
def predictive(cov, mean, action, idx, val, n, noise_var, gain, out):
    """Predictive mean into `out` (one entry per output); returns the predictive variance noise_var +
    phi^T Sigma phi. `gain` receives Sigma phi."""
    predictive_mean(mean, action, idx, val, n, out)
    gain[:] = 0.0
    for i in range(n):
        gain += val[i] * cov[action, idx[i]]
    spread = 0.0
    for i in range(n):
        spread += val[i] * gain[idx[i]]
    return noise_var + spread


@njit(cache=True)
def posterior_update(cov, mean, action, idx, val, n, y, noise_var, gain, pred):
    """Condition the posterior of action `action` on one observed output vector y at features (idx, val)."""
    variance = predictive(cov, mean, action, idx, val, n, noise_var, gain, pred)
    k = gain.shape[0]
    m = y.shape[0]
    for j in range(k):
        g = gain[j] / variance
        for o in range(m):
            mean[action, j, o] += g * (y[o] - pred[o])
        for c in range(k):
            cov[action, j, c] -= g * gain[c]


@njit(cache=True)
def linear_gaussian_predict(arrays, obs, action, out):
    """The predictive mean's next observation (obs plus the mean change) into `out`; returns its mean reward.
    The whole mean output (change, reward, end) stays in the scratch vector `_PRED`."""
    pred = arrays[_PRED]
    n = features_into(arrays, obs, 0)
    predictive_mean(arrays[_MEAN], action, arrays[IDX][0], arrays[VAL][0], n, pred)
    dims = obs.shape[0]
    for d in range(dims):
        out[d] = obs[d] + pred[d]
    return pred[dims]


@njit(cache=True)
def _simulate(arrays, hyper, obs, action, rng):
    """One simulated step from `obs` under `action`: a value update, the next observation into _SIM_NEXT;
    returns whether the simulated episode ended."""
    cov, mean, pred, nxt = arrays[_COV], arrays[_MEAN], arrays[_PRED], arrays[_SIM_NEXT]
    n = features_into(arrays, obs, 0)
    sampled = hyper[_SAMPLING] != 0.0
    spread = 0.0
    if sampled:
        variance = predictive(cov, mean, action, arrays[IDX][0], arrays[VAL][0], n, hyper[_NOISE], arrays[_GAIN], pred)
        spread = math.sqrt(variance)
    else:
        predictive_mean(mean, action, arrays[IDX][0], arrays[VAL][0], n, pred)
    dims = obs.shape[0]
    for d in range(dims):
        nxt[d] = obs[d] + pred[d] + (spread * standard_normal(rng) if sampled else 0.0)
    reward = pred[dims] + (spread * standard_normal(rng) if sampled else 0.0)
    p_end = min(max(pred[dims + 1], 0.0), 1.0)
    ended = uniform(rng) < p_end if sampled else p_end > 0.5
    weight = 0.0 if (sampled and ended) else (1.0 if sampled else 1.0 - p_end)
    target = reward
    if weight > 0.0:
        target += hyper[_GAMMA] * weight * np.max(observation_values(arrays, nxt, 1))
    semi_gradient_update(arrays[W], action, arrays[IDX][0], arrays[VAL][0], n, target, hyper[_ALPHA])
    return ended


@njit(cache=True)
def linear_gaussian_plan(arrays, hyper, counters, n_updates, rng):
    """`n_updates` simulated transitions, in rollouts of up to `rollout_length` from visited pairs."""
    meta, sim = arrays[_MEMORY_META], arrays[_SIM]
    rollout = np.int64(hyper[_ROLLOUT])
    done = 0
    while done < n_updates:
        j = below(rng, meta[0])
        sim[:] = arrays[_MEMORY][j]
        action = arrays[_MEMORY_ACTION][j]
        for step in range(rollout):
            ended = _simulate(arrays, hyper, sim, action, rng)
            done += 1
            if ended or done == n_updates or step == rollout - 1:
                break
            sim[:] = arrays[_SIM_NEXT]
            action = epsilon_greedy_values(observation_values(arrays, sim, 0), hyper[_EPSILON], rng)
    counters[1] += n_updates


@njit(cache=True)
def linear_gaussian_observe(arrays, hyper, counters, state, action, reward, next_state, terminated, rng):
    """The direct Q-learning update, the posterior conditioned on the real outcome, the visited pair kept, then
    the planning budget."""
    linear_q_update(arrays, hyper, counters, state, action, reward, next_state, terminated)
    y = arrays[_Y]
    dims = state.shape[0]
    for d in range(dims):
        y[d] = next_state[d] - state[d]
    y[dims] = reward
    y[dims + 1] = 1.0 if terminated else 0.0
    n = arrays[INTS][_N_ACTIVE]
    posterior_update(
        arrays[_COV],
        arrays[_MEAN],
        action,
        arrays[IDX][STATE],
        arrays[VAL][STATE],
        n,
        y,
        hyper[_NOISE],
        arrays[_GAIN],
        arrays[_PRED],
    )
    counters[2] += 1
    remember_next(arrays, next_state, terminated)
    remember_visit(arrays[_MEMORY], arrays[_MEMORY_ACTION], arrays[_MEMORY_META], state, action)
    linear_gaussian_plan(arrays, hyper, counters, np.int64(hyper[_PLANNING]), rng)


class LinearGaussian(PlanningLinearAgent):
    """Linear Q-learning plus planning through a Bayesian linear-Gaussian model of the change of observation."""

    tags = AgentTags(observations=("box",), learned_model="function")
    kind = "linear_gaussian"
    summary = (
        "linear Q-learning plus n simulated transitions per real step from a Bayesian linear-Gaussian model of the "
        "change of observation, reward and end"
    )
    source = "Bishop (2006), section 3.3 (the model); Sutton (1990) and Sutton & Barto (2018), section 8.2 (Dyna)"
    schema = (
        *LINEAR_SCHEMA[:3],
        replace(FEATURES_PARAM, default={"kind": "fourier", "order": 2, "low": None, "high": None}),
        Param(
            "planning_steps",
            "int",
            5,
            "simulated transitions per real step (0 gives linear_q_learning)",
            low=0,
            role=PLANNING_BUDGET,
        ),
        Param("rollout_length", "int", 1, "simulated steps per rollout from a visited observation", low=1, high=1000),
        Param(
            "sampling",
            "choice",
            "mean",
            "what a simulated step uses: the predictive mean, or a draw from the posterior predictive",
            choices=tuple(_SAMPLING_CODES),
        ),
        Param("prior_var", "float", 1.0, "prior variance of every model weight", low=0.0, low_open=True),
        Param("noise_var", "float", 0.01, "variance of the model's Gaussian noise", low=0.0, low_open=True),
        Param("memory", "int", 100_000, "visited (observation, action) pairs kept to plan from", low=1, high=10**7),
    )

    def make_arrays(self, n_states, n_actions):
        shared = super().make_arrays(n_states, n_actions)
        k = shared[W].shape[1]
        if n_actions * k**2 > MAX_MODEL_ENTRIES:
            raise EnvironmentSourceError(
                f"linear_gaussian: {k:,} features make posterior covariances of {n_actions} x {k:,}^2 numbers, more "
                f"than {MAX_MODEL_ENTRIES:,}; use fewer features (e.g. features: {{kind: fourier, order: 2}})"
            )
        outputs = n_states + 2
        memory = self._params["memory"]
        return (
            *shared,
            np.repeat(np.eye(k)[None] * self._params["prior_var"], n_actions, axis=0),
            np.zeros((n_actions, k, outputs)),
            np.zeros(k),
            np.zeros(outputs),
            np.zeros(outputs),
            np.zeros(n_states),
            np.zeros(n_states),
            np.zeros((memory, n_states)),
            np.zeros(memory, dtype=np.int64),
            np.zeros(2, dtype=np.int64),
        )

    def make_hyper(self):
        p = self._params
        return [
            *super().make_hyper(),
            float(p["planning_steps"]),
            p["prior_var"],
            p["noise_var"],
            float(p["rollout_length"]),
            _SAMPLING_CODES[p["sampling"]],
        ]

    def predict(self, observation: np.ndarray, action: int) -> tuple[np.ndarray, float]:
        """The model's predictive mean next observation and reward (the model-error contract of
        `runner.models.held_out`); `end_probability` gives its chance that the episode ends."""
        return self._predict(observation, action)[:2]

    def end_probability(self, observation: np.ndarray, action: int) -> float:
        """The model's probability that the episode ends on this step (its regression of the end, clipped)."""
        return self._predict(observation, action)[2]

    def _predict(self, observation: np.ndarray, action: int) -> tuple[np.ndarray, float, float]:
        obs = np.asarray(observation, dtype=np.float64)
        out = np.zeros(obs.size)
        reward = linear_gaussian_predict(self.arrays_, obs, int(action), out)
        ended = self.arrays_[_PRED][obs.size + 1]  # the mean's last output, left there by the kernel
        return out, float(reward), float(np.clip(ended, 0.0, 1.0))

    act_kernel = staticmethod(linear_q_act)
    observe_kernel = staticmethod(linear_gaussian_observe)
    function_predict_kernel = staticmethod(linear_gaussian_predict)
