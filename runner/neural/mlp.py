"""A small multilayer perceptron as plain JAX functions: parameters are a pytree, nothing is hidden in objects.

`init_mlp(key, sizes)` builds the parameters of a network with layer sizes `sizes` (inputs first, outputs last):
a tuple of `Dense(weight, bias)` layers, `weight` of shape (fan_in, fan_out), `bias` of shape (fan_out,).
`apply_mlp(params, x, activation)` runs it on the last axis of `x` (one input of shape (sizes[0],) or any batch of
them), with the activation after every layer but the last, whose outputs are linear. Both are pure, so they
compose with `jax.jit`, `jax.grad`, `jax.vmap` (e.g. over ensemble members: `vmap(init_mlp, (0, None))` over a
batch of keys) and `lax.scan`, and optax optimizers update the pytree directly.

Weights start from Glorot & Bengio's (2010) uniform initialisation, U(-r, r) with r = sqrt(6 / (fan_in +
fan_out)), and biases at zero.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from typing import NamedTuple

import jax
import jax.numpy as jnp

__all__ = ["ACTIVATIONS", "Dense", "MLPParams", "apply_mlp", "init_mlp", "layer_sizes"]


class Dense(NamedTuple):
    """One affine layer: outputs = inputs @ weight + bias."""

    weight: jax.Array
    bias: jax.Array


MLPParams = tuple[Dense, ...]
"""The parameters of a network: its layers in order (a pytree of arrays)."""

ACTIVATIONS: dict[str, Callable[[jax.Array], jax.Array]] = {
    "relu": jax.nn.relu,
    "tanh": jnp.tanh,
    "swish": jax.nn.silu,
    "elu": jax.nn.elu,
}
"""Hidden-layer activations by the name a kind's parameters use (`swish` is x * sigmoid(x))."""


def init_mlp(key: jax.Array, sizes: Sequence[int], dtype: jnp.dtype = jnp.float32) -> MLPParams:
    """Parameters of a network with layer sizes `sizes` (at least two: inputs and outputs), drawn from `key`."""
    sizes = tuple(int(n) for n in sizes)
    if len(sizes) < 2 or min(sizes) < 1:
        raise ValueError(f"an MLP needs at least two layer sizes, each at least 1, got {sizes}")
    keys = jax.random.split(key, len(sizes) - 1)
    layers = []
    for layer_key, fan_in, fan_out in zip(keys, sizes[:-1], sizes[1:], strict=True):
        limit = (6.0 / (fan_in + fan_out)) ** 0.5
        weight = jax.random.uniform(layer_key, (fan_in, fan_out), dtype, minval=-limit, maxval=limit)
        layers.append(Dense(weight, jnp.zeros((fan_out,), dtype)))
    return tuple(layers)


def apply_mlp(params: MLPParams, x: jax.Array, activation: str = "relu") -> jax.Array:
    """The network's outputs for inputs `x` of shape (..., sizes[0]): shape (..., sizes[-1])."""
    if activation not in ACTIVATIONS:
        raise ValueError(f"activation must be one of {sorted(ACTIVATIONS)}, got {activation!r}")
    act = ACTIVATIONS[activation]
    *hidden, last = params
    for layer in hidden:
        x = act(x @ layer.weight + layer.bias)
    return x @ last.weight + last.bias


def layer_sizes(params: MLPParams) -> tuple[int, ...]:
    """The layer sizes a network was built with (inputs first)."""
    return (int(params[0].weight.shape[0]), *(int(layer.weight.shape[1]) for layer in params))
