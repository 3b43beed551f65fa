"""How far a learned dynamics model (`runner.neural.model.DynamicsModel`) is from the real environment on held-out
real transitions, and whether the uncertainty it states is honest.

The errors are those of `runner.models.held_out.model_errors`, computed in one batch instead of one call per
transition: the one-step error of the predictive mean from each real observation, the mean absolute one-step
reward error, and the open-loop error after k steps (k in `ROLLOUT_STEPS`) of the mean fed back on itself, each
a root mean square over transitions and dimensions with every dimension divided by its spread in the held-out
data (dimensions that never vary are left out). `predictor` turns a fitted model into the one-transition
`predict(observation, action)` of that contract, for agents that expose their model.

Beside each error, the model's own account of it:

- spread: the root mean square of the predicted standard deviation over the same transitions and dimensions,
  divided by the same spreads. For an honest model it matches the error (the expected squared error of a
  calibrated Gaussian prediction is its variance); below the error the model is overconfident, above it timid;
- coverage: the fraction of held-out (transition, dimension) values inside the central 95% interval of the
  prediction (mean +- 1.96 standard deviations); 0.95 for an honest model.

For one step the standard deviation is the model's predictive one. For k steps it comes from `particles` sampled
rollouts per held-out run (each step drawn by the model's `sample`, as trajectory sampling does): their standard
deviation after k steps, and the interval is the particles' mean +- 1.96 of it.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from functools import partial
from typing import Any

import jax
import jax.numpy as jnp
import numpy as np

from runner.models.held_out import ROLLOUT_STEPS, HeldOut
from runner.neural.model import DynamicsModel

__all__ = ["Z_95", "ModelHonesty", "held_out_honesty", "predictor"]

Z_95 = 1.959963984540054
"""The standard normal's 97.5% quantile: mean +- Z_95 sd is the central 95% interval."""


@dataclass(frozen=True)
class ModelHonesty:
    """Errors on held-out real transitions beside the model's predicted spread and its interval's coverage.

    `one_step`, `reward` and `open_loop` ({k: error}) are `runner.models.held_out.model_errors`'s numbers;
    `one_step_spread`, `open_loop_spread` ({k: spread}) the predicted spread on the same scale;
    `one_step_coverage`, `reward_coverage` and `open_loop_coverage` ({k: fraction}) the share of held-out values
    inside the predicted 95% interval (NaN where nothing was measured)."""

    one_step: float
    reward: float
    open_loop: dict[int, float]
    one_step_spread: float
    one_step_coverage: float
    reward_coverage: float
    open_loop_spread: dict[int, float]
    open_loop_coverage: dict[int, float]

    def columns(self) -> dict[str, float]:
        """The metric columns these fill (`runner.metrics`): the errors and, beside them, spread and coverage."""
        return {
            "model_error_1": self.one_step,
            "model_reward_error": self.reward,
            **{f"model_error_{k}": self.open_loop[k] for k in ROLLOUT_STEPS},
            "model_spread_1": self.one_step_spread,
            "model_spread_5": self.open_loop_spread[5],
            "model_coverage_1": self.one_step_coverage,
            "model_coverage_5": self.open_loop_coverage[5],
        }


def predictor(model: DynamicsModel, params: Any) -> Callable[[np.ndarray, Any], tuple[np.ndarray, float]]:
    """The model's mean as `predict(observation, action) -> (next_observation, reward)`, one transition a call
    (the contract of `runner.models.held_out`)."""
    predict = jax.jit(model.predict)

    def one(observation: np.ndarray, action: Any) -> tuple[np.ndarray, float]:
        pred = predict(params, np.asarray(observation, dtype=np.float64)[None], np.asarray(action)[None])
        return np.asarray(pred.next_state_mean[0], dtype=np.float64), float(pred.reward_mean[0])

    return one


def _action_array(held: HeldOut, model: DynamicsModel) -> np.ndarray:
    """The runs' actions as (runs, length) integers or (runs, length, box_dim) values, padded after a run ends."""
    runs, length = held.rewards.shape
    encoding = model.encoding
    if encoding.n_actions > 0:
        out = np.zeros((runs, length), dtype=np.int32)
    else:
        out = np.zeros((runs, length, encoding.box_dim))
    for i, run in enumerate(held.actions):
        if run:
            out[i, : len(run)] = np.asarray(run).reshape(out[i, : len(run)].shape)
    return out


@partial(jax.jit, static_argnums=0)
def _predict(model, params, states, actions):
    """The model's prediction for a batch, compiled once per model setting and shape (models are hashable)."""
    return model.predict(params, states, actions)


@partial(jax.jit, static_argnums=(0, 5))
def _rollouts(model, params, starts, actions, key, particles):
    """Open-loop rollouts from `starts` (runs, ds) under `actions` (runs, length, ...): the mean fed back, and
    `particles` sampled rollouts per run; observations after each step, (length, runs, ds) and
    (length, runs, particles, ds)."""
    runs, dims = starts.shape

    def step(carry, inputs):
        mean_state, particle_states = carry
        action, step_key = inputs
        mean_next = model.predict(params, mean_state, action).next_state_mean
        repeated = jnp.repeat(action, particles, axis=0)
        drawn, _ = model.sample(params, step_key, particle_states.reshape(runs * particles, dims), repeated)
        drawn = drawn.reshape(runs, particles, dims)
        return (mean_next, drawn), (mean_next, drawn)

    dtype = _params_dtype(params)
    starts = jnp.asarray(starts, dtype)
    initial = (starts, jnp.repeat(starts[:, None, :], particles, axis=1))
    length = actions.shape[1]
    _, (means, drawn) = jax.lax.scan(step, initial, (jnp.swapaxes(actions, 0, 1), jax.random.split(key, length)))
    return means, drawn


def _params_dtype(params: Any) -> Any:
    """The float type of a fitted model's arrays."""
    return next(leaf.dtype for leaf in jax.tree.leaves(params) if jnp.issubdtype(leaf.dtype, jnp.floating))


def _scaled(values: np.ndarray, spread: np.ndarray) -> np.ndarray:
    varying = spread > 0
    return values[..., varying] / spread[varying]


def _rms(values: np.ndarray) -> float:
    return float(np.sqrt(np.mean(values**2))) if values.size else float("nan")


def _inside(error: np.ndarray, sd: np.ndarray) -> float:
    return float(np.mean(np.abs(error) <= Z_95 * sd)) if error.size else float("nan")


def held_out_honesty(
    model: DynamicsModel, params: Any, held: HeldOut, key: jax.Array, particles: int = 20
) -> ModelHonesty:
    """Errors of a fitted model on held-out real runs beside its predicted spread and coverage (see the module)."""
    runs, length = held.rewards.shape
    actions = _action_array(held, model)
    valid = np.arange(length)[None, :] < held.lengths[:, None]
    before = np.concatenate([held.starts[:, None, :], held.observations[:, :-1, :]], axis=1)
    flat_actions = actions.reshape(runs * length, *actions.shape[2:])
    pred = _predict(model, params, before.reshape(runs * length, -1), flat_actions)
    pred = jax.tree.map(lambda a: np.asarray(a, dtype=np.float64).reshape(runs, length, *a.shape[1:]), pred)
    error = (pred.next_state_mean - held.observations)[valid]
    sd = np.sqrt(pred.next_state_var)[valid]
    reward_error = (pred.reward_mean - held.rewards)[valid]
    varying = held.spread > 0

    means, drawn = _rollouts(model, params, held.starts, actions, key, particles)
    means, drawn = np.asarray(means, dtype=np.float64), np.asarray(drawn, dtype=np.float64)
    nan = float("nan")
    open_loop = dict.fromkeys(ROLLOUT_STEPS, nan)
    open_spread, open_coverage = dict(open_loop), dict(open_loop)
    for k in ROLLOUT_STEPS:
        done = held.lengths >= k
        if not done.any():
            continue
        real, cloud = held.observations[done, k - 1], drawn[k - 1, done]
        cloud_sd = cloud.std(axis=1)
        open_loop[k] = _rms(_scaled(means[k - 1, done] - real, held.spread))
        open_spread[k] = _rms(_scaled(cloud_sd, held.spread))
        open_coverage[k] = _inside((cloud.mean(axis=1) - real)[:, varying], cloud_sd[:, varying])
    return ModelHonesty(
        one_step=_rms(_scaled(error, held.spread)),
        reward=float(np.mean(np.abs(reward_error))) if reward_error.size else float("nan"),
        open_loop=open_loop,
        one_step_spread=_rms(_scaled(sd, held.spread)),
        one_step_coverage=_inside(error[:, varying], sd[:, varying]),
        reward_coverage=_inside(reward_error, np.sqrt(pred.reward_var[valid])),
        open_loop_spread=open_spread,
        open_loop_coverage=open_coverage,
    )
