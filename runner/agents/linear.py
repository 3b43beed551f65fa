"""Linear model-free agents on box observations: semi-gradient Q-learning and Sarsa with epsilon-greedy
behaviour (Sutton & Barto 2018, sections 10.1 and 11.1), over the shared features (`runner.features`)."""

import numpy as np
from numba import njit

from runner.agents.base import TabularAgent
from runner.agents.common import EPSILON, model_free_counter_problems
from runner.agents.linear_kernels import (
    IDX,
    LINEAR_ARRAYS,
    STATE,
    VAL,
    W,
    epsilon_greedy_values,
    linear_arrays,
    linear_greedy,
    observation_values,
    remember_next,
    same_observation,
    semi_gradient_update,
    state_features,
)
from runner.features import FEATURES_PARAM, build_feature_map
from runner.params import Param
from runner.tags import AgentTags

__all__ = ["LINEAR_SCHEMA", "LinearAgent", "LinearQLearning", "LinearSarsa", "PlanningLinearAgent", "linear_q_update"]

_ALPHA, _GAMMA, _EPSILON = 0, 1, 2
_PENDING_OBS, _PENDING = LINEAR_ARRAYS, LINEAR_ARRAYS + 1  # Sarsa: next observation and [flag, action]

LINEAR_ALPHA = Param(
    "alpha",
    "float",
    0.1,
    "step size of each value update, divided by the squared feature norm (the number of tilings for tiles)",
    low=0.0,
    high=1.0,
    low_open=True,
)
LINEAR_GAMMA = Param("gamma", "float", 0.99, "discount factor", low=0.0, high=1.0)
LINEAR_SCHEMA = (LINEAR_ALPHA, LINEAR_GAMMA, EPSILON, FEATURES_PARAM)


@njit(cache=True)
def linear_q_act(arrays, hyper, state, rng):
    """Epsilon-greedy on the linear action values."""
    return epsilon_greedy_values(observation_values(arrays, state, 0), hyper[_EPSILON], rng)


@njit(cache=True)
def linear_q_update(arrays, hyper, counters, state, action, reward, next_state, terminated):
    """One semi-gradient Q-learning update: towards r + gamma max_a w[a] . phi(s') (r alone when terminated).
    Leaves phi(s) in row `STATE` and phi(s') in row 1 (when not terminated) for model updates."""
    target = reward
    if not terminated:
        target += hyper[_GAMMA] * np.max(observation_values(arrays, next_state, 1))
    n = state_features(arrays, state)
    semi_gradient_update(arrays[W], action, arrays[IDX][STATE], arrays[VAL][STATE], n, target, hyper[_ALPHA])
    counters[0] += 1


@njit(cache=True)
def linear_q_observe(arrays, hyper, counters, state, action, reward, next_state, terminated, rng):
    """Semi-gradient Q-learning from one real transition."""
    linear_q_update(arrays, hyper, counters, state, action, reward, next_state, terminated)
    remember_next(arrays, next_state, terminated)


@njit(cache=True)
def linear_sarsa_act(arrays, hyper, state, rng):
    """The action chosen for this observation by the last update, else a fresh epsilon-greedy one."""
    pending = arrays[_PENDING]
    if pending[0] == 1 and same_observation(arrays[_PENDING_OBS], state):
        pending[0] = 0
        return pending[1]
    return linear_q_act(arrays, hyper, state, rng)


@njit(cache=True)
def linear_sarsa_observe(arrays, hyper, counters, state, action, reward, next_state, terminated, rng):
    """Choose the next action now and update towards its value: semi-gradient Sarsa (section 10.1)."""
    target = reward
    pending = arrays[_PENDING]
    pending[0] = 0
    if not terminated:
        q = observation_values(arrays, next_state, 1)
        following = epsilon_greedy_values(q, hyper[_EPSILON], rng)
        target += hyper[_GAMMA] * q[following]
        pending[0] = 1
        pending[1] = following
        arrays[_PENDING_OBS][:] = next_state
    n = state_features(arrays, state)
    semi_gradient_update(arrays[W], action, arrays[IDX][STATE], arrays[VAL][STATE], n, target, hyper[_ALPHA])
    counters[0] += 1
    remember_next(arrays, next_state, terminated)


class LinearAgent(TabularAgent):
    """Base of the linear kinds: box observations, discrete actions, weights over the declared features."""

    tags = AgentTags(observations=("box",))
    schema = LINEAR_SCHEMA

    def feature_map(self) -> tuple[np.ndarray, ...]:
        """The compiled feature map for the observation bounds given at setup."""
        return build_feature_map(self._params["features"], *self.bounds_)

    def make_arrays(self, n_states, n_actions):
        return linear_arrays(n_actions, self.feature_map())

    def make_hyper(self):
        p = self._params
        return [p["alpha"], p["gamma"], p["epsilon"]]

    greedy_kernel = staticmethod(linear_greedy)


class LinearQLearning(LinearAgent):
    """Semi-gradient Q-learning, linear in the features."""

    kind = "linear_q_learning"
    summary = "model-free semi-gradient Q-learning, linear in tile, RBF, Fourier or raw features"
    source = "Watkins (1989); Sutton & Barto (2018), sections 10.1 and 11.1"

    def counter_problems(self, real_steps):
        return super().counter_problems(real_steps) + model_free_counter_problems(self.counters(), real_steps)

    act_kernel = staticmethod(linear_q_act)
    observe_kernel = staticmethod(linear_q_observe)


class LinearSarsa(LinearAgent):
    """Semi-gradient Sarsa, linear in the features; the next action is chosen when a transition is learned."""

    kind = "linear_sarsa"
    summary = "model-free semi-gradient Sarsa, linear in tile, RBF, Fourier or raw features"
    source = "Rummery & Niranjan (1994); Sutton & Barto (2018), section 10.1"

    def make_arrays(self, n_states, n_actions):
        return (*super().make_arrays(n_states, n_actions), np.zeros(n_states), np.zeros(2, dtype=np.int64))

    def counter_problems(self, real_steps):
        return super().counter_problems(real_steps) + model_free_counter_problems(self.counters(), real_steps)

    act_kernel = staticmethod(linear_sarsa_act)
    observe_kernel = staticmethod(linear_sarsa_observe)


class PlanningLinearAgent(LinearAgent):
    """A linear kind that learns a model every real step and makes `planning_steps` simulated updates per step."""

    def spends_whole_budget(self) -> bool:
        """Whether every real step makes exactly `planning_steps` simulated updates (else at most that many)."""
        return True

    def counter_problems(self, real_steps):
        c = self.counters()
        n = self._params["planning_steps"]
        problems = super().counter_problems(real_steps)
        if c["real_updates"] != real_steps or c["model_updates"] != real_steps:
            problems.append(f"real and model updates should both equal real steps {real_steps}: {c}")
        budget = n * c["real_updates"]
        if self.spends_whole_budget() and c["planning_updates"] != budget:
            problems.append(f"planning_updates {c['planning_updates']} != n x real_updates = {budget}")
        if c["planning_updates"] > budget:
            problems.append(f"planning_updates {c['planning_updates']} exceed n x real_updates = {budget}")
        return problems
