"""The interface every learned dynamics model implements, so agents (Dyna rollouts, model-predictive control)
can swap a Gaussian process for an ensemble of networks.

A model is a frozen dataclass that holds only its hyperparameters (hashable, so jitted code can close over it or
take it as a static argument). What it learns is a pytree of arrays returned by `fit`; prediction and sampling
are pure functions of that pytree and arrays, usable inside `jax.jit`, `jax.vmap` and `lax.scan`:

- `fit(data, key, previous=None) -> params`: learn from real transitions (host arrays, `Transitions`);
  `previous`, the params of an earlier fit, lets a model start from what it learned before;
- `predict(params, states, actions) -> Prediction`: the predictive mean and variance of the next state and of
  the reward, per row of a batch (variances include the model's noise: they describe the next real outcome);
- `sample(params, key, states, actions) -> (next_states, rewards)`: one draw per row from the model.

Every model learns the change of state s' - s and the reward from the inputs (state, encoded action): a discrete
action as a one-hot vector, a Box action as its raw values. Inputs and targets are standardised with the mean and
standard deviation of the training data (a column that never varies is only centred). Fitted arrays come back in
JAX's default float type (float32 unless 64-bit mode is on).
"""

from __future__ import annotations

from typing import Any, NamedTuple, Protocol

import jax
import jax.numpy as jnp
import numpy as np

__all__ = [
    "ActionEncoding",
    "DynamicsModel",
    "Prediction",
    "Scaler",
    "Transitions",
    "action_encoding",
    "check_transitions",
    "fit_scaler",
    "host_inputs",
    "model_inputs",
    "model_targets",
    "prediction_from_targets",
    "standardised_data",
    "standardised_inputs",
]


class Transitions(NamedTuple):
    """Real transitions as host arrays: `states` (n, ds), `actions` (n,) integers or (n, da) floats,
    `next_states` (n, ds), `rewards` (n,)."""

    states: np.ndarray
    actions: np.ndarray
    next_states: np.ndarray
    rewards: np.ndarray


class Prediction(NamedTuple):
    """Predictive means and variances per row: `next_state_mean`, `next_state_var` (b, ds); `reward_mean`,
    `reward_var` (b,)."""

    next_state_mean: jax.Array
    next_state_var: jax.Array
    reward_mean: jax.Array
    reward_var: jax.Array


class ActionEncoding(NamedTuple):
    """How actions become model inputs: `n_actions` > 0 for discrete actions (one-hot), else `box_dim` raw
    values."""

    n_actions: int = 0
    box_dim: int = 0

    @property
    def width(self) -> int:
        """Number of input columns the actions take."""
        return self.n_actions if self.n_actions > 0 else self.box_dim

    def encode(self, actions: jax.Array, dtype: Any) -> jax.Array:
        """Actions (b,) integers or (b, box_dim) values as a (b, width) array of `dtype`."""
        if self.n_actions > 0:
            return jax.nn.one_hot(jnp.reshape(actions, (-1,)), self.n_actions, dtype=dtype)
        return jnp.reshape(jnp.asarray(actions, dtype), (-1, self.box_dim))


def action_encoding(space: Any) -> ActionEncoding:
    """The encoding of a gymnasium action space (Discrete or one-dimensional Box)."""
    n = getattr(space, "n", None)
    if n is not None:
        return ActionEncoding(n_actions=int(n))
    shape = getattr(space, "shape", None)
    if shape is None or len(shape) != 1:
        raise ValueError(f"a learned model takes Discrete or one-dimensional Box actions, got {space}")
    return ActionEncoding(box_dim=int(shape[0]))


class Scaler(NamedTuple):
    """Standardisation of columns: z = (x - mean) / scale."""

    mean: jax.Array
    scale: jax.Array

    def standardise(self, columns: Any) -> Any:
        """The columns (..., k) in standardised units, on the host or in JAX as they come."""
        return (columns - self.mean) / self.scale


def fit_scaler(columns: np.ndarray) -> Scaler:
    """Mean and standard deviation per column of a host array (n, k), as float64 host arrays; a column that
    never varies gets scale 1."""
    columns = np.asarray(columns, dtype=np.float64)
    spread = columns.std(axis=0)
    return Scaler(columns.mean(axis=0), np.where(spread > 1e-12, spread, 1.0))


def standardised_data(data: Transitions, encoding: ActionEncoding) -> tuple[np.ndarray, np.ndarray, Scaler, Scaler]:
    """The inputs (n, ds + width) and targets (n, ds + 1) of `data`, checked and standardised, with their scalers:
    what every model fits on."""
    data = check_transitions(data, encoding)
    inputs, targets = host_inputs(data, encoding), model_targets(data)
    in_scaler, out_scaler = fit_scaler(inputs), fit_scaler(targets)
    return in_scaler.standardise(inputs), out_scaler.standardise(targets), in_scaler, out_scaler


def standardised_inputs(
    states: jax.Array, actions: jax.Array, encoding: ActionEncoding, inputs: Scaler, dtype: Any
) -> tuple[jax.Array, jax.Array]:
    """`states` as `dtype`, and the standardised inputs (b, ds + width) a fitted model predicts from."""
    states = jnp.asarray(states, dtype)
    return states, inputs.standardise(model_inputs(states, actions, encoding, dtype))


def check_transitions(data: Transitions, encoding: ActionEncoding) -> Transitions:
    """The transitions as float64 host arrays (integer discrete actions), or one line saying what is wrong."""
    states = np.asarray(data.states, dtype=np.float64)
    next_states = np.asarray(data.next_states, dtype=np.float64)
    rewards = np.asarray(data.rewards, dtype=np.float64)
    n = states.shape[0] if states.ndim == 2 else -1
    if n < 1 or next_states.shape != states.shape or rewards.shape != (n,):
        raise ValueError(
            "transitions need states and next_states of one shape (n, ds) with n >= 1 and rewards (n,), got "
            f"{states.shape}, {next_states.shape} and {rewards.shape}"
        )
    if encoding.n_actions > 0:
        actions = np.asarray(data.actions).reshape(-1)
        if actions.shape != (n,) or not np.issubdtype(actions.dtype, np.integer):
            raise ValueError(f"discrete actions must be n = {n} integers, got {actions.dtype} of shape {actions.shape}")
        if actions.min() < 0 or actions.max() >= encoding.n_actions:
            raise ValueError(
                f"discrete actions must lie in [0, {encoding.n_actions}), got {actions.min()}..{actions.max()}"
            )
    else:
        actions = np.asarray(data.actions, dtype=np.float64).reshape(n, -1)
        if actions.shape != (n, encoding.box_dim):
            raise ValueError(f"Box actions must have shape ({n}, {encoding.box_dim}), got {actions.shape}")
    for name, values in (("states", states), ("next_states", next_states), ("rewards", rewards), ("actions", actions)):
        if not np.all(np.isfinite(values)):
            raise ValueError(f"transitions: {name} holds values that are not finite")
    return Transitions(states, actions, next_states, rewards)


def model_inputs(states: jax.Array, actions: jax.Array, encoding: ActionEncoding, dtype: Any) -> jax.Array:
    """The unstandardised inputs (b, ds + width): states beside encoded actions."""
    states = jnp.asarray(states, dtype)
    return jnp.concatenate([jnp.reshape(states, (states.shape[0], -1)), encoding.encode(actions, dtype)], axis=1)


def host_inputs(data: Transitions, encoding: ActionEncoding) -> np.ndarray:
    """The unstandardised inputs (n, ds + width) of checked host transitions, in float64."""
    actions = np.eye(encoding.n_actions)[data.actions] if encoding.n_actions > 0 else data.actions
    return np.concatenate([data.states, actions], axis=1)


def model_targets(data: Transitions) -> np.ndarray:
    """The unstandardised targets (n, ds + 1) of host transitions: the change of state, then the reward."""
    return np.concatenate([data.next_states - data.states, data.rewards[:, None]], axis=1)


def prediction_from_targets(states: jax.Array, mean: jax.Array, var: jax.Array, targets: Scaler) -> Prediction:
    """A `Prediction` from standardised target means and variances (..., b, ds + 1) at `states` (b, ds)."""
    mean = mean * targets.scale + targets.mean
    var = var * targets.scale**2
    return Prediction(states + mean[..., :-1], var[..., :-1], mean[..., -1], var[..., -1])


class DynamicsModel(Protocol):
    """What agents rely on: fit on real transitions; predict and sample as pure functions of the fitted params."""

    encoding: ActionEncoding

    def fit(self, data: Transitions, key: jax.Array, previous: Any = None) -> Any:
        """Params (a pytree of arrays) learned from `data`, with randomness from `key`."""
        ...

    def predict(self, params: Any, states: jax.Array, actions: jax.Array) -> Prediction:
        """Predictive mean and variance of the next state and the reward for a batch (pure; jit-able)."""
        ...

    def sample(self, params: Any, key: jax.Array, states: jax.Array, actions: jax.Array) -> tuple[jax.Array, jax.Array]:
        """One draw of (next_states (b, ds), rewards (b,)) per row (pure; jit-able)."""
        ...
