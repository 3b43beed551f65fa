"""The `neural_dyna` kind: Dyna with a learned model (an ensemble of probabilistic MLPs, Chua et al. 2018, or a
Gaussian process) planning by short rollouts from replayed real states (Janner et al. 2019) into the minibatch
updates of the replay-based Q-network. Parameters and accounting here; the JAX side is `runner.neural.dyna`."""

from __future__ import annotations

import dataclasses
from typing import TYPE_CHECKING, Any, ClassVar

import numpy as np

from runner.agents.neural import NeuralAgent
from runner.agents.q_network import QNetwork
from runner.params import PLANNING_BUDGET, Param
from runner.tags import AgentTags

if TYPE_CHECKING:
    from runner.models.held_out import HeldOut
    from runner.neural.model_error import ModelHonesty

__all__ = ["NeuralDyna"]

_MODEL_ACTIVATIONS = ("swish", "relu", "tanh", "elu")


def _q_params() -> tuple[Param, ...]:
    """The Q-network's parameters; `replays` keeps its meaning but not the budget role (planning has it here)."""
    meaning = "minibatch updates on real transitions per round (real updates; planning_steps is the budget here)"
    return tuple(
        dataclasses.replace(p, role="", meaning=meaning) if p.name == "replays" else p for p in QNetwork.schema
    )


class NeuralDyna(NeuralAgent):
    """Dyna-style Q-network: real minibatch updates as `q_network`, plus planning updates on transitions simulated
    by a learned model (ensemble or GP) with a learned termination predictor."""

    kind = "neural_dyna"
    summary = (
        "Dyna with a learned neural model: the replay-based Q-network, plus planning_steps minibatch updates per "
        "real update step on transitions simulated by short rollouts (rollout_length) of an ensemble of "
        "probabilistic MLPs from replayed real states, ended by a learned termination predictor"
    )
    source = (
        "Sutton (1990); model rollouts from replayed real states: Janner, Fu, Zhang & Levine (2019); ensemble: "
        "Chua, Calandra, McAllister & Levine (2018); Q-network: Mnih et al. (2015)"
    )
    core = "runner.neural.dyna:NeuralDynaCore"
    tags = AgentTags(observations=("box",), learned_model="function", engine="jax")
    schema = (
        *_q_params(),
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

    def has_function_model(self) -> bool:
        """Whether a model is learned (and measured on held-out transitions): not with `planning_steps` 0."""
        return self._params["planning_steps"] > 0

    def predict(self, observation: np.ndarray, action: int) -> tuple[np.ndarray, float]:
        """The ensemble's mean next observation and reward (the model-error contract of `runner.models.held_out`)."""
        import jax

        with jax.enable_x64(True):
            obs = np.asarray(observation, dtype=np.float32)[None]
            pred = self.core_.predict(self.state_, obs, np.asarray([int(action)], dtype=np.int32))
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
