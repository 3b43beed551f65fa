"""The ring buffer of real transitions that every neural kind keeps (the Q-network, soft actor-critic, neural Dyna
through either, model-predictive control): preallocated float32 arrays in a pytree, written in place inside
compiled code, so a trial's buffer never changes shape."""

from __future__ import annotations

from typing import Any, NamedTuple

import jax
import jax.numpy as jnp

__all__ = ["ReplayBuffer", "empty_buffer", "store"]


class ReplayBuffer(NamedTuple):
    """A ring buffer of real transitions; `size` stored so far (at most the capacity), `slot` written next.
    `actions` holds integers (n,) for discrete actions or values (n, action_size) for box actions."""

    obs: jax.Array
    actions: jax.Array
    rewards: jax.Array
    next_obs: jax.Array
    terminated: jax.Array
    size: jax.Array
    slot: jax.Array


def empty_buffer(capacity: int, obs_size: int, action_shape: tuple[int, ...], action_dtype: Any) -> ReplayBuffer:
    """A buffer of `capacity` zero rows holding nothing yet; each action of shape `action_shape` (() for a
    discrete action) and type `action_dtype`."""
    return ReplayBuffer(
        obs=jnp.zeros((capacity, obs_size), jnp.float32),
        actions=jnp.zeros((capacity, *action_shape), action_dtype),
        rewards=jnp.zeros((capacity,), jnp.float32),
        next_obs=jnp.zeros((capacity, obs_size), jnp.float32),
        terminated=jnp.zeros((capacity,), jnp.bool_),
        size=jnp.zeros((), jnp.int32),
        slot=jnp.zeros((), jnp.int32),
    )


def store(
    buf: ReplayBuffer,
    obs: jax.Array,
    action: jax.Array,
    reward: jax.Array,
    next_obs: jax.Array,
    terminated: jax.Array,
) -> ReplayBuffer:
    """`buf` with one transition written at `slot` (over the oldest once full); `action` in the form the buffer
    keeps (the caller's: an index, or a box action squashed or not), cast to the buffer's type."""
    i, capacity = buf.slot, buf.obs.shape[0]
    return ReplayBuffer(
        obs=buf.obs.at[i].set(obs.astype(jnp.float32)),
        actions=buf.actions.at[i].set(action.astype(buf.actions.dtype)),
        rewards=buf.rewards.at[i].set(reward.astype(jnp.float32)),
        next_obs=buf.next_obs.at[i].set(next_obs.astype(jnp.float32)),
        terminated=buf.terminated.at[i].set(terminated),
        size=jnp.minimum(buf.size + 1, capacity),
        slot=(i + 1) % capacity,
    )
