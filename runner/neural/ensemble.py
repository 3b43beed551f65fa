"""An ensemble of probabilistic networks as a dynamics model (Chua, Calandra, McAllister & Levine 2018, PETS).

Each member is an MLP (`runner.neural.mlp`) from the standardised inputs (state, encoded action) to a Gaussian
over the standardised targets (the change of state, and the reward): a mean and a log-variance per target. The
log-variance is kept between a learned upper bound `max_logvar` and a learned lower bound `min_logvar` per
target by soft clipping, lv = max - softplus(max - raw), then lv = min + softplus(lv - min) (PETS, appendix A.1;
its code starts the bounds at 0.5 and -10, as here). Each member minimises the Gaussian negative log-likelihood
sum over targets of (mu - y)^2 exp(-lv) + lv, averaged over a minibatch, plus `bound_penalty` x (sum max_logvar -
sum min_logvar), which keeps the bounds from drifting apart; each member trains on its own bootstrap of the data
(n draws with replacement), which with their own initial weights makes the members differ where data are thin.

Training runs `epochs` passes over each member's bootstrap in shuffled minibatches with Adam (optax), as one
compiled program: epochs and minibatches are `lax.scan` loops and the members are one stacked pytree (Adam acts
element by element, so one optimiser over the stack is each member's own Adam). The data are padded to a power of
two with masked rows, so the program compiles once per size class, not once per fit; minibatches past the data
are skipped. Everything is seeded by one JAX key.

Prediction gives each member's mean and variance; the ensemble's prediction is their equal mixture (mean of the
means; mean of the variances plus the variance of the means). `sample` draws each row from a random member (the
trajectory sampling of PETS, with a new member every step); `sample_members` takes the members given.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import partial
from typing import NamedTuple

import jax
import jax.numpy as jnp
import numpy as np
import optax

from runner.neural.mlp import ACTIVATIONS, MLPParams, apply_mlp, init_mlp
from runner.neural.model import (
    ActionEncoding,
    Prediction,
    Scaler,
    Transitions,
    prediction_from_targets,
    standardised_data,
    standardised_inputs,
)

__all__ = [
    "INITIAL_LOGVAR_BOUNDS",
    "EnsembleModel",
    "EnsembleParams",
    "Members",
    "bounded_logvar",
    "ensemble_loss",
    "fresh_members",
    "gaussian_nll",
]

INITIAL_LOGVAR_BOUNDS = (-10.0, 0.5)
"""Where the learned lower and upper bounds of the log-variance start (standardised units; PETS's code)."""


class Members(NamedTuple):
    """What the members learn, stacked on a leading member axis: networks, and log-variance bounds (E, outputs)."""

    nets: MLPParams
    min_logvar: jax.Array
    max_logvar: jax.Array


class EnsembleParams(NamedTuple):
    """A fitted ensemble (a pytree): the scalers of inputs and targets, and the members."""

    inputs: Scaler
    targets: Scaler
    members: Members


def bounded_logvar(raw: jax.Array, min_logvar: jax.Array, max_logvar: jax.Array) -> jax.Array:
    """Soft clipping of a raw log-variance between the bounds (PETS, appendix A.1); soft on both sides, so it
    approaches `min_logvar` from above and may pass `max_logvar` by at most softplus(min_logvar - max_logvar)."""
    upper = max_logvar - jax.nn.softplus(max_logvar - raw)
    return min_logvar + jax.nn.softplus(upper - min_logvar)


def gaussian_nll(mean: jax.Array, logvar: jax.Array, target: jax.Array) -> jax.Array:
    """Per row, sum over the last axis of (mean - target)^2 exp(-logvar) + logvar: twice the negative Gaussian
    log-density less log(2 pi) per target."""
    return jnp.sum((mean - target) ** 2 * jnp.exp(-logvar) + logvar, axis=-1)


def _member_outputs_one(member: Members, x: jax.Array, activation: str) -> tuple[jax.Array, jax.Array]:
    """One member's standardised means and log-variances at standardised inputs (b, d)."""
    out = apply_mlp(member.nets, x, activation)
    half = out.shape[-1] // 2
    return out[..., :half], bounded_logvar(out[..., half:], member.min_logvar, member.max_logvar)


def _member_outputs(members: Members, x: jax.Array, activation: str) -> tuple[jax.Array, jax.Array]:
    """Standardised means and log-variances (E, b, outputs) of every member at standardised inputs (b, d)."""
    return jax.vmap(lambda member: _member_outputs_one(member, x, activation))(members)


def _size_class(n: int, batch_size: int) -> int:
    """Rows the padded data take: the next power of two, at least one minibatch."""
    return max(batch_size, 1 << max(n - 1, 0).bit_length())


@dataclass(frozen=True)
class EnsembleModel:
    """PETS-style ensemble dynamics model (see the module's docstring); holds hyperparameters of the method only."""

    encoding: ActionEncoding
    members: int = 5
    hidden: tuple[int, ...] = (64, 64)
    activation: str = "swish"
    epochs: int = 50
    batch_size: int = 64
    learning_rate: float = 1e-3
    bound_penalty: float = 0.01

    def __post_init__(self) -> None:
        if self.activation not in ACTIVATIONS:
            raise ValueError(f"activation must be one of {', '.join(sorted(ACTIVATIONS))}, got {self.activation!r}")
        if self.members < 1 or self.epochs < 0 or self.batch_size < 1 or not all(h >= 1 for h in self.hidden):
            raise ValueError(
                "members and batch_size must be >= 1, epochs >= 0 and every hidden size >= 1, got "
                f"{self.members}, {self.batch_size}, {self.epochs} and {self.hidden}"
            )
        if not (self.learning_rate > 0 and self.bound_penalty >= 0):
            raise ValueError(
                f"learning_rate must be > 0 and bound_penalty >= 0, got {self.learning_rate} and {self.bound_penalty}"
            )

    def init_members(self, key: jax.Array, inputs: int, outputs: int) -> Members:
        """Fresh members for `inputs` input and `outputs` target columns (see `fresh_members`)."""
        return fresh_members(key, self.members, (inputs, *self.hidden, 2 * outputs))

    def fit(self, data: Transitions, key: jax.Array, previous: EnsembleParams | None = None) -> EnsembleParams:
        """Train every member on its own bootstrap of `data` for `epochs` epochs, from `previous`'s members when
        given, else from fresh ones drawn from `key`."""
        inputs, targets, in_scaler, out_scaler = standardised_data(data, self.encoding)
        n = inputs.shape[0]
        rows = _size_class(n, self.batch_size)
        dtype = jnp.asarray(0.0).dtype
        x, y = np.zeros((rows, inputs.shape[1])), np.zeros((rows, targets.shape[1]))
        x[:n], y[:n] = inputs, targets
        sizes = (x.shape[1], *self.hidden, 2 * y.shape[1])
        fresh, boot, train_key = _draws(key, self.members, sizes, rows, n)
        members = previous.members if previous is not None else fresh
        members = _train(
            members,
            jnp.asarray(x, dtype),
            jnp.asarray(y, dtype),
            boot,
            n,
            train_key,
            self.epochs,
            self.learning_rate,
            self.bound_penalty,
            activation=self.activation,
            batch_size=self.batch_size,
        )
        scalers = jax.tree.map(lambda a: jnp.asarray(a, dtype), (in_scaler, out_scaler))
        return EnsembleParams(*scalers, members)

    def member_predict(self, params: EnsembleParams, states: jax.Array, actions: jax.Array) -> Prediction:
        """Every member's predictive mean and variance: fields with a leading member axis, (E, b, ds) and (E, b)."""
        states, x = standardised_inputs(states, actions, self.encoding, params.inputs, params.inputs.mean.dtype)
        mean, logvar = _member_outputs(params.members, x, self.activation)
        return prediction_from_targets(states, mean, jnp.exp(logvar), params.targets)

    def predict(self, params: EnsembleParams, states: jax.Array, actions: jax.Array) -> Prediction:
        """The members' equal mixture: mean of the means; mean of the variances plus the variance of the means."""
        each = self.member_predict(params, states, actions)
        return Prediction(
            each.next_state_mean.mean(axis=0),
            each.next_state_var.mean(axis=0) + each.next_state_mean.var(axis=0),
            each.reward_mean.mean(axis=0),
            each.reward_var.mean(axis=0) + each.reward_mean.var(axis=0),
        )

    def sample_members(
        self, params: EnsembleParams, key: jax.Array, states: jax.Array, actions: jax.Array, members: jax.Array
    ) -> tuple[jax.Array, jax.Array]:
        """One draw per row from the Gaussian of the member that `members` (b,) names for that row."""
        each = self.member_predict(params, states, actions)
        rows = jnp.arange(members.shape[0])
        state_mean, state_var = each.next_state_mean[members, rows], each.next_state_var[members, rows]
        reward_mean, reward_var = each.reward_mean[members, rows], each.reward_var[members, rows]
        state_key, reward_key = jax.random.split(key)
        next_states = state_mean + jnp.sqrt(state_var) * jax.random.normal(
            state_key, state_mean.shape, state_mean.dtype
        )
        rewards = reward_mean + jnp.sqrt(reward_var) * jax.random.normal(
            reward_key, reward_mean.shape, reward_mean.dtype
        )
        return next_states, rewards

    def sample(
        self, params: EnsembleParams, key: jax.Array, states: jax.Array, actions: jax.Array
    ) -> tuple[jax.Array, jax.Array]:
        """One draw per row from a member chosen uniformly at random for that row."""
        member_key, draw_key = jax.random.split(key)
        members = jax.random.randint(member_key, (jnp.shape(states)[0],), 0, self.members)
        return self.sample_members(params, draw_key, states, actions, members)


def ensemble_loss(
    members: Members, x: jax.Array, y: jax.Array, weight: jax.Array, bound_penalty: jax.Array, activation: str
) -> jax.Array:
    """The training loss summed over members: each member's weighted mean Gaussian NLL on its own minibatch,
    inputs `x` (E, B, d) and targets `y` (E, B, outputs) with row weights `weight` (B,), plus `bound_penalty` x
    (sum max_logvar - sum min_logvar). Members share no parameters, so its gradient is every member's own."""
    mean, logvar = jax.vmap(lambda member, rows: _member_outputs_one(member, rows, activation))(members, x)
    per_member = jnp.sum(gaussian_nll(mean, logvar, y) * weight, axis=1) / jnp.maximum(jnp.sum(weight), 1.0)
    bounds = jnp.sum(members.max_logvar, axis=1) - jnp.sum(members.min_logvar, axis=1)
    return jnp.sum(per_member + bound_penalty * bounds)


def fresh_members(key: jax.Array, members: int, sizes: tuple[int, ...]) -> Members:
    """`members` networks of layer sizes `sizes` (outputs: a mean and a raw log-variance per target), Glorot-
    initialised from one key each, with the initial log-variance bounds, in JAX's default float type."""
    dtype = jnp.asarray(0.0).dtype
    nets = jax.vmap(lambda k: init_mlp(k, sizes, dtype))(jax.random.split(key, members))
    low, high = INITIAL_LOGVAR_BOUNDS
    shape = (members, sizes[-1] // 2)
    return Members(nets, jnp.full(shape, low, dtype), jnp.full(shape, high, dtype))


@partial(jax.jit, static_argnums=(1, 2, 3))
def _draws(
    key: jax.Array, members: int, sizes: tuple[int, ...], rows: int, n: jax.Array
) -> tuple[Members, jax.Array, jax.Array]:
    """Everything a fit draws before training, in one compiled call: fresh members, every member's bootstrap
    (rows indices into the first n rows) and the training key."""
    init_key, boot_key, train_key = jax.random.split(key, 3)
    boot = jax.random.randint(boot_key, (members, rows), 0, n)
    return fresh_members(init_key, members, sizes), boot, train_key


@jax.jit(static_argnames=("activation", "batch_size"))
def _train(
    members: Members,
    x: jax.Array,
    y: jax.Array,
    boot: jax.Array,
    n: jax.Array,
    key: jax.Array,
    epochs: jax.Array,
    learning_rate: jax.Array,
    bound_penalty: jax.Array,
    activation: str,
    batch_size: int,
) -> Members:
    """`epochs` epochs of minibatch Adam on every member's bootstrap (`boot` (E, rows): indices into the first `n`
    rows of `x` (rows, d) and `y` (rows, outputs); positions from `n` on are padding). Only the activation and the
    minibatch size are compiled in: other settings and sizes up to `rows` reuse the program."""
    optimiser = optax.adam(learning_rate)
    rows = boot.shape[1]
    batches = -(-rows // batch_size)
    positions = jnp.arange(batches * batch_size)

    def epoch(i, carry):
        order_keys = jax.random.split(jax.random.fold_in(key, i), boot.shape[0])
        shuffled = jax.vmap(lambda k: jax.random.uniform(k, positions.shape))(order_keys)
        order = jnp.argsort(jnp.where(positions < n, shuffled, 2.0), axis=1)
        picked_all = jnp.take_along_axis(boot, jnp.minimum(order, rows - 1), axis=1)

        def batch(carry, b):
            start = b * batch_size
            weight = (start + jnp.arange(batch_size) < n).astype(x.dtype)

            def step(carry):
                members, state = carry
                picked = jax.lax.dynamic_slice_in_dim(picked_all, start, batch_size, axis=1)
                grads = jax.grad(ensemble_loss)(members, x[picked], y[picked], weight, bound_penalty, activation)
                updates, state = optimiser.update(grads, state, members)
                return optax.apply_updates(members, updates), state

            return jax.lax.cond(start < n, step, lambda c: c, carry), None

        return jax.lax.scan(batch, carry, jnp.arange(batches))[0]

    return jax.lax.fori_loop(0, epochs, epoch, (members, optimiser.init(members)))[0]
