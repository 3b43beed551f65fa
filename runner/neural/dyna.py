"""Dyna with a learned neural model (Sutton 1990's Dyna with function approximation; short model rollouts from
replayed real states as in Janner, Fu, Zhang & Levine 2019), as pure JAX functions over an explicit state pytree.

The value side is the replay-based Q-network of `runner.neural.q_network`, unchanged: `NeuralDynaCore` holds a
`QNetworkCore` and its state a `QState`, and acting, storing a real transition and the real minibatch updates are
that core's own calls. On top of it:

- the model: an ensemble of probabilistic MLPs (`runner.neural.ensemble`, PETS) from (state, one-hot action) to a
  Gaussian over (change of state, reward), trained on the real transitions of the replay buffer. Every
  `model_every` real steps from `learning_starts` on, a training round of `model_steps` Adam steps, each member on
  its own `model_batch_size` transitions drawn uniformly with replacement from the buffer (the online stand-in for
  each member's bootstrap); the scalers of inputs and targets are the mean and standard deviation of the whole
  buffer, recomputed at the start of every round;
- or, with `model: gp`, the Gaussian process of `runner.neural.gp` (one GP per output, float64): every round
  refitted on the `gp_points` most recent transitions of the buffer (its `selection: recent`), `model_steps` Adam
  steps of the log marginal likelihood at the GP's own step size from the previous round's hyperparameters;
- the termination predictor: a logistic classifier (an MLP of one hidden layer of `model_units` with one
  output logit) of the next state, trained in the same Adam steps on the same draws by the binary cross-entropy
  against the real `terminated` flags (truncations are not terminations). In a rollout each simulated step ends
  the episode with the predicted probability (a Bernoulli draw); its later steps are masked out of the loss. This
  is a learned predictor: the environment's own termination test is never used;
- planning: once the model has had a round, every real step that makes real updates also makes `planning_steps`
  planning updates. Each is one Q-network minibatch gradient step (the same Huber loss, Adam state and target
  network as the real updates) on `batch_size` simulated transitions made fresh for it: ceil(batch_size /
  rollout_length) rollouts of `rollout_length` steps, each starting at a real state drawn uniformly from the buffer,
  actions epsilon-greedy under the online network (the behaviour policy's epsilon), each step sampled from a member
  drawn at random per row and step (trajectory sampling, PETS; the GP: from its predictive Gaussian), the first
  `batch_size` transitions in step order. Planning moves the online network only: the target network keeps the
  schedule of the real updates.

On box actions the value side is soft actor-critic (`runner.neural.soft_actor_critic`) instead, the arrangement
of MBPO (Janner et al. 2019): `q` is a `SoftActorCriticCore` and the state's `q` its `SACState`, so acting,
storing and the real updates are soft actor-critic's own calls and `planning_steps: 0` is that kind bit for bit.
The model takes the action in the environment's units (the buffer's squashed action moved back into the box), so
its held-out errors are measured on the environment's actions; rollouts draw each action from the current policy
(a reparameterised draw, squashed); each planning update is one `SoftActorCriticCore.gradient_step` (critics,
policy, temperature, and the targets by Polyak averaging) on `batch_size` fresh simulated transitions, the squashed
actions stored as the real ones are and rows after a simulated end weighted 0 in every loss. With `polyak_rate` 0
the targets' periodic copies count real updates only, as the discrete Q-network's target does.

Why extra updates on fresh simulated minibatches rather than a model buffer mixed into the real minibatches: the
real updates stay exactly the Q-network's, so the planning budget is a separate, countable number of gradient
steps on the same unit as `replays` (one planning update is one minibatch gradient step, as one real update is),
and `planning_steps: 0` is the Q-network itself, bit for bit (no model is trained then: it would never be used).

Counters: real updates are the Q-network's; planning updates the simulated minibatch steps; model updates the Adam
steps of the model (ensemble or GP and termination predictor together count one per step). Networks, the ensemble
and the buffer are float32; the GP is float64.
"""

from __future__ import annotations

import functools
from dataclasses import dataclass, fields
from typing import Any, NamedTuple

import jax
import jax.numpy as jnp
import optax

from runner.models.held_out import HeldOut
from runner.neural.ensemble import EnsembleModel, EnsembleParams, ensemble_loss, fresh_members
from runner.neural.gp import GaussianProcessModel, GPHyper, GPParams, GPPosterior, fit_hyper, posterior
from runner.neural.mlp import MLPParams, apply_mlp, init_mlp
from runner.neural.model import ActionEncoding, Prediction, Scaler
from runner.neural.model_error import ModelHonesty, held_out_honesty
from runner.neural.q_network import QNetworkCore, QState
from runner.neural.replay import ReplayBuffer
from runner.neural.soft_actor_critic import SACState, SoftActorCriticCore

__all__ = ["HONESTY_KEY", "DynaState", "NeuralDynaCore"]

HONESTY_KEY = 0
"""Seed of the key of the particle rollouts that measure the model's k-step spread and coverage."""


class DynaState(NamedTuple):
    """The value learner's state (a Q-network's, or soft actor-critic's on box actions), the fitted model (the
    ensemble's or the GP's params) and termination predictor, their optimiser states, the counts of model rounds
    and planning updates, and the key of the model's draws."""

    q: QState | SACState
    model: EnsembleParams | GPParams
    model_opt: Any
    done_net: MLPParams
    done_opt: Any
    rounds: jax.Array
    planned: jax.Array
    key: jax.Array

    @property
    def online(self) -> MLPParams:
        """The online Q-network, or the policy network on box actions (what greedy evaluation reads)."""
        return self.q.online


_Q_FIELDS = tuple(f.name for f in fields(QNetworkCore))
_SAC_FIELDS = tuple(f.name for f in fields(SoftActorCriticCore))


@dataclass(frozen=True)
class NeuralDynaCore:
    """The static hyperparameters of neural Dyna: the value learner's (a Q-network, or soft actor-critic on box
    actions) and the model's and planning's (module docstring)."""

    q: QNetworkCore | SoftActorCriticCore
    planning_steps: int = 1
    rollout_length: int = 1
    ensemble_size: int = 5
    model_layers: int = 2
    model_units: int = 64
    model_activation: str = "swish"
    model_step_size: float = 1e-3
    model_batch_size: int = 64
    model_every: int = 250
    model_steps: int = 50
    model: str = "ensemble"
    gp_points: int = 200

    @classmethod
    def from_params(
        cls,
        params: dict[str, Any],
        obs_size: int,
        n_actions: int,
        bounds: tuple[tuple[float, ...], tuple[float, ...]] | None = None,
    ) -> NeuralDynaCore:
        """The core of a `neural_dyna` agent's checked parameters (`runner.agents.neural_dyna`): a Q-network on
        `n_actions` discrete actions, or with `bounds` (low, high) soft actor-critic on a box of `n_actions`
        dimensions. Each learner takes the parameters it has; the agent has refused values the other one's only."""
        rest = {k: v for k, v in params.items() if k not in _Q_FIELDS and k not in _SAC_FIELDS}
        if bounds is None:
            q_params = {k: v for k, v in params.items() if k in _Q_FIELDS}
            return cls(q=QNetworkCore(obs_size=int(obs_size), n_actions=int(n_actions), **q_params), **rest)
        sac_params = {k: v for k, v in params.items() if k in _SAC_FIELDS}
        return cls(q=SoftActorCriticCore.from_params(sac_params, obs_size, n_actions, bounds), **rest)

    @property
    def box(self) -> bool:
        """Whether the actions are a box (the learner is soft actor-critic)."""
        return isinstance(self.q, SoftActorCriticCore)

    @property
    def encoding(self) -> ActionEncoding:
        """How the model takes actions: one-hot discrete actions, or the box's values in the environment's units."""
        return ActionEncoding(box_dim=self.q.action_size) if self.box else ActionEncoding(n_actions=self.q.n_actions)

    @property
    def ensemble(self) -> EnsembleModel:
        """The model's hyperparameters as the PETS ensemble of `runner.neural.ensemble` (for predict and sample)."""
        return EnsembleModel(
            self.encoding,
            members=self.ensemble_size,
            hidden=(self.model_units,) * self.model_layers,
            activation=self.model_activation,
            batch_size=self.model_batch_size,
            learning_rate=self.model_step_size,
        )

    @property
    def gp(self) -> GaussianProcessModel:
        """The model's hyperparameters as the Gaussian process of `runner.neural.gp` (`model: gp`): its
        marginal likelihood's Adam steps are `model_steps` per round, at the GP's own step size."""
        return GaussianProcessModel(self.encoding, max_points=self.gp_points, iterations=self.model_steps)

    @property
    def dynamics(self) -> EnsembleModel | GaussianProcessModel:
        """The model this setting learns (`model: ensemble` or `gp`)."""
        return self.gp if self.model == "gp" else self.ensemble

    @property
    def learns_model(self) -> bool:
        """Whether a model is trained at all (not with `planning_steps` 0: it would never be used)."""
        return self.planning_steps > 0

    def init(self, key: jax.Array) -> DynaState:
        """A fresh agent: the learner's state from `key` exactly as its own `init` makes it; the model's from a key
        folded off `key`, so the learner's draws are the same as without a model."""
        q = self.q.init(key)
        member_key, done_key, key = jax.random.split(jax.random.fold_in(key, 1), 3)
        d, width = self.q.obs_size, self.q.obs_size + self.encoding.width
        done_net = init_mlp(done_key, (d, self.model_units, 1), jnp.float32)
        zero = jnp.zeros((), jnp.int32)
        if self.model == "gp":
            model, model_opt = _unfitted_gp(member_key, width, d + 1, self.gp_points), ()
        else:
            members = _float32(fresh_members(member_key, self.ensemble_size, self.model_sizes(width, d + 1)))
            scalers = (
                Scaler(jnp.zeros(width, jnp.float32), jnp.ones(width, jnp.float32)),
                Scaler(jnp.zeros(d + 1, jnp.float32), jnp.ones(d + 1, jnp.float32)),
            )
            model, model_opt = EnsembleParams(*scalers, members), self._model_optimizer.init(members)
        return DynaState(
            q,
            model,
            model_opt,
            done_net,
            self._model_optimizer.init(done_net),
            zero,
            zero,
            key,
        )

    def model_sizes(self, inputs: int, outputs: int) -> tuple[int, ...]:
        """Layer sizes of one member: inputs, hidden layers, a mean and a raw log-variance per target."""
        return (inputs, *([self.model_units] * self.model_layers), 2 * outputs)

    @property
    def _model_optimizer(self) -> optax.GradientTransformation:
        return optax.adam(self.model_step_size)

    @functools.partial(jax.jit, static_argnums=0)
    def act(self, state: DynaState, obs: jax.Array) -> tuple[DynaState, jax.Array]:
        """The learner's behaviour action (the Q-network's epsilon-greedy one, or soft actor-critic's draw)."""
        q, action = self.q.act(state.q, obs)
        return state._replace(q=q), action

    @functools.partial(jax.jit, static_argnums=0)
    def greedy(self, online: MLPParams, obs: jax.Array) -> jax.Array:
        """The learner's greedy actions."""
        return self.q.greedy(online, obs)

    @functools.partial(jax.jit, static_argnums=0)
    def observe(
        self,
        state: DynaState,
        obs: jax.Array,
        action: jax.Array,
        reward: jax.Array,
        next_obs: jax.Array,
        terminated: jax.Array,
    ) -> DynaState:
        """Store one real transition and make the learner's due updates; then the model's training round and
        the planning updates when due."""
        state = state._replace(q=self.q.observe(state.q, obs, action, reward, next_obs, terminated))
        if not self.learns_model:
            return state
        steps = state.q.steps
        model_due = (steps >= self.q.learning_starts) & (steps % self.model_every == 0)
        state = jax.lax.cond(model_due, self._train_model, lambda s: s, state)
        plan_due = (steps >= self.q.learning_starts) & (steps % self.q.update_every == 0) & (state.rounds > 0)
        return jax.lax.cond(plan_due, self._plan, lambda s: s, state)

    def observe_one(
        self,
        state: DynaState,
        obs: jax.Array,
        action: jax.Array,
        reward: jax.Array,
        next_obs: jax.Array,
        terminated: jax.Array,
    ) -> DynaState:
        """`observe` for the step-by-step path: the same schedule decided in Python, so the model's training and
        planning compile only when first due (a short run before `learning_starts` never compiles them)."""
        state = state._replace(q=self.q.observe(state.q, obs, action, reward, next_obs, terminated))
        steps = int(state.q.steps)
        if not self.learns_model or steps < self.q.learning_starts:
            return state
        if steps % self.model_every == 0:
            state = self.train_model(state)
        if steps % self.q.update_every == 0 and int(state.rounds) > 0:
            state = self.plan(state)
        return state

    @functools.partial(jax.jit, static_argnums=0)
    def train_model(self, state: DynaState) -> DynaState:
        """One model training round (compiled on its own, for `observe_one`)."""
        return self._train_model(state)

    @functools.partial(jax.jit, static_argnums=0)
    def plan(self, state: DynaState) -> DynaState:
        """One round of `planning_steps` planning updates (compiled on its own, for `observe_one`)."""
        return self._plan(state)

    def _train_model(self, state: DynaState) -> DynaState:
        """One training round: scalers from the whole buffer, then `model_steps` Adam steps of the model (the
        ensemble on minibatches; the GP's marginal likelihood on the `gp_points` most recent transitions) and of
        the termination predictor."""
        buf = state.q.buffer
        inputs, targets = self._inputs(buf.obs, buf.actions), self._targets(buf)
        valid = (jnp.arange(buf.obs.shape[0]) < buf.size)[:, None]
        in_scaler, out_scaler = _masked_scaler(inputs, valid), _masked_scaler(targets, valid)
        x, y = (inputs - in_scaler.mean) / in_scaler.scale, (targets - out_scaler.mean) / out_scaler.scale
        next_x = (buf.next_obs - in_scaler.mean[: self.q.obs_size]) / in_scaler.scale[: self.q.obs_size]
        key, model_key, done_key = jax.random.split(state.key, 3)
        if self.model == "gp":
            model, model_opt = self._fit_gp(state.model, x, y, buf, in_scaler, out_scaler), state.model_opt
        else:
            model, model_opt = self._fit_ensemble(state, x, y, buf.size, model_key)
            model = model._replace(inputs=in_scaler, targets=out_scaler)
        activation = self.model_activation

        def step(_: int, carry: tuple) -> tuple:
            done_net, done_opt, key = carry
            key, draw = jax.random.split(key)
            idx = jax.random.randint(draw, (self.model_batch_size,), 0, jnp.maximum(buf.size, 1))
            grads = jax.grad(_done_loss)(done_net, next_x[idx], buf.terminated[idx], activation)
            changes, done_opt = self._model_optimizer.update(grads, done_opt, done_net)
            return optax.apply_updates(done_net, changes), done_opt, key

        done_net, done_opt, _ = jax.lax.fori_loop(0, self.model_steps, step, (state.done_net, state.done_opt, done_key))
        return state._replace(
            model=model,
            model_opt=model_opt,
            done_net=done_net,
            done_opt=done_opt,
            rounds=state.rounds + 1,
            key=key,
        )

    def _fit_ensemble(
        self, state: DynaState, x: jax.Array, y: jax.Array, size: jax.Array, key: jax.Array
    ) -> tuple[EnsembleParams, Any]:
        """`model_steps` Adam steps of every member, each on its own uniform draw of `model_batch_size` rows."""
        ones = jnp.ones(self.model_batch_size, jnp.float32)

        def step(_: int, carry: tuple) -> tuple:
            members, opt, key = carry
            key, draw = jax.random.split(key)
            idx = jax.random.randint(draw, (self.ensemble_size, self.model_batch_size), 0, jnp.maximum(size, 1))
            grads = jax.grad(ensemble_loss)(members, x[idx], y[idx], ones, jnp.float32(0.01), self.model_activation)
            changes, opt = self._model_optimizer.update(grads, opt, members)
            return optax.apply_updates(members, changes), opt, key

        members, opt, _ = jax.lax.fori_loop(0, self.model_steps, step, (state.model.members, state.model_opt, key))
        return state.model._replace(members=members), opt

    def _fit_gp(
        self, previous: GPParams, x: jax.Array, y: jax.Array, buf: ReplayBuffer, in_scaler: Scaler, out_scaler: Scaler
    ) -> GPParams:
        """The GP refitted (float64, from the previous round's hyperparameters) on the `gp_points` most recent
        transitions of the ring buffer (`selection: recent` of `runner.neural.gp`)."""
        m, capacity = self.gp_points, buf.obs.shape[0]
        rows = (buf.slot - 1 - jnp.arange(m)) % capacity
        mask = jnp.arange(m) < buf.size
        gp = self.gp
        x = jnp.where(mask[:, None], x[rows], 0.0).astype(jnp.float64)
        y = jnp.where(mask[:, None], y[rows], 0.0).astype(jnp.float64)
        fit = jax.vmap(fit_hyper, in_axes=(None, 1, None, 0, None, None, None))
        hyper = fit(x, y, mask, previous.hyper, gp.iterations, gp.learning_rate, gp.min_noise_var)
        post = jax.vmap(posterior, in_axes=(0, None, 1, None))(hyper, x, y, mask)
        scalers = (Scaler(*(a.astype(jnp.float64) for a in sc)) for sc in (in_scaler, out_scaler))
        return GPParams(*scalers, hyper, post)

    def _inputs(self, obs: jax.Array, actions: jax.Array) -> jax.Array:
        """The model's unstandardised inputs of buffer rows: the observation beside the one-hot action, or the
        stored squashed action moved back into the box."""
        if self.box:
            return jnp.concatenate([obs, self.q.to_box(actions)], axis=-1)
        return jnp.concatenate([obs, jax.nn.one_hot(actions, self.q.n_actions, dtype=jnp.float32)], axis=-1)

    def _targets(self, buf: ReplayBuffer) -> jax.Array:
        return jnp.concatenate([buf.next_obs - buf.obs, buf.rewards[:, None]], axis=-1)

    @functools.partial(jax.jit, static_argnums=0)
    def predict(self, state: DynaState, states: jax.Array, actions: jax.Array) -> Prediction:
        """The model's predictive mean and variance of the next state and reward for a batch."""
        return self.dynamics.predict(state.model, states, actions)

    def fitted(self, state: DynaState) -> tuple[EnsembleModel | GaussianProcessModel, Any]:
        """The model and its fitted params (the `runner.neural.model` interface)."""
        return self.dynamics, state.model

    def honesty(self, state: DynaState, held: HeldOut) -> ModelHonesty:
        """The model's held-out errors, predicted spread and coverage (`runner.neural.model_error`). The particle
        draws of the k-step spread use one fixed key, so from one evaluation point to the next only the model
        changes (the errors themselves use the mean and draw nothing)."""
        return held_out_honesty(*self.fitted(state), held, jax.random.key(HONESTY_KEY))

    def done_probability(self, state: DynaState, next_obs: jax.Array) -> jax.Array:
        """The termination predictor's probability that a transition into `next_obs` (b, obs_size) ends the
        episode."""
        scaler = state.model.inputs
        d = self.q.obs_size
        x = ((next_obs - scaler.mean[:d]) / scaler.scale[:d]).astype(jnp.float32)
        return jax.nn.sigmoid(apply_mlp(state.done_net, x, self.model_activation)[..., 0])

    def _rollout_actions(
        self, q: QState | SACState, obs: jax.Array, explore_key: jax.Array, action_key: jax.Array
    ) -> tuple[jax.Array, jax.Array]:
        """(the actions the simulated rows store, the same actions as the model takes them) for a batch of
        observations: epsilon-greedy under the online Q-network, or the current policy's squashed draw moved into
        the box."""
        runs = obs.shape[0]
        if self.box:
            squashed, _ = self.q.sample(q.online, obs, action_key)
            return squashed, self.q.to_box(squashed)
        greedy = self.q.greedy(q.online, obs)
        random_actions = jax.random.randint(action_key, (runs,), 0, self.q.n_actions, jnp.int32)
        actions = jnp.where(jax.random.uniform(explore_key, (runs,)) < self.q.epsilon(q.steps), random_actions, greedy)
        return actions, actions

    def simulate(self, state: DynaState, key: jax.Array) -> tuple[jax.Array, ...]:
        """`batch_size` simulated transitions (obs, actions, rewards, next_obs, terminated, weight) from
        rollouts of the model from replayed real states (module docstring); `weight` 0 after a simulated end."""
        q, h = state.q, self.rollout_length
        runs = -(-self.q.batch_size // h)
        start_key, key = jax.random.split(key)
        starts = q.buffer.obs[jax.random.randint(start_key, (runs,), 0, jnp.maximum(q.buffer.size, 1))]

        def step(carry: tuple, step_key: jax.Array) -> tuple:
            obs, alive = carry
            explore_key, action_key, member_key, draw_key, end_key = jax.random.split(step_key, 5)
            actions, model_actions = self._rollout_actions(q, obs, explore_key, action_key)
            if self.model == "gp":
                next_obs, rewards = self.gp.sample(state.model, draw_key, obs, model_actions)
            else:
                members = jax.random.randint(member_key, (runs,), 0, self.ensemble_size)
                next_obs, rewards = self.ensemble.sample_members(state.model, draw_key, obs, model_actions, members)
            next_obs, rewards = next_obs.astype(jnp.float32), rewards.astype(jnp.float32)
            ended = jax.random.uniform(end_key, (runs,)) < self.done_probability(state, next_obs)
            out = (obs, actions, rewards, next_obs, ended, alive.astype(jnp.float32))
            return (next_obs, alive & ~ended), out

        initial = (starts, jnp.ones(runs, jnp.bool_))
        _, out = jax.lax.scan(step, initial, jax.random.split(key, h))
        return tuple(a.reshape(h * runs, *a.shape[2:])[: self.q.batch_size] for a in out)

    def _plan(self, state: DynaState) -> DynaState:
        return jax.lax.fori_loop(0, self.planning_steps, lambda _, s: self._planning_update(s), state)

    def _planning_loss(self, online: MLPParams, target: MLPParams, batch: tuple[jax.Array, ...]) -> jax.Array:
        """The Q-network's Huber loss on simulated transitions, weighted (steps after a simulated end weigh 0)."""
        obs, actions, rewards, next_obs, terminated, weight = batch
        q = jnp.take_along_axis(self.q.q_values(online, obs), actions[:, None], axis=1)[:, 0]
        next_target = self.q.q_values(target, next_obs)
        if self.q.double_q:
            chosen = jnp.argmax(self.q.q_values(online, next_obs), axis=1)
            next_value = jnp.take_along_axis(next_target, chosen[:, None], axis=1)[:, 0]
        else:
            next_value = next_target.max(axis=1)
        goal = rewards + jnp.float32(self.q.gamma) * jnp.where(terminated, 0.0, next_value)
        losses = optax.huber_loss(q, jax.lax.stop_gradient(goal), delta=1.0)
        return jnp.sum(losses * weight) / jnp.maximum(jnp.sum(weight), 1.0)

    def _planning_update(self, state: DynaState) -> DynaState:
        """One Q-network minibatch step on fresh simulated transitions, with the real updates' optimiser state;
        the target network keeps the schedule of the real updates (planning moves only the online network). On
        box actions, one soft actor-critic update on them (module docstring)."""
        key, draw = jax.random.split(state.key)
        q = state.q
        if self.box:
            batch_key, critic_key, policy_key = jax.random.split(draw, 3)
            *batch, weight = self.simulate(state, batch_key)
            q = self.q.gradient_step(q, tuple(batch), critic_key, policy_key, weight=weight)
            return state._replace(q=q, planned=state.planned + 1, key=key)
        grads = jax.grad(self._planning_loss)(q.online, q.target, self.simulate(state, draw))
        changes, opt = self.q.optimizer.update(grads, q.opt, q.online)
        q = q._replace(online=optax.apply_updates(q.online, changes), opt=opt)
        return state._replace(q=q, planned=state.planned + 1, key=key)

    def counters(self, state: DynaState) -> jax.Array:
        """(real updates, planning updates, model updates) so far, in `runner.agents.COUNTER_NAMES` order."""
        return jnp.stack([state.q.updates, state.planned, state.rounds * self.model_steps])

    def model_rounds_after(self, steps: int) -> int:
        """Model training rounds made after `steps` real steps."""
        if not self.learns_model or steps < self.q.learning_starts:
            return 0
        return steps // self.model_every - (self.q.learning_starts - 1) // self.model_every

    def planning_updates_after(self, steps: int) -> int:
        """Planning updates made after `steps` real steps: `planning_steps` at every real-update step from the
        first model round on."""
        if self.model_rounds_after(steps) == 0:
            return 0
        first = -(-self.q.learning_starts // self.model_every) * self.model_every
        every = self.q.update_every
        return self.planning_steps * (steps // every - (first - 1) // every)


def _float32(tree: Any) -> Any:
    return jax.tree_util.tree_map(lambda a: a.astype(jnp.float32), tree)


def _unfitted_gp(key: jax.Array, inputs: int, outputs: int, points: int) -> GPParams:
    """A GP before its first fit (float64): length scales drawn log-uniformly in [e^-0.5, e^0.5] as
    `GaussianProcessModel.fit` starts them, signal variance 1, noise variance 0.1, no training points."""
    f64 = jnp.float64
    hyper = GPHyper(
        jnp.exp(jax.random.uniform(key, (outputs, inputs), f64, -0.5, 0.5)),
        jnp.ones(outputs, f64),
        jnp.full(outputs, 0.1, f64),
    )
    post = GPPosterior(
        jnp.zeros((outputs, points, inputs), f64),
        jnp.zeros((outputs, points), jnp.bool_),
        jnp.zeros((outputs, points), f64),
        jnp.broadcast_to(jnp.eye(points, dtype=f64), (outputs, points, points)),
    )
    scalers = (Scaler(jnp.zeros(n, f64), jnp.ones(n, f64)) for n in (inputs, outputs))
    return GPParams(*scalers, hyper, post)


def _masked_scaler(columns: jax.Array, valid: jax.Array) -> Scaler:
    """Mean and standard deviation of the valid rows per column (scale 1 where a column never varies)."""
    count = jnp.maximum(jnp.sum(valid), 1)
    mean = jnp.sum(jnp.where(valid, columns, 0.0), axis=0) / count
    spread = jnp.sqrt(jnp.sum(jnp.where(valid, (columns - mean) ** 2, 0.0), axis=0) / count)
    return Scaler(mean, jnp.where(spread > 1e-6, spread, 1.0).astype(jnp.float32))


def _done_loss(net: MLPParams, next_x: jax.Array, terminated: jax.Array, activation: str) -> jax.Array:
    """Mean binary cross-entropy of the termination predictor's logits against the real flags."""
    logits = apply_mlp(net, next_x, activation)[..., 0]
    return optax.sigmoid_binary_cross_entropy(logits, terminated.astype(jnp.float32)).mean()
