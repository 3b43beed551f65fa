"""The `neural_dyna` kind: Dyna with a learned model (an ensemble of probabilistic MLPs, Chua et al. 2018, or a
Gaussian process) planning by short rollouts from replayed real states (Janner et al. 2019) into the minibatch
updates of the replay-based Q-network, or on box actions of soft actor-critic (the MBPO arrangement, Janner et al.
2019). Parameters and accounting here; the JAX side is `runner.neural.dyna`.

The schema is both learners' parameters beside the model's: the ones they share mean the same on both (on box
actions `polyak_rate` 0 and `target_period` give the critics' targets periodic copies, as the Q-network's); the
Q-network's exploration (`epsilon_*`) and `double_q` belong to discrete actions and the temperature to box
actions, and a value other than the default for the other kind of actions is refused in one line (at `check` and
at setup), since it would be silently unused."""

from __future__ import annotations

import dataclasses
from typing import TYPE_CHECKING, Any, ClassVar

import gymnasium as gym
import numpy as np

from runner.agents.neural import NeuralAgent
from runner.agents.q_network import QNetwork
from runner.agents.soft_actor_critic import SoftActorCritic
from runner.params import PLANNING_BUDGET, Param
from runner.tags import AgentTags

if TYPE_CHECKING:
    from runner.models.held_out import HeldOut
    from runner.neural.model_error import ModelHonesty

__all__ = ["NeuralDyna"]

_MODEL_ACTIVATIONS = ("swish", "relu", "tanh", "elu")

DISCRETE_ONLY = ("epsilon_start", "epsilon_end", "epsilon_steps", "double_q")
"""Parameters only the Q-network (discrete actions) reads."""
BOX_ONLY = ("learn_temperature", "temperature")
"""Parameters only soft actor-critic (box actions) reads."""

_MEANINGS = {
    "replays": "minibatch updates on real transitions per round (real updates; planning_steps is the budget here)",
    "learning_starts": "real steps stored before the first update (box actions: taken uniformly in the box)",
    "target_period": "updates between copies of the online network (box actions: the critics) to the target",
    "polyak_rate": "0: periodic target copies; in (0, 1]: target <- rate online + (1 - rate) target after every "
    "update, planning updates included on box actions (target_period then unused; soft_actor_critic uses 0.005)",
    "learning_rate": "Adam's step size (box actions: policy, critics and temperature)",
}


def _learner_params() -> tuple[Param, ...]:
    """The Q-network's parameters, then soft actor-critic's own: `replays` keeps its meaning but not the budget
    role (planning has it here); the ones a learner alone reads say so."""
    out = []
    for p in QNetwork.schema:
        p = dataclasses.replace(p, role="") if p.name == "replays" else p
        if p.name in _MEANINGS:
            p = dataclasses.replace(p, meaning=_MEANINGS[p.name])
        elif p.name in DISCRETE_ONLY:
            p = dataclasses.replace(p, meaning=f"{p.meaning} (discrete actions only)")
        out.append(p)
    sac = {p.name: p for p in SoftActorCritic.schema}
    out += [dataclasses.replace(sac[name], meaning=f"{sac[name].meaning} (box actions only)") for name in BOX_ONLY]
    return tuple(out)


class NeuralDyna(NeuralAgent):
    """Dyna-style Q-network (soft actor-critic on box actions): real minibatch updates as `q_network` (or
    `soft_actor_critic`), plus planning updates on transitions simulated by a learned model (ensemble or GP) with
    a learned termination predictor."""

    kind = "neural_dyna"
    summary = (
        "Dyna with a learned neural model: the replay-based Q-network (box actions: soft actor-critic), plus "
        "planning_steps minibatch updates per real update step on transitions simulated by short rollouts "
        "(rollout_length) of an ensemble of probabilistic MLPs from replayed real states, ended by a learned "
        "termination predictor"
    )
    source = (
        "Sutton (1990); model rollouts from replayed real states, and soft actor-critic on them (MBPO): Janner, Fu, "
        "Zhang & Levine (2019); ensemble: Chua, Calandra, McAllister & Levine (2018); Q-network: Mnih et al. "
        "(2015); soft actor-critic: Haarnoja, Zhou, Abbeel & Levine (2018)"
    )
    core = "runner.neural.dyna:NeuralDynaCore"
    tags = AgentTags(observations=("box",), actions=("discrete", "box"), learned_model="function", engine="jax")
    schema = (
        *_learner_params(),
        Param(
            "planning_steps",
            "int",
            1,
            "planning updates per round of real updates, each a minibatch step on batch_size simulated transitions "
            "(0: the q_network kind exactly, no model trained)",
            low=0,
            high=10_000,
            role=PLANNING_BUDGET,
        ),
        Param("rollout_length", "int", 1, "model steps per rollout from a replayed real state (h)", low=1, high=100),
        Param("ensemble_size", "int", 5, "members of the model's ensemble", low=1, high=64),
        Param("model_layers", "int", 2, "hidden layers of each member", low=1, high=8),
        Param("model_units", "int", 64, "units in each hidden layer of the model", low=1, high=4096),
        Param(
            "model_activation", "choice", "swish", "activation of the model's hidden layers", choices=_MODEL_ACTIVATIONS
        ),
        Param("model_step_size", "float", 1e-3, "Adam's step size for the model", low=0.0, high=1.0, low_open=True),
        Param("model_batch_size", "int", 64, "real transitions per member per model step", low=1, high=65536),
        Param("model_every", "int", 250, "real steps between model training rounds (from learning_starts on)", low=1),
        Param("model_steps", "int", 50, "Adam steps of the model per training round", low=1, high=100_000),
        Param(
            "model",
            "choice",
            "ensemble",
            "the learned model: an ensemble of probabilistic MLPs, or a Gaussian process (runner.neural.gp) refitted "
            "each round on the gp_points most recent real transitions (model_steps marginal-likelihood steps)",
            choices=("ensemble", "gp"),
        ),
        Param(
            "gp_points",
            "int",
            200,
            "real transitions a Gaussian-process model is fitted on (model: gp)",
            low=1,
            high=4096,
        ),
    )

    check_params: ClassVar[dict[str, Any]] = {
        **QNetwork.check_params,
        "hidden_layers": 1,
        "hidden_units": 16,
        "ensemble_size": 2,
        "model_layers": 1,
        "model_units": 16,
        "model_every": 100,
        "model_steps": 10,
        "rollout_length": 2,
    }

    def action_params_problem(self, actions: str) -> str | None:
        """Why these parameters do not fit `actions` ("discrete" or "box") in one line: a value other than the
        default for a parameter that only the other learner reads; None when they fit."""
        unused = BOX_ONLY if actions == "discrete" else DISCRETE_ONLY
        learner = "the Q-network" if actions == "discrete" else "soft actor-critic"
        defaults = {p.name: p.default for p in self.schema}
        changed = [f"{name}: {self._params[name]!r}" for name in unused if self._params[name] != defaults[name]]
        if not changed:
            return None
        other = "box" if actions == "discrete" else "discrete"
        return (
            f"{self.kind} on {actions} actions learns with {learner}, which does not read {', '.join(changed)} "
            f"({other} actions only); leave {'it' if len(changed) == 1 else 'them'} out for this environment"
        )

    def _space_problem(self, observation_space: Any, action_space: Any) -> str | None:
        """The spaces' problem (`NeuralAgent`), or the parameters' for these actions."""
        problem = super()._space_problem(observation_space, action_space)
        if problem is not None:
            return problem
        return self.action_params_problem("box" if isinstance(action_space, gym.spaces.Box) else "discrete")

    def has_function_model(self) -> bool:
        """Whether a model is learned (and measured on held-out transitions): not with `planning_steps` 0."""
        return self._params["planning_steps"] > 0

    def predict(self, observation: np.ndarray, action: Any) -> tuple[np.ndarray, float]:
        """The ensemble's mean next observation and reward (the model-error contract of `runner.models.held_out`)."""
        import jax

        with jax.enable_x64(True):
            obs = np.asarray(observation, dtype=np.float32)[None]
            if self.box_actions_:
                actions = np.asarray(action, dtype=np.float32).reshape(1, -1)
            else:
                actions = np.asarray([int(action)], dtype=np.int32)
            pred = self.core_.predict(self.state_, obs, actions)
            return np.asarray(pred.next_state_mean[0], dtype=np.float64), float(pred.reward_mean[0])

    def model_honesty(self, held: HeldOut) -> ModelHonesty | None:
        """Held-out errors, predicted spread and coverage of the ensemble; None when no model is learned."""
        if not self.has_function_model():
            return None
        import jax

        with jax.enable_x64(True):
            return self.core_.honesty(self.state_, held)

    def counter_problems(self, real_steps: int) -> list[str]:
        """Real updates as the Q-network's; `planning_steps` planning updates at every real-update step from the
        first model round on; `model_steps` model updates per round, a round every `model_every` real steps from
        `learning_starts` on."""
        problems = super().counter_problems(real_steps)
        counts = self.counters()
        core = self.core_
        expected = {
            "real_updates": core.q.updates_after(real_steps),
            "planning_updates": core.planning_updates_after(real_steps),
            "model_updates": core.model_steps * core.model_rounds_after(real_steps),
        }
        for name, value in expected.items():
            if counts[name] != value:
                problems.append(f"{name} {counts[name]} != {value} expected after {real_steps} steps")
        return problems
