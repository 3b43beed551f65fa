"""Soft actor-critic (Haarnoja, Zhou, Abbeel & Levine 2018; Haarnoja et al. 2018, "Soft actor-critic algorithms
and applications") as pure JAX functions over an explicit state pytree, for box actions.

`SoftActorCriticCore` holds the static hyperparameters (a frozen, hashable dataclass, so its methods compile once
per setting); `SACState` holds everything learned and every random key. As with `runner.neural.q_network`, acting,
observing a real transition and greedy evaluation are pure functions, so the same code runs one call per real step
through gymnasium or inside `lax.scan` over whole chunks of a trial (`runner.neural.trial`).

Policy: an MLP giving, per action dimension, a mean m and a log standard deviation (clipped to [-20, 2], common
practice); u = m + sigma eps with eps standard normal (the reparameterisation), a = tanh(u) in [-1, 1], and the
environment gets low + (a + 1) (high - low) / 2. The log-density of a is that of u minus sum log(1 - tanh(u)^2)
(the change of variables of appendix C of the first paper), computed as 2 (log 2 - u - softplus(-2 u)) for
stability. Log-densities and entropies are those of the squashed action a in [-1, 1]^k, so the target entropy -k
(k = action dimensions, the second paper's heuristic) does not depend on the units of the bounds.

Critics: two Q networks of (observation, a), each with a target copy moved after every update by target <- rate
online + (1 - rate) target (Polyak averaging); with `polyak_rate` 0 (not a value of the `soft_actor_critic` kind:
`neural_dyna` on box actions offers it, as its Q-network does) the targets are instead copies of the critics made
every `target_period` updates (hard target updates, common practice). Each update, on `batch_size` transitions
drawn uniformly (with replacement) from a ring buffer of the last `buffer_size` real transitions:

- critics: mean over the batch and both critics of (Q_i(s, a) - y)^2 / 2 with
  y = r + gamma (1 - terminated) (min_i Qtarget_i(s', a') - alpha log pi(a' | s')), a' drawn from the policy at s';
- policy: mean of alpha log pi(a | s) - min_i Q_i(s, a) with a drawn (reparameterised), critics just updated;
- temperature (when learned): mean of -alpha (log pi(a | s) + target entropy), a the policy's draw above, as the
  second paper's J(alpha); alpha = exp(log alpha) and log alpha is what Adam moves. Fixed otherwise.

Three Adam optimizers (optax), one learning rate. Before `learning_starts` real steps, actions are drawn uniformly
from the box (common practice, so the first updates see varied actions); then from the policy. Every
`update_every` real steps from `learning_starts` on, `replays` updates (the compute budget). Greedy evaluation acts
with tanh(m). A truncated step (time limit) bootstraps; only `terminated` ends the return.

`gradient_step` is one such update on a given batch, optionally weighted per row (each mean above becomes a
weighted mean): `neural_dyna` on box actions feeds it transitions simulated by its model (`runner.neural.dyna`).

Counters: one update (critics, policy, temperature, targets) counts as one real update; no planning or model
updates. Networks and the buffer are float32.
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass
from typing import Any, NamedTuple

import jax
import jax.numpy as jnp
import optax

from runner.neural.mlp import MLPParams, apply_mlp, init_mlp
from runner.neural.replay import ReplayBuffer, empty_buffer, store

__all__ = ["LOG_STD_RANGE", "SACState", "SoftActorCriticCore", "squashed_log_prob"]

LOG_STD_RANGE = (-20.0, 2.0)
"""Where the policy's log standard deviations are clipped (common practice)."""


class SACState(NamedTuple):
    """Everything soft actor-critic learns and draws. `online` is the policy network (what evaluation acts with);
    `critics` and `targets` stack the two Q networks on a leading axis of 2; the buffer keeps actions squashed into
    [-1, 1], shape (buffer_size, action_size)."""

    online: MLPParams
    critics: MLPParams
    targets: MLPParams
    log_alpha: jax.Array
    policy_opt: Any
    critic_opt: Any
    alpha_opt: Any
    buffer: ReplayBuffer
    steps: jax.Array
    updates: jax.Array
    key: jax.Array


def squashed_log_prob(u: jax.Array, mean: jax.Array, log_std: jax.Array) -> jax.Array:
    """log pi(tanh(u)) for u drawn from N(mean, exp(log_std)^2) per dimension, summed over the last axis."""
    gaussian = -0.5 * ((u - mean) / jnp.exp(log_std)) ** 2 - log_std - 0.5 * math.log(2 * math.pi)
    log_det = 2.0 * (math.log(2.0) - u - jax.nn.softplus(-2.0 * u))
    return jnp.sum(gaussian - log_det, axis=-1)


@dataclass(frozen=True)
class SoftActorCriticCore:
    """The static hyperparameters of soft actor-critic on `obs_size` numbers and a box of `action_size` numbers
    between `low` and `high`."""

    obs_size: int
    action_size: int
    low: tuple[float, ...]
    high: tuple[float, ...]
    hidden_layers: int = 2
    hidden_units: int = 256
    activation: str = "relu"
    gamma: float = 0.99
    learning_rate: float = 3e-4
    batch_size: int = 256
    buffer_size: int = 1_000_000
    learning_starts: int = 1000
    update_every: int = 1
    replays: int = 1
    polyak_rate: float = 0.005
    learn_temperature: bool = True
    temperature: float = 1.0
    target_period: int = 1

    @classmethod
    def from_params(
        cls, params: dict[str, Any], obs_size: int, action_size: int, bounds: tuple[tuple[float, ...], ...]
    ) -> SoftActorCriticCore:
        """The core of a `soft_actor_critic` agent's checked parameters on a box with these (low, high) bounds."""
        low, high = bounds
        return cls(obs_size=int(obs_size), action_size=int(action_size), low=tuple(low), high=tuple(high), **params)

    @property
    def target_entropy(self) -> float:
        """Minus the number of action dimensions (the second paper's heuristic)."""
        return -float(self.action_size)

    @property
    def optimizer(self) -> optax.GradientTransformation:
        """Adam (Kingma & Ba 2015) with optax's default moments."""
        return optax.adam(self.learning_rate)

    def _hidden(self) -> tuple[int, ...]:
        return (self.hidden_units,) * self.hidden_layers

    def init(self, key: jax.Array) -> SACState:
        """A fresh agent: networks drawn from `key`, targets equal to the critics, an empty buffer."""
        policy_key, critic_key, key = jax.random.split(key, 3)
        policy = init_mlp(policy_key, (self.obs_size, *self._hidden(), 2 * self.action_size), jnp.float32)
        critic_sizes = (self.obs_size + self.action_size, *self._hidden(), 1)
        critics = jax.vmap(lambda k: init_mlp(k, critic_sizes, jnp.float32))(jax.random.split(critic_key, 2))
        log_alpha = jnp.asarray(math.log(self.temperature), jnp.float32)
        buffer = empty_buffer(self.buffer_size, self.obs_size, (self.action_size,), jnp.float32)
        zero = jnp.zeros((), jnp.int32)
        opt = self.optimizer
        return SACState(
            online=policy,
            critics=critics,
            targets=jax.tree_util.tree_map(jnp.copy, critics),
            log_alpha=log_alpha,
            policy_opt=opt.init(policy),
            critic_opt=opt.init(critics),
            alpha_opt=opt.init(log_alpha),
            buffer=buffer,
            steps=zero,
            updates=zero,
            key=key,
        )

    def _box(self) -> tuple[jax.Array, jax.Array]:
        """(centre, half width) of the action box, float32."""
        low, high = jnp.asarray(self.low, jnp.float32), jnp.asarray(self.high, jnp.float32)
        return (high + low) / 2, (high - low) / 2

    def to_box(self, squashed: jax.Array) -> jax.Array:
        """An action in [-1, 1]^k moved to the environment's box."""
        centre, half = self._box()
        return jnp.clip(
            centre + half * squashed, jnp.asarray(self.low, jnp.float32), jnp.asarray(self.high, jnp.float32)
        )

    def from_box(self, action: jax.Array) -> jax.Array:
        """An environment action moved back into [-1, 1]^k (what the critics take)."""
        centre, half = self._box()
        return jnp.clip((action.astype(jnp.float32) - centre) / jnp.where(half > 0, half, 1.0), -1.0, 1.0)

    def policy_outputs(self, policy: MLPParams, obs: jax.Array) -> tuple[jax.Array, jax.Array]:
        """(mean, clipped log standard deviation) of u for observations (..., obs_size)."""
        out = apply_mlp(policy, obs.astype(jnp.float32), self.activation)
        mean, log_std = out[..., : self.action_size], out[..., self.action_size :]
        return mean, jnp.clip(log_std, *LOG_STD_RANGE)

    def sample(self, policy: MLPParams, obs: jax.Array, key: jax.Array) -> tuple[jax.Array, jax.Array]:
        """(tanh(u), log pi) of a reparameterised draw per observation."""
        mean, log_std = self.policy_outputs(policy, obs)
        u = mean + jnp.exp(log_std) * jax.random.normal(key, mean.shape, jnp.float32)
        return jnp.tanh(u), squashed_log_prob(u, mean, log_std)

    def q_values(self, critics: MLPParams, obs: jax.Array, squashed: jax.Array) -> jax.Array:
        """Both critics' values, shape (2, ...), of observations (..., obs_size) and actions in [-1, 1]^k."""
        inputs = jnp.concatenate([obs.astype(jnp.float32), squashed], axis=-1)
        return jax.vmap(lambda c: apply_mlp(c, inputs, self.activation)[..., 0])(critics)

    @functools.partial(jax.jit, static_argnums=0)
    def act(self, state: SACState, obs: jax.Array) -> tuple[SACState, jax.Array]:
        """A behaviour action for one observation: uniform in the box before `learning_starts`, then the policy's
        draw; the state's key advances."""
        key, draw = jax.random.split(state.key)
        uniform_key, policy_key = jax.random.split(draw)
        drawn, _ = self.sample(state.online, obs, policy_key)
        uniform = jax.random.uniform(uniform_key, (self.action_size,), jnp.float32, -1.0, 1.0)
        squashed = jnp.where(state.steps < self.learning_starts, uniform, drawn)
        return state._replace(key=key), self.to_box(squashed)

    @functools.partial(jax.jit, static_argnums=0)
    def greedy(self, online: MLPParams, obs: jax.Array) -> jax.Array:
        """The deterministic action tanh(mean) in the box, of one observation or a batch of them."""
        return self.to_box(jnp.tanh(self.policy_outputs(online, obs)[0]))

    @functools.partial(jax.jit, static_argnums=0)
    def observe(
        self,
        state: SACState,
        obs: jax.Array,
        action: jax.Array,
        reward: jax.Array,
        next_obs: jax.Array,
        terminated: jax.Array,
    ) -> SACState:
        """Store one real transition, then learn when an update is due."""
        buf = store(state.buffer, obs, self.from_box(action), reward, next_obs, terminated)
        steps = state.steps + 1
        state = state._replace(buffer=buf, steps=steps)
        due = (steps >= self.learning_starts) & (steps % self.update_every == 0)
        return jax.lax.cond(due, self._learn, lambda s: s, state)

    def _learn(self, state: SACState) -> SACState:
        return jax.lax.fori_loop(0, self.replays, lambda _, s: self._update(s), state)

    def critic_loss(
        self,
        critics: MLPParams,
        state: SACState,
        batch: tuple[jax.Array, ...],
        key: jax.Array,
        weight: jax.Array | None = None,
    ) -> jax.Array:
        """The critics' soft Bellman residual (module docstring) on a batch, the target held fixed; with `weight`
        (b,), its weighted mean."""
        obs, actions, rewards, next_obs, terminated = batch
        next_actions, next_log_prob = self.sample(state.online, next_obs, key)
        next_q = self.q_values(state.targets, next_obs, next_actions).min(axis=0)
        alpha = jnp.exp(state.log_alpha)
        soft_value = next_q - alpha * next_log_prob
        goal = jax.lax.stop_gradient(rewards + jnp.float32(self.gamma) * jnp.where(terminated, 0.0, soft_value))
        return 0.5 * _mean((self.q_values(critics, obs, actions) - goal) ** 2, weight)

    def policy_loss(
        self,
        policy: MLPParams,
        critics: MLPParams,
        log_alpha: jax.Array,
        obs: jax.Array,
        key: jax.Array,
        weight: jax.Array | None = None,
    ) -> tuple[jax.Array, jax.Array]:
        """(mean of alpha log pi - min Q over a reparameterised draw, the draws' log pi); weighted with `weight`."""
        actions, log_prob = self.sample(policy, obs, key)
        q = self.q_values(critics, obs, actions).min(axis=0)
        return _mean(jnp.exp(log_alpha) * log_prob - q, weight), log_prob

    def temperature_loss(self, log_alpha: jax.Array, log_prob: jax.Array, weight: jax.Array | None = None) -> jax.Array:
        """J(alpha) = mean of -alpha (log pi + target entropy), log pi held fixed; weighted with `weight`."""
        return _mean(-jnp.exp(log_alpha) * (jax.lax.stop_gradient(log_prob) + self.target_entropy), weight)

    def _update(self, state: SACState) -> SACState:
        """One update of critics, policy, temperature and targets from one minibatch of the buffer."""
        key, draw, critic_key, policy_key = jax.random.split(state.key, 4)
        buf = state.buffer
        idx = jax.random.randint(draw, (self.batch_size,), 0, jnp.maximum(buf.size, 1))
        batch = (buf.obs[idx], buf.actions[idx], buf.rewards[idx], buf.next_obs[idx], buf.terminated[idx])
        updates = state.updates + 1
        state = self.gradient_step(state, batch, critic_key, policy_key, copy=updates % self.target_period == 0)
        return state._replace(updates=updates, key=key)

    def gradient_step(
        self,
        state: SACState,
        batch: tuple[jax.Array, ...],
        critic_key: jax.Array,
        policy_key: jax.Array,
        weight: jax.Array | None = None,
        copy: jax.Array | bool = False,
    ) -> SACState:
        """Critics, policy, temperature and targets moved by one Adam step each on `batch` (obs, squashed actions,
        rewards, next_obs, terminated), rows weighted by `weight` when given; with `polyak_rate` 0 the targets
        become the critics where `copy` holds. The update count and the state's key are the caller's."""
        opt = self.optimizer
        grads = jax.grad(self.critic_loss)(state.critics, state, batch, critic_key, weight)
        changes, critic_opt = opt.update(grads, state.critic_opt, state.critics)
        critics = optax.apply_updates(state.critics, changes)
        grads, log_prob = jax.grad(self.policy_loss, has_aux=True)(
            state.online, critics, state.log_alpha, batch[0], policy_key, weight
        )
        changes, policy_opt = opt.update(grads, state.policy_opt, state.online)
        policy = optax.apply_updates(state.online, changes)
        log_alpha, alpha_opt = state.log_alpha, state.alpha_opt
        if self.learn_temperature:
            grad = jax.grad(self.temperature_loss)(log_alpha, log_prob, weight)
            changes, alpha_opt = opt.update(grad, alpha_opt, log_alpha)
            log_alpha = optax.apply_updates(log_alpha, changes)
        if self.polyak_rate > 0.0:
            rate = jnp.float32(self.polyak_rate)
            targets = jax.tree_util.tree_map(lambda t, o: rate * o + (1 - rate) * t, state.targets, critics)
        else:
            targets = jax.tree_util.tree_map(lambda t, o: jnp.where(copy, o, t), state.targets, critics)
        return state._replace(
            online=policy,
            critics=critics,
            targets=targets,
            log_alpha=log_alpha,
            policy_opt=policy_opt,
            critic_opt=critic_opt,
            alpha_opt=alpha_opt,
        )

    def counters(self, state: SACState) -> jax.Array:
        """(real updates, planning updates, model updates) so far, in `runner.agents.COUNTER_NAMES` order."""
        return jnp.stack([state.updates, jnp.zeros((), jnp.int32), jnp.zeros((), jnp.int32)])

    def updates_after(self, steps: int) -> int:
        """Updates made after `steps` real steps (the accounting the counters must show)."""
        if steps < self.learning_starts:
            return 0
        first = max(self.learning_starts, 1)
        return self.replays * (steps // self.update_every - (first - 1) // self.update_every)


def _mean(values: jax.Array, weight: jax.Array | None) -> jax.Array:
    """The mean of `values` (..., b), or with `weight` (b,) the weighted mean over the batch (and the leading axes)."""
    if weight is None:
        return jnp.mean(values)
    weights = jnp.broadcast_to(weight, values.shape)
    return jnp.sum(values * weights) / jnp.maximum(jnp.sum(weights), 1.0)
