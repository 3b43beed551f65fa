"""The replay-based Q-network (Mnih et al. 2015) as pure JAX functions over an explicit state pytree.

`QNetworkCore` holds the static hyperparameters (a frozen, hashable dataclass, so its methods compile once per
setting); `QState` holds everything learned and every random key. Acting, observing a real transition and greedy
evaluation are pure functions of (core, state, inputs), so the same code runs one call per real step (the
step-by-step path through gymnasium) or inside `lax.scan` over whole chunks of a trial (`runner.neural.trial`).

Learning: every `update_every` real steps once `learning_starts` transitions are stored, `replays` minibatch
updates, each of `batch_size` transitions drawn uniformly (with replacement) from a ring buffer of the last
`buffer_size` real transitions; the Huber loss (delta 1) between Q(s, a) and r + gamma (1 - terminated) V(s'),
where V(s') = max_a' Q_target(s', a'), or with Double Q-learning (van Hasselt, Guez & Silver 2016)
Q_target(s', argmax_a' Q(s', a')); Adam (optax). The target network is a copy of the online one made every
`target_period` updates, or with `polyak_rate` > 0 moved after every update by target <- rate online +
(1 - rate) target. Epsilon falls linearly from `epsilon_start` to `epsilon_end` over the first `epsilon_steps`
real steps. A truncated step (time limit) bootstraps; only `terminated` ends the return.

Counters: one minibatch gradient step counts as one real update (it learns from replayed real transitions);
this kind makes no planning or model updates. Networks and the buffer are float32.
"""

from __future__ import annotations

import functools
from dataclasses import dataclass
from typing import Any, NamedTuple

import jax
import jax.numpy as jnp
import optax

from runner.neural.mlp import MLPParams, apply_mlp, init_mlp
from runner.neural.replay import ReplayBuffer, empty_buffer, store

__all__ = ["QNetworkCore", "QState"]


class QState(NamedTuple):
    """Everything a Q-network learns and draws: networks, optimizer state, buffer, step and update counts, key."""

    online: MLPParams
    target: MLPParams
    opt: Any
    buffer: ReplayBuffer
    steps: jax.Array
    updates: jax.Array
    key: jax.Array


@dataclass(frozen=True)
class QNetworkCore:
    """The static hyperparameters of a Q-network on an environment of `obs_size` numbers and `n_actions`."""

    obs_size: int
    n_actions: int
    hidden_layers: int = 2
    hidden_units: int = 64
    activation: str = "relu"
    gamma: float = 0.99
    learning_rate: float = 5e-4
    batch_size: int = 64
    buffer_size: int = 50_000
    learning_starts: int = 500
    update_every: int = 1
    replays: int = 1
    target_period: int = 200
    polyak_rate: float = 0.0
    epsilon_start: float = 1.0
    epsilon_end: float = 0.05
    epsilon_steps: int = 10_000
    double_q: bool = False

    @classmethod
    def from_params(cls, params: dict[str, Any], obs_size: int, n_actions: int) -> QNetworkCore:
        """The core of a `q_network` agent's checked parameters (`runner.agents.q_network`)."""
        return cls(obs_size=int(obs_size), n_actions=int(n_actions), **params)

    @property
    def sizes(self) -> tuple[int, ...]:
        """Layer sizes of the network: observation, hidden layers, one output per action."""
        return (self.obs_size, *([self.hidden_units] * self.hidden_layers), self.n_actions)

    @property
    def optimizer(self) -> optax.GradientTransformation:
        """Adam (Kingma & Ba 2015) with optax's default moments."""
        return optax.adam(self.learning_rate)

    def init(self, key: jax.Array) -> QState:
        """A fresh agent: networks drawn from `key`, an empty buffer, target equal to online."""
        net_key, key = jax.random.split(key)
        online = init_mlp(net_key, self.sizes, jnp.float32)
        buffer = empty_buffer(self.buffer_size, self.obs_size, (), jnp.int32)
        zero = jnp.zeros((), jnp.int32)
        return QState(online, online, self.optimizer.init(online), buffer, zero, zero, key)

    def q_values(self, params: MLPParams, obs: jax.Array) -> jax.Array:
        """Action values of observations (..., obs_size) as float32 (..., n_actions)."""
        return apply_mlp(params, obs.astype(jnp.float32), self.activation)

    def epsilon(self, steps: jax.Array) -> jax.Array:
        """The exploration rate after `steps` real steps: linear from start to end over `epsilon_steps`."""
        left = jnp.maximum(0.0, 1.0 - steps / self.epsilon_steps)
        return self.epsilon_end + (self.epsilon_start - self.epsilon_end) * left

    @functools.partial(jax.jit, static_argnums=0)
    def act(self, state: QState, obs: jax.Array) -> tuple[QState, jax.Array]:
        """Epsilon-greedy behaviour action for one observation; the state's key advances."""
        key, explore_key, action_key = jax.random.split(state.key, 3)
        greedy = jnp.argmax(self.q_values(state.online, obs)).astype(jnp.int32)
        random_action = jax.random.randint(action_key, (), 0, self.n_actions, jnp.int32)
        explore = jax.random.uniform(explore_key) < self.epsilon(state.steps)
        return state._replace(key=key), jnp.where(explore, random_action, greedy)

    @functools.partial(jax.jit, static_argnums=0)
    def greedy(self, online: MLPParams, obs: jax.Array) -> jax.Array:
        """Greedy actions (the first best on ties) of one observation or a batch of them."""
        return jnp.argmax(self.q_values(online, obs), axis=-1).astype(jnp.int32)

    @functools.partial(jax.jit, static_argnums=0)
    def observe(
        self,
        state: QState,
        obs: jax.Array,
        action: jax.Array,
        reward: jax.Array,
        next_obs: jax.Array,
        terminated: jax.Array,
    ) -> QState:
        """Store one real transition, then learn when an update is due."""
        buf = store(state.buffer, obs, action.astype(jnp.int32), reward, next_obs, terminated)
        steps = state.steps + 1
        state = state._replace(buffer=buf, steps=steps)
        due = (steps >= self.learning_starts) & (steps % self.update_every == 0)
        return jax.lax.cond(due, self._learn, lambda s: s, state)

    def _learn(self, state: QState) -> QState:
        return jax.lax.fori_loop(0, self.replays, lambda _, s: self._update(s), state)

    def _loss(self, online: MLPParams, target: MLPParams, batch: tuple[jax.Array, ...]) -> jax.Array:
        obs, actions, rewards, next_obs, terminated = batch
        q = jnp.take_along_axis(self.q_values(online, obs), actions[:, None], axis=1)[:, 0]
        next_target = self.q_values(target, next_obs)
        if self.double_q:
            chosen = jnp.argmax(self.q_values(online, next_obs), axis=1)
            next_value = jnp.take_along_axis(next_target, chosen[:, None], axis=1)[:, 0]
        else:
            next_value = next_target.max(axis=1)
        goal = rewards + jnp.float32(self.gamma) * jnp.where(terminated, 0.0, next_value)
        return optax.huber_loss(q, jax.lax.stop_gradient(goal), delta=1.0).mean()

    def _update(self, state: QState) -> QState:
        """One minibatch gradient step from the buffer, then the target network's update."""
        key, draw = jax.random.split(state.key)
        buf = state.buffer
        idx = jax.random.randint(draw, (self.batch_size,), 0, jnp.maximum(buf.size, 1))
        batch = (buf.obs[idx], buf.actions[idx], buf.rewards[idx], buf.next_obs[idx], buf.terminated[idx])
        grads = jax.grad(self._loss)(state.online, state.target, batch)
        changes, opt = self.optimizer.update(grads, state.opt, state.online)
        online = optax.apply_updates(state.online, changes)
        updates = state.updates + 1
        if self.polyak_rate > 0.0:
            rate = jnp.float32(self.polyak_rate)
            target = jax.tree_util.tree_map(lambda t, o: rate * o + (1 - rate) * t, state.target, online)
        else:
            copy = updates % self.target_period == 0
            target = jax.tree_util.tree_map(lambda t, o: jnp.where(copy, o, t), state.target, online)
        return state._replace(online=online, target=target, opt=opt, updates=updates, key=key)

    def counters(self, state: QState) -> jax.Array:
        """(real updates, planning updates, model updates) so far, in `runner.agents.COUNTER_NAMES` order."""
        return jnp.stack([state.updates, jnp.zeros((), jnp.int32), jnp.zeros((), jnp.int32)])

    def updates_after(self, steps: int) -> int:
        """Minibatch updates made after `steps` real steps (the accounting the counters must show)."""
        if steps < self.learning_starts:
            return 0
        first = max(self.learning_starts, 1)
        return self.replays * (steps // self.update_every - (first - 1) // self.update_every)
