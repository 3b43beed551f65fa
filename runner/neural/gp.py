"""A Gaussian-process dynamics model: one GP per output (each dimension of the change of state, and the reward)
over the standardised inputs (state, encoded action), as Deisenroth & Rasmussen (2011) use for control.

The GP (Rasmussen & Williams 2006): the squared-exponential kernel with one length scale per input dimension
(automatic relevance determination, eq. 5.2), k(x, x') = sf2 exp(-(x - x')^T diag(ell)^-2 (x - x') / 2), plus
noise of variance sn2 on the targets. Its hyperparameters maximise the log marginal likelihood (eq. 2.30,
computed as in Algorithm 2.1; section 5.4.1), here by Adam (optax) on their logarithms, with gradients by JAX's
autodiff, for a fixed number of iterations from a seeded start. The noise variance is kept above
`min_noise_var` (in standardised units: a bound on the signal-to-noise ratio, which keeps the training matrix
well conditioned; common practice). Prediction at x* (Algorithm 2.1): mean k*^T (K + sn2 I)^-1 y, latent variance
k(x*, x*) - k*^T (K + sn2 I)^-1 k*; the model's predictive variance adds sn2.

A fit uses at most `max_points` real transitions, chosen by `selection`: the most recent, a uniform random
subset, or a greedy spread (farthest-point traversal in the standardised input space from the most recent point,
Gonzalez 1985). The chosen points are padded to `max_points` with masked rows, so every fit after the first of a
size reuses one compiled program. Hyperparameters are fitted and the posterior computed in float64; the fitted
arrays come back in JAX's default float type.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import NamedTuple

import jax
import jax.numpy as jnp
import numpy as np
import optax
from jax.scipy.linalg import cho_solve, solve_triangular

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
    "SELECTIONS",
    "GPHyper",
    "GPParams",
    "GPPosterior",
    "GaussianProcessModel",
    "choose_points",
    "fit_hyper",
    "log_marginal_likelihood",
    "posterior",
    "posterior_predict",
    "rbf_kernel",
]

SELECTIONS = ("recent", "uniform", "spread")
"""How a fit chooses its points when there are more than `max_points` transitions."""


class GPHyper(NamedTuple):
    """Hyperparameters of one GP (or, with a leading axis, of one GP per output): `length_scales` (..., d),
    `signal_var` (...), `noise_var` (...)."""

    length_scales: jax.Array
    signal_var: jax.Array
    noise_var: jax.Array


class GPPosterior(NamedTuple):
    """What prediction needs from one GP's training data: inputs `x` (m, d), `mask` (m,) of real rows,
    `alpha` = (K + sn2 I)^-1 y (m,), and `chol_inv` = L^-1 (m, m) for K + sn2 I = L L^T."""

    x: jax.Array
    mask: jax.Array
    alpha: jax.Array
    chol_inv: jax.Array


class GPParams(NamedTuple):
    """A fitted GP model (a pytree): the scalers of inputs and targets and, with a leading output axis, the
    hyperparameters and posterior of each output's GP."""

    inputs: Scaler
    targets: Scaler
    hyper: GPHyper
    posterior: GPPosterior


def rbf_kernel(a: jax.Array, b: jax.Array, length_scales: jax.Array, signal_var: jax.Array) -> jax.Array:
    """The squared-exponential kernel matrix (len(a), len(b)) with per-dimension length scales (R&W eq. 5.2).
    Squared distances as |a|^2 + |b|^2 - 2 a.b (clipped at 0), so memory grows with len(a) x len(b), not times d."""
    a, b = a / length_scales, b / length_scales
    squared = jnp.sum(a**2, axis=1)[:, None] + jnp.sum(b**2, axis=1)[None, :] - 2.0 * a @ b.T
    return signal_var * jnp.exp(-0.5 * jnp.maximum(squared, 0.0))


def _training_matrix(hyper: GPHyper, x: jax.Array, mask: jax.Array) -> jax.Array:
    """K + sn2 I over the real rows; a padded row is a row of the identity, so it changes nothing."""
    both = mask[:, None] & mask[None, :]
    k = jnp.where(both, rbf_kernel(x, x, hyper.length_scales, hyper.signal_var), 0.0)
    return k + jnp.diag(jnp.where(mask, hyper.noise_var, 1.0))


def _all_rows(x: jax.Array, mask: jax.Array | None) -> jax.Array:
    return jnp.ones(x.shape[0], dtype=bool) if mask is None else mask


def log_marginal_likelihood(hyper: GPHyper, x: jax.Array, y: jax.Array, mask: jax.Array | None = None) -> jax.Array:
    """log p(y | x) of one GP (R&W eq. 2.30, Algorithm 2.1): -y^T alpha / 2 - sum log L_ii - n log(2 pi) / 2,
    over the rows where `mask` is true."""
    mask = _all_rows(x, mask)
    chol = jnp.linalg.cholesky(_training_matrix(hyper, x, mask))
    y = jnp.where(mask, y, 0.0)
    alpha = cho_solve((chol, True), y)
    n = jnp.sum(mask)
    return -0.5 * y @ alpha - jnp.sum(jnp.log(jnp.diag(chol))) - 0.5 * n * math.log(2.0 * math.pi)


def posterior(hyper: GPHyper, x: jax.Array, y: jax.Array, mask: jax.Array | None = None) -> GPPosterior:
    """One GP's posterior on training inputs `x` (m, d) and targets `y` (m,) (R&W Algorithm 2.1, lines 2-3)."""
    mask = _all_rows(x, mask)
    chol = jnp.linalg.cholesky(_training_matrix(hyper, x, mask))
    alpha = cho_solve((chol, True), jnp.where(mask, y, 0.0))
    chol_inv = solve_triangular(chol, jnp.eye(x.shape[0], dtype=chol.dtype), lower=True)
    return GPPosterior(x, mask, alpha, chol_inv)


def posterior_predict(hyper: GPHyper, post: GPPosterior, xs: jax.Array) -> tuple[jax.Array, jax.Array]:
    """One GP's posterior mean and latent variance (of f, without the noise) at inputs `xs` (b, d), each (b,)
    (R&W Algorithm 2.1, lines 4-6); the variance is clipped at 0 against rounding."""
    k_star = jnp.where(post.mask[None, :], rbf_kernel(xs, post.x, hyper.length_scales, hyper.signal_var), 0.0)
    v = k_star @ post.chol_inv.T
    return k_star @ post.alpha, jnp.maximum(hyper.signal_var - jnp.sum(v**2, axis=-1), 0.0)


def _hyper_from_raw(raw: GPHyper, min_noise_var: float) -> GPHyper:
    return GPHyper(jnp.exp(raw.length_scales), jnp.exp(raw.signal_var), min_noise_var + jnp.exp(raw.noise_var))


def _raw_from_hyper(hyper: GPHyper, min_noise_var: float) -> GPHyper:
    excess = jnp.maximum(hyper.noise_var - min_noise_var, 1e-12)
    return GPHyper(jnp.log(hyper.length_scales), jnp.log(hyper.signal_var), jnp.log(excess))


def fit_hyper(
    x: jax.Array,
    y: jax.Array,
    mask: jax.Array,
    start: GPHyper,
    iterations: int | jax.Array,
    learning_rate: float | jax.Array,
    min_noise_var: float | jax.Array,
) -> GPHyper:
    """Hyperparameters of one GP from `start` after `iterations` Adam steps on the log-parameters, each step
    descending -log p(y | x) / n (the mean over real rows keeps the step size independent of n). The iteration
    count, step size and noise floor may be traced values, so changing them does not compile again."""
    optimiser = optax.adam(learning_rate)
    n = jnp.maximum(jnp.sum(mask), 1)

    def loss(raw):
        return -log_marginal_likelihood(_hyper_from_raw(raw, min_noise_var), x, y, mask) / n

    def step(_, carry):
        raw, state = carry
        updates, state = optimiser.update(jax.grad(loss)(raw), state, raw)
        return optax.apply_updates(raw, updates), state

    raw = _raw_from_hyper(start, min_noise_var)
    raw, _ = jax.lax.fori_loop(0, iterations, step, (raw, optimiser.init(raw)))
    return _hyper_from_raw(raw, min_noise_var)


@jax.jit
def _fit_outputs(x, y, mask, start, iterations, learning_rate, min_noise_var):
    """Every output's hyperparameters (vmapped over the leading axis of `start` and the columns of `y`) and the
    posterior at them."""
    hyper = jax.vmap(fit_hyper, in_axes=(None, 1, None, 0, None, None, None))(
        x, y, mask, start, iterations, learning_rate, min_noise_var
    )
    return hyper, jax.vmap(posterior, in_axes=(0, None, 1, None))(hyper, x, y, mask)


def choose_points(inputs: np.ndarray, cap: int, selection: str, key: jax.Array) -> np.ndarray:
    """Indices (sorted) of at most `cap` rows of standardised `inputs` (n, d), the last row being the most recent:
    all rows if n <= cap; else the `cap` most recent, a uniform random subset drawn from `key`, or a greedy spread
    (farthest-point traversal from the most recent row; ties go to the earlier row)."""
    n = inputs.shape[0]
    if n <= cap:
        return np.arange(n)
    if selection == "recent":
        return np.arange(n - cap, n)
    if selection == "uniform":
        return np.sort(np.asarray(jax.random.choice(key, n, (cap,), replace=False)))
    chosen = [n - 1]
    nearest = np.sum((inputs - inputs[-1]) ** 2, axis=1)
    for _ in range(cap - 1):
        far = int(np.argmax(nearest))
        chosen.append(far)
        nearest = np.minimum(nearest, np.sum((inputs - inputs[far]) ** 2, axis=1))
    return np.sort(np.array(chosen))


@dataclass(frozen=True)
class GaussianProcessModel:
    """GP dynamics model (see the module's docstring); holds hyperparameters of the method only."""

    encoding: ActionEncoding
    max_points: int = 200
    selection: str = "recent"
    iterations: int = 100
    learning_rate: float = 0.05
    min_noise_var: float = 1e-4

    def __post_init__(self) -> None:
        if self.selection not in SELECTIONS:
            raise ValueError(f"selection must be one of {', '.join(SELECTIONS)}, got {self.selection!r}")
        if self.max_points < 1 or self.iterations < 0:
            raise ValueError(
                f"max_points must be >= 1 and iterations >= 0, got {self.max_points} and {self.iterations}"
            )
        if not (self.learning_rate > 0 and self.min_noise_var > 0):
            raise ValueError(
                f"learning_rate and min_noise_var must be > 0, got {self.learning_rate} and {self.min_noise_var}"
            )

    def fit(self, data: Transitions, key: jax.Array, previous: GPParams | None = None) -> GPParams:
        """Fit every output's GP to at most `max_points` of `data`; start from `previous`'s hyperparameters when
        given, else from length scales drawn log-uniformly in [e^-0.5, e^0.5], signal variance 1 and noise
        variance 0.1 (in standardised units)."""
        x, y, in_scaler, out_scaler = standardised_data(data, self.encoding)
        select_key, start_key = jax.random.split(key)
        rows = choose_points(x, self.max_points, self.selection, select_key)
        m, d, outputs = self.max_points, x.shape[1], y.shape[1]
        mask = np.arange(m) < rows.size
        x_pad, y_pad = np.zeros((m, d)), np.zeros((m, outputs))
        x_pad[: rows.size], y_pad[: rows.size] = x[rows], y[rows]
        if previous is not None:
            start = GPHyper(*(np.asarray(a, dtype=np.float64) for a in previous.hyper))
        else:
            draw = np.asarray(jax.random.uniform(start_key, (outputs, d), minval=-0.5, maxval=0.5), dtype=np.float64)
            start = GPHyper(np.exp(draw), np.ones(outputs), np.full(outputs, 0.1))
        with jax.enable_x64(True):
            hyper, post = _fit_outputs(
                jnp.asarray(x_pad),
                jnp.asarray(y_pad),
                jnp.asarray(mask),
                jax.tree.map(jnp.asarray, start),
                self.iterations,
                self.learning_rate,
                self.min_noise_var,
            )
            fitted = jax.tree.map(np.asarray, (hyper, post))
        params = GPParams(in_scaler, out_scaler, *fitted)
        return jax.tree.map(jnp.asarray, params)

    def predict(self, params: GPParams, states: jax.Array, actions: jax.Array) -> Prediction:
        """Predictive mean and variance (latent variance plus noise) of the next state and reward per row."""
        states, xs = standardised_inputs(states, actions, self.encoding, params.inputs, params.posterior.x.dtype)
        mean, latent = jax.vmap(posterior_predict, in_axes=(0, 0, None))(params.hyper, params.posterior, xs)
        var = latent + params.hyper.noise_var[:, None]
        return prediction_from_targets(states, mean.T, var.T, params.targets)

    def sample(
        self, params: GPParams, key: jax.Array, states: jax.Array, actions: jax.Array
    ) -> tuple[jax.Array, jax.Array]:
        """One draw per row from the predictive Gaussian of each output (outputs drawn independently)."""
        pred = self.predict(params, states, actions)
        state_key, reward_key = jax.random.split(key)
        noise = jax.random.normal(state_key, pred.next_state_mean.shape, pred.next_state_mean.dtype)
        next_states = pred.next_state_mean + jnp.sqrt(pred.next_state_var) * noise
        rewards = pred.reward_mean + jnp.sqrt(pred.reward_var) * jax.random.normal(
            reward_key, pred.reward_mean.shape, pred.reward_mean.dtype
        )
        return next_states, rewards
