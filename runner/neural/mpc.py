"""Model-predictive control on a learned dynamics model, as pure JAX functions over an explicit state pytree.

Acting (receding horizon): from the current observation, plan a sequence of `horizon` actions on the learned model
and take its first action; plan again at the next real step. Two planners:

- random shooting (Nagabandi, Kahn, Fearing & Levine 2018): `candidates` action sequences drawn uniformly, the
  first action of the best one;
- the cross-entropy method (Rubinstein 1999; as PETS plans, Chua, Calandra, McAllister & Levine 2018):
  `iterations` rounds of `candidates` sequences drawn from a distribution over sequences, refitted to the `elites`
  best, smoothed by `smoothing` (the weight kept on the old distribution). Discrete actions: one categorical
  distribution per time step (the CEM for discrete problems, de Boer, Kroese, Mannor & Rubinstein 2005, section
  3: the new probabilities are the elites' action frequencies); the action taken is the first of the best sequence
  drawn. Box actions: one Gaussian per time step and action dimension, draws clipped to the bounds, starting each
  real step with standard deviation (high - low) / 4 (PETS's variance (high - low)^2 / 16); the action taken is the
  mean's first. Each real step starts from the previous step's distribution shifted one step (warm start; the new
  last step uniform, or the bounds' midpoint), for discrete actions mixed half and half with the uniform so no
  action's probability stays at zero.

A candidate's value is the model's return over the horizon, averaged over `particles` rollouts. With particles,
each rollout draws every step from the model (`sample`), and with an ensemble rollout p keeps member p mod
`members` for the whole horizon (trajectory sampling TS-infinity of PETS); `particles: 0` rolls out the model's
predictive mean once instead (as random shooting does with a deterministic network). The return sums
gamma^t alive_t r_t, where alive_t is the probability that no episode end came before step t: with
`termination: learned` a logistic network of the next observation, trained on the real transitions' `terminated`
flags, gives each step's end probability; with `termination: none` episodes never end in the model (right for
tasks without terminal states, such as Pendulum; on CartPole the constant reward then makes every plan equal).
With `value_bootstrap`, gamma^H alive_H V(s_H) is added, V a state-value network trained alongside by TD(0) on the
real transitions (a `runner.neural.q_network` core with one action: target network, Huber loss, Adam; the sizes,
activation, minibatch and step size of the other networks).

Learning: every real transition goes into a ring buffer of `buffer_size`; the first `learning_starts` real steps
act uniformly at random; at step `learning_starts` and every `model_every` real steps after it the model is
refitted on the buffer (`refit`, on the host: the model's own `fit`, the ensemble continuing from its last fit, the
Gaussian process choosing its capped set of points afresh) and so is the termination network. Refits run between
the compiled chunks of a trial, so the chunks end at refit steps.

Counters: planning updates are the simulated model steps a real step's plan evaluates (candidates x max(1,
particles) x horizon x iterations; random shooting one iteration), model updates the refits, real updates the
value network's minibatch updates.
"""

from __future__ import annotations

import functools
from dataclasses import dataclass
from typing import Any, NamedTuple

import jax
import jax.numpy as jnp
import numpy as np
import optax

from runner.neural.ensemble import EnsembleModel, EnsembleParams, fresh_members
from runner.neural.gp import GaussianProcessModel, GPHyper, GPParams, GPPosterior
from runner.neural.mlp import MLPParams, apply_mlp, init_mlp
from runner.neural.model import ActionEncoding, Scaler, Transitions
from runner.neural.q_network import QNetworkCore, QState
from runner.neural.replay import ReplayBuffer, empty_buffer, store

__all__ = ["MPCCore", "MPCState", "PlanInputs", "TerminationNet"]

_UNIFORM_MIX = 0.5
"""Weight of the uniform distribution in a warm-started categorical plan (see the module's docstring)."""


class TerminationNet(NamedTuple):
    """A logistic network of the standardised next observation: the probability that a step ends the episode."""

    mean: jax.Array
    scale: jax.Array
    net: MLPParams


class PlanInputs(NamedTuple):
    """What planning reads: the fitted model, the termination network, the value network (or None), and the key
    of greedy (evaluation) plans."""

    model: Any
    termination: TerminationNet
    value: Any
    key: jax.Array


class MPCState(NamedTuple):
    """Everything the controller learns and draws: model, termination and value networks, buffer, the warm-start
    distribution, step, plan and refit counts, keys."""

    model: Any
    termination: TerminationNet
    value: QState | None
    buffer: ReplayBuffer
    plan: jax.Array
    steps: jax.Array
    plans: jax.Array
    refits: jax.Array
    key: jax.Array
    greedy_key: jax.Array

    @property
    def online(self) -> PlanInputs:
        """The inputs of a greedy plan (what evaluation reads)."""
        value = None if self.value is None else self.value.online
        return PlanInputs(self.model, self.termination, value, self.greedy_key)


@dataclass(frozen=True)
class MPCCore:
    """Static settings of a model-predictive controller on `obs_size` observations and `n_actions` discrete
    actions (or, with `n_actions` 0, Box actions between `action_low` and `action_high`)."""

    obs_size: int
    n_actions: int
    action_low: tuple[float, ...] = ()
    action_high: tuple[float, ...] = ()
    planner: str = "cem"
    horizon: int = 15
    candidates: int = 200
    iterations: int = 5
    elites: int = 20
    smoothing: float = 0.1
    particles: int = 4
    gamma: float = 0.99
    termination: str = "learned"
    value_bootstrap: bool = False
    model: str = "ensemble"
    members: int = 5
    hidden_layers: int = 2
    hidden_units: int = 64
    activation: str = "swish"
    model_epochs: int = 5
    model_batch_size: int = 64
    model_learning_rate: float = 1e-3
    gp_points: int = 200
    gp_selection: str = "recent"
    gp_iterations: int = 100
    buffer_size: int = 20_000
    learning_starts: int = 200
    model_every: int = 250

    @classmethod
    def from_params(
        cls,
        params: dict[str, Any],
        obs_size: int,
        n_actions: int,
        bounds: tuple[tuple[float, ...], tuple[float, ...]] | None = None,
    ) -> MPCCore:
        """The core of an `mpc` agent's checked parameters (`runner.agents.mpc`): `n_actions` discrete actions,
        or with `bounds` (low, high) a Box of `n_actions` dimensions."""
        if bounds is None:
            return cls(int(obs_size), int(n_actions), **params)
        low, high = (tuple(float(v) for v in side) for side in bounds)
        return cls(int(obs_size), 0, low, high, **params)

    @property
    def discrete(self) -> bool:
        """Whether actions are integers (else Box vectors)."""
        return self.n_actions > 0

    @property
    def encoding(self) -> ActionEncoding:
        """How the model takes actions."""
        return ActionEncoding(self.n_actions) if self.discrete else ActionEncoding(box_dim=len(self.action_low))

    @property
    def dynamics(self) -> EnsembleModel | GaussianProcessModel:
        """The learned dynamics model the settings name."""
        if self.model == "gp":
            return GaussianProcessModel(self.encoding, self.gp_points, self.gp_selection, self.gp_iterations)
        hidden = (self.hidden_units,) * self.hidden_layers
        return EnsembleModel(
            self.encoding,
            self.members,
            hidden,
            self.activation,
            self.model_epochs,
            self.model_batch_size,
            self.model_learning_rate,
        )

    @property
    def value_core(self) -> QNetworkCore:
        """The state-value learner: a Q-network core with a single action."""
        return QNetworkCore(
            self.obs_size,
            1,
            self.hidden_layers,
            self.hidden_units,
            self.activation,
            self.gamma,
            self.model_learning_rate,
            self.model_batch_size,
            self.buffer_size,
            self.learning_starts,
        )

    @property
    def rounds(self) -> int:
        """Sampling rounds per plan (random shooting: one)."""
        return self.iterations if self.planner == "cem" else 1

    @property
    def simulated_per_plan(self) -> int:
        """Model steps one plan evaluates."""
        return self.candidates * max(self.particles, 1) * self.horizon * self.rounds

    def _plan_shape(self) -> tuple[int, int]:
        return (self.horizon, self.n_actions if self.discrete else len(self.action_low))

    def _fresh_plan(self, dtype: Any) -> jax.Array:
        """The distribution a plan starts from with no warm start: uniform probabilities, or the bounds' middle."""
        if self.discrete:
            return jnp.full(self._plan_shape(), 1.0 / self.n_actions, dtype)
        middle = (jnp.asarray(self.action_low, dtype) + jnp.asarray(self.action_high, dtype)) / 2
        return jnp.broadcast_to(middle, self._plan_shape())

    def _placeholder_model(self, key: jax.Array) -> Any:
        """Params of the model's shapes and types before its first fit (never used to act: acting is random then)."""
        dtype = jnp.asarray(0.0).dtype
        d_in, d_out = self.obs_size + self.encoding.width, self.obs_size + 1
        scalers = (
            Scaler(jnp.zeros(d_in, dtype), jnp.ones(d_in, dtype)),
            Scaler(jnp.zeros(d_out, dtype), jnp.ones(d_out, dtype)),
        )
        if self.model == "gp":
            m = self.gp_points
            hyper = GPHyper(jnp.ones((d_out, d_in), dtype), jnp.ones(d_out, dtype), jnp.full(d_out, 0.1, dtype))
            post = GPPosterior(
                jnp.zeros((d_out, m, d_in), dtype),
                jnp.zeros((d_out, m), bool),
                jnp.zeros((d_out, m), dtype),
                jnp.broadcast_to(jnp.eye(m, dtype=dtype), (d_out, m, m)),
            )
            return GPParams(*scalers, hyper, post)
        sizes = (d_in, *((self.hidden_units,) * self.hidden_layers), 2 * d_out)
        return EnsembleParams(*scalers, fresh_members(key, self.members, sizes))

    def init(self, key: jax.Array) -> MPCState:
        """A fresh controller: an empty buffer, placeholder model, fresh termination and value networks."""
        model_key, done_key, value_key, greedy_key, key = jax.random.split(key, 5)
        d = self.obs_size
        action_shape = () if self.discrete else (len(self.action_low),)
        buffer = empty_buffer(self.buffer_size, d, action_shape, self._action_dtype)
        sizes = (d, *((self.hidden_units,) * self.hidden_layers), 1)
        termination = TerminationNet(jnp.zeros(d, jnp.float32), jnp.ones(d, jnp.float32), init_mlp(done_key, sizes))
        value = self.value_core.init(value_key) if self.value_bootstrap else None
        zero = jnp.zeros((), jnp.int64)
        plan = self._fresh_plan(jnp.float32)
        model = self._placeholder_model(model_key)
        return MPCState(model, termination, value, buffer, plan, zero, zero, zero, key, greedy_key)

    # -- planning ----------------------------------------------------------------------------------------------

    def _end_probability(self, termination: TerminationNet, next_obs: jax.Array) -> jax.Array:
        if self.termination != "learned":
            return jnp.zeros(next_obs.shape[:-1], jnp.float32)
        z = (next_obs.astype(jnp.float32) - termination.mean) / termination.scale
        return jax.nn.sigmoid(apply_mlp(termination.net, z, self.activation)[..., 0])

    def _returns(self, inputs: PlanInputs, obs: jax.Array, sequences: jax.Array, key: jax.Array) -> jax.Array:
        """Each candidate's model return over the horizon (see the module), sequences (C, H) or (C, H, da)."""
        model = self.dynamics
        dtype = jax.tree.leaves(inputs.model)[0].dtype
        count = max(self.particles, 1)
        rows = sequences.shape[0] * count
        seqs = jnp.repeat(sequences, count, axis=0)
        states = jnp.broadcast_to(obs.astype(dtype), (rows, self.obs_size))
        members = (jnp.arange(rows) % count) % (self.members if self.model == "ensemble" else 1)

        def step(carry, t):
            states, alive, discount, total = carry
            actions = seqs[:, t]
            if self.particles == 0:
                pred = model.predict(inputs.model, states, actions)
                next_states, rewards = pred.next_state_mean, pred.reward_mean
            elif self.model == "ensemble":
                draw_key = jax.random.fold_in(key, t)
                next_states, rewards = model.sample_members(inputs.model, draw_key, states, actions, members)
            else:
                next_states, rewards = model.sample(inputs.model, jax.random.fold_in(key, t), states, actions)
            total = total + alive * discount * rewards.astype(jnp.float32)
            alive = alive * (1.0 - self._end_probability(inputs.termination, next_states))
            return (next_states, alive, discount * jnp.float32(self.gamma), total), None

        start = (states, jnp.ones(rows, jnp.float32), jnp.float32(1.0), jnp.zeros(rows, jnp.float32))
        states, alive, discount, total = jax.lax.scan(step, start, jnp.arange(self.horizon))[0]
        if inputs.value is not None:
            values = self.value_core.q_values(inputs.value, states)[:, 0]
            total = total + alive * discount * values
        total = jnp.where(jnp.isfinite(total), total, -jnp.inf)
        return total.reshape(sequences.shape[0], count).mean(axis=1)

    def _draw(self, plan: jax.Array, key: jax.Array, spread: jax.Array | None) -> jax.Array:
        """`candidates` sequences from the distribution `plan` (probabilities, or means with `spread`)."""
        if self.discrete:
            logits = jnp.log(jnp.maximum(plan, 1e-30))
            return jax.random.categorical(key, logits, shape=(self.candidates, self.horizon)).astype(jnp.int32)
        low, high = jnp.asarray(self.action_low, plan.dtype), jnp.asarray(self.action_high, plan.dtype)
        if spread is None:
            return jax.random.uniform(key, (self.candidates, *plan.shape), plan.dtype, low, high)
        noise = jax.random.normal(key, (self.candidates, *plan.shape), plan.dtype)
        return jnp.clip(plan + spread * noise, low, high)

    def _refitted(self, sequences: jax.Array, returns: jax.Array) -> tuple[jax.Array, jax.Array]:
        """The distribution of the `elites` best sequences: action frequencies, or (mean, standard deviation)."""
        top = jax.lax.top_k(returns, min(self.elites, self.candidates))[1]
        best = sequences[top]
        if self.discrete:
            return jax.nn.one_hot(best, self.n_actions, dtype=jnp.float32).mean(axis=0), jnp.zeros(())
        return best.mean(axis=0), best.std(axis=0)

    def plan_action(
        self, inputs: PlanInputs, obs: jax.Array, start: jax.Array, key: jax.Array
    ) -> tuple[jax.Array, jax.Array]:
        """One receding-horizon plan from `obs`: (the action to take, the final distribution)."""
        if self.planner == "shooting":
            sequences = self._draw(self._fresh_plan(start.dtype), key, None)
            returns = self._returns(inputs, obs, sequences, jax.random.fold_in(key, 1))
            return sequences[jnp.argmax(returns)][0], start
        low, high = jnp.asarray(self.action_low, start.dtype), jnp.asarray(self.action_high, start.dtype)
        spread = None if self.discrete else jnp.broadcast_to((high - low) / 4.0, start.shape)
        keep = jnp.float32(self.smoothing)

        def round_(carry, round_key):
            plan, spread, best_return, best_first = carry
            draw_key, eval_key = jax.random.split(round_key)
            sequences = self._draw(plan, draw_key, spread)
            returns = self._returns(inputs, obs, sequences, eval_key)
            centre, width = self._refitted(sequences, returns)
            plan = keep * plan + (1 - keep) * centre
            spread = None if spread is None else keep * spread + (1 - keep) * width
            i = jnp.argmax(returns)
            better = returns[i] > best_return
            best_first = jnp.where(better, sequences[i][0], best_first)
            return (plan, spread, jnp.maximum(returns[i], best_return), best_first), None

        first = jnp.zeros((), jnp.int32) if self.discrete else jnp.zeros(start.shape[1:], start.dtype)
        carry = (start, spread, jnp.float32(-jnp.inf), first)
        plan, _, _, best_first = jax.lax.scan(round_, carry, jax.random.split(key, self.rounds))[0]
        action = best_first if self.discrete else jnp.clip(plan[0], low, high)
        return action, plan

    def _warm(self, plan: jax.Array) -> jax.Array:
        """The next real step's start: the plan shifted one step, a fresh last step (see the module)."""
        fresh = self._fresh_plan(plan.dtype)
        shifted = jnp.concatenate([plan[1:], fresh[-1:]], axis=0)
        return _UNIFORM_MIX * fresh + (1 - _UNIFORM_MIX) * shifted if self.discrete else shifted

    # -- the agent's methods -----------------------------------------------------------------------------------

    def _random_action(self, key: jax.Array) -> jax.Array:
        if self.discrete:
            return jax.random.randint(key, (), 0, self.n_actions, jnp.int32)
        low, high = jnp.asarray(self.action_low, jnp.float32), jnp.asarray(self.action_high, jnp.float32)
        return jax.random.uniform(key, low.shape, jnp.float32, low, high)

    @functools.partial(jax.jit, static_argnums=0)
    def act(self, state: MPCState, obs: jax.Array) -> tuple[MPCState, jax.Array]:
        """A uniformly random action for the first `learning_starts` steps, then the first action of a plan."""
        key, action_key = jax.random.split(state.key)

        def explore(state):
            return state, self._random_action(action_key).astype(self._action_dtype)

        def plan(state):
            action, final = self.plan_action(state.online, obs, state.plan, action_key)
            return state._replace(plan=self._warm(final), plans=state.plans + 1), action.astype(self._action_dtype)

        state, action = jax.lax.cond(state.steps < self.learning_starts, explore, plan, state)
        return state._replace(key=key), action

    @property
    def _action_dtype(self) -> Any:
        return jnp.int32 if self.discrete else jnp.float32

    @functools.partial(jax.jit, static_argnums=0)
    def greedy(self, online: PlanInputs, obs: jax.Array) -> jax.Array:
        """The first action of a plan from scratch (no warm start) for one observation or a batch of them."""

        def one(o):
            return self.plan_action(online, o, self._fresh_plan(jnp.float32), online.key)[0].astype(self._action_dtype)

        return jax.vmap(one)(obs) if obs.ndim == 2 else one(obs)

    @functools.partial(jax.jit, static_argnums=0)
    def observe(
        self,
        state: MPCState,
        obs: jax.Array,
        action: jax.Array,
        reward: jax.Array,
        next_obs: jax.Array,
        terminated: jax.Array,
    ) -> MPCState:
        """Store one real transition (and train the value network on it, when bootstrapping)."""
        buf = store(state.buffer, obs, action, reward, next_obs, terminated)
        value = state.value
        if value is not None:
            value = self.value_core.observe(value, obs, jnp.int32(0), reward, next_obs, terminated)
        return state._replace(buffer=buf, value=value, steps=state.steps + 1)

    def refit_due(self, steps: int) -> bool:
        """Whether the model is refitted after `steps` real steps."""
        return steps >= self.learning_starts and (steps - self.learning_starts) % self.model_every == 0

    def refit_steps(self, budget: int) -> list[int]:
        """The real steps (up to `budget`) after which the model is refitted."""
        if budget < self.learning_starts:
            return []
        return list(range(self.learning_starts, budget + 1, self.model_every))

    def refit(self, state: MPCState) -> MPCState:
        """Refit the model and the termination network on the buffer (host code between compiled calls)."""
        buf = jax.tree.map(np.asarray, state.buffer)
        size, slot = int(buf.size), int(buf.slot)
        order = np.arange(size) if size < self.buffer_size else (np.arange(size) + slot) % self.buffer_size
        data = Transitions(buf.obs[order], buf.actions[order], buf.next_obs[order], buf.rewards[order])
        fit_key, done_key, greedy_key, key = jax.random.split(state.key, 4)
        previous = state.model if int(state.refits) > 0 and self.model == "ensemble" else None
        fitted = self.dynamics.fit(data, fit_key, previous)
        model = jax.tree.map(lambda new, old: jnp.asarray(new, old.dtype), fitted, state.model)
        termination = state.termination
        if self.termination == "learned":
            termination = self._fit_termination(termination, state.buffer, done_key)
        return state._replace(
            model=model, termination=termination, refits=state.refits + 1, key=key, greedy_key=greedy_key
        )

    @functools.partial(jax.jit, static_argnums=0)
    def _fit_termination(self, termination: TerminationNet, buffer: ReplayBuffer, key: jax.Array) -> TerminationNet:
        """Logistic regression of `terminated` on the next observation: Adam on the mean binary cross-entropy over
        minibatches drawn uniformly from the buffer, `model_epochs` passes' worth, from the last fit's weights."""
        n = buffer.size
        rows = jnp.arange(self.buffer_size) < n
        weight = rows.astype(jnp.float32)[:, None]
        mean = jnp.sum(buffer.next_obs * weight, axis=0) / n
        spread = jnp.sqrt(jnp.sum((buffer.next_obs - mean) ** 2 * weight, axis=0) / n)
        scale = jnp.where(spread > 1e-6, spread, 1.0)
        optimiser = optax.adam(self.model_learning_rate)

        def loss(net, idx):
            z = (buffer.next_obs[idx] - mean) / scale
            logits = apply_mlp(net, z, self.activation)[:, 0]
            return optax.sigmoid_binary_cross_entropy(logits, buffer.terminated[idx].astype(jnp.float32)).mean()

        def step(i, carry):
            net, opt = carry
            idx = jax.random.randint(jax.random.fold_in(key, i), (self.model_batch_size,), 0, n)
            updates, opt = optimiser.update(jax.grad(loss)(net, idx), opt, net)
            return optax.apply_updates(net, updates), opt

        steps = self.model_epochs * ((n + self.model_batch_size - 1) // self.model_batch_size)
        net = jax.lax.fori_loop(0, steps, step, (termination.net, optimiser.init(termination.net)))[0]
        return TerminationNet(mean, scale, net)

    @functools.partial(jax.jit, static_argnums=0)
    def predict_mean(self, model: Any, obs: jax.Array, action: jax.Array) -> tuple[jax.Array, jax.Array]:
        """The model's predictive mean (next observation, reward) of one transition."""
        dtype = jax.tree.leaves(model)[0].dtype
        pred = self.dynamics.predict(model, obs.astype(dtype)[None], jnp.asarray(action)[None])
        return pred.next_state_mean[0], pred.reward_mean[0]

    def counters(self, state: MPCState) -> jax.Array:
        """(real updates, planning updates, model updates) in `runner.agents.COUNTER_NAMES` order."""
        real = jnp.zeros((), jnp.int64) if state.value is None else state.value.updates.astype(jnp.int64)
        return jnp.stack([real, state.plans * self.simulated_per_plan, state.refits])

    def value_updates_after(self, steps: int) -> int:
        """Value-network updates after `steps` real steps."""
        return self.value_core.updates_after(steps) if self.value_bootstrap else 0

    def plans_after(self, steps: int) -> int:
        """Plans made (one per real step from `learning_starts` on) after `steps` real steps."""
        return max(0, steps - self.learning_starts)
