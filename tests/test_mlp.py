"""The MLP of `runner.neural.mlp`: shapes, seeding, initial ranges, and gradients against finite differences."""

import numpy as np
import pytest

jax = pytest.importorskip("jax")
import jax.numpy as jnp  # noqa: E402
from jax.flatten_util import ravel_pytree  # noqa: E402

from runner.neural.mlp import ACTIVATIONS, apply_mlp, init_mlp, layer_sizes  # noqa: E402

SIZES = (3, 5, 4, 2)


def test_shapes_and_sizes_round_trip():
    params = init_mlp(jax.random.key(0), SIZES)
    assert layer_sizes(params) == SIZES
    assert [layer.weight.shape for layer in params] == [(3, 5), (5, 4), (4, 2)]
    assert apply_mlp(params, jnp.ones(3)).shape == (2,)
    assert apply_mlp(params, jnp.ones((7, 6, 3))).shape == (7, 6, 2)


def test_a_batch_equals_its_rows_one_by_one():
    params = init_mlp(jax.random.key(1), SIZES)
    x = jax.random.normal(jax.random.key(2), (8, 3))
    batch = apply_mlp(params, x, "tanh")
    rows = jnp.stack([apply_mlp(params, row, "tanh") for row in x])
    np.testing.assert_allclose(np.asarray(batch), np.asarray(rows), rtol=1e-6, atol=1e-6)


def test_same_key_same_params_and_other_keys_differ():
    a, b, c = (init_mlp(jax.random.key(k), SIZES) for k in (4, 4, 5))
    flat_a, flat_b, flat_c = (np.asarray(ravel_pytree(p)[0]) for p in (a, b, c))
    assert np.array_equal(flat_a, flat_b)
    assert not np.array_equal(flat_a, flat_c)


def test_initial_weights_fill_the_glorot_range_and_biases_start_at_zero():
    """Glorot & Bengio (2010), eq. 16: U(-r, r) with r = sqrt(6 / (fan_in + fan_out))."""
    params = init_mlp(jax.random.key(6), (40, 60))
    weight = np.asarray(params[0].weight)
    limit = np.sqrt(6.0 / 100.0)
    assert np.abs(weight).max() <= limit
    assert np.abs(weight).max() > 0.95 * limit
    assert abs(weight.mean()) < 0.02
    assert np.all(np.asarray(params[0].bias) == 0.0)


def test_bad_sizes_and_activation_are_refused():
    with pytest.raises(ValueError, match="at least two layer sizes"):
        init_mlp(jax.random.key(0), (3,))
    with pytest.raises(ValueError, match="activation must be one of"):
        apply_mlp(init_mlp(jax.random.key(0), SIZES), jnp.ones(3), "sigmoidish")


@pytest.mark.parametrize("activation", sorted(ACTIVATIONS))
def test_gradients_equal_central_differences(activation):
    """jax.grad of a scalar of the outputs, against central differences (f(p + h) - f(p - h)) / 2h in float64
    (central differences, common practice), for every parameter and every input, at random points."""
    with jax.enable_x64(True):
        params = init_mlp(jax.random.key(7), SIZES, jnp.float64)
        flat, unravel = ravel_pytree(params)
        flat = flat + 0.3 * jax.random.normal(jax.random.key(8), flat.shape, jnp.float64)
        x = jax.random.normal(jax.random.key(9), (6, 3), jnp.float64)
        mix = jax.random.normal(jax.random.key(10), (6, 2), jnp.float64)

        def loss(theta, inputs):
            return jnp.sum(jnp.sin(apply_mlp(unravel(theta), inputs, activation)) * mix)

        h = 1e-5
        for argnum, point in ((0, flat), (1, x.ravel())):

            def along(v, argnum=argnum):
                if argnum == 0:
                    return loss(v, x)
                return loss(flat, v.reshape(x.shape))

            exact = jax.jit(jax.grad(along))(point)
            steps = h * jnp.eye(point.size, dtype=jnp.float64)
            batch = jax.jit(jax.vmap(along))
            fd = (batch(point + steps) - batch(point - steps)) / (2 * h)
            assert exact.dtype == jnp.float64
            np.testing.assert_allclose(np.asarray(exact), np.asarray(fd), rtol=1e-6, atol=1e-8)
