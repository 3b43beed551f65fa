"""The `mpc` kind: model-predictive control on a learned dynamics model, by random shooting (Nagabandi et al.
2018) or the cross-entropy method with trajectory sampling over an ensemble (Chua et al. 2018), the model an
ensemble of probabilistic networks or a Gaussian process (Rasmussen & Williams 2006; for control as in Deisenroth &
Rasmussen 2011). Parameters and accounting here; the JAX side is `runner.neural.mpc`."""

from __future__ import annotations

from typing import Any, ClassVar

import numpy as np

from runner.agents.neural import NeuralAgent
from runner.params import PLANNING_BUDGET, Param
from runner.tags import AgentTags

__all__ = ["ModelPredictiveControl"]

_ACTIVATIONS = ("relu", "tanh", "swish", "elu")


class ModelPredictiveControl(NeuralAgent):
    """Receding-horizon planning on a model learned from real transitions, refitted every `model_every` steps."""

    kind = "mpc"
    summary = (
        "model-predictive control: every real step, plan `horizon` actions on a learned model (ensemble of "
        "probabilistic networks or Gaussian process) by random shooting or the cross-entropy method with trajectory "
        "sampling, take the first; the model refitted on the real transitions every `model_every` steps"
    )
    source = (
        "random shooting: Nagabandi et al. (2018); CEM with trajectory sampling over an ensemble: Chua et al. (2018); "
        "Gaussian process: Rasmussen & Williams (2006), Deisenroth & Rasmussen (2011)"
    )
    core = "runner.neural.mpc:MPCCore"
    tags = AgentTags(observations=("box",), actions=("discrete", "box"), learned_model="function", engine="jax")
    schema = (
        Param(
            "planner", "choice", "cem", "cem (cross-entropy method) or shooting (random)", choices=("cem", "shooting")
        ),
        Param("horizon", "int", 15, "model steps each plan looks ahead", low=1, high=1000, role=PLANNING_BUDGET),
        Param(
            "candidates", "int", 200, "action sequences per sampling round", low=1, high=100_000, role=PLANNING_BUDGET
        ),
        Param(
            "iterations", "int", 5, "CEM rounds per plan (random shooting: one)", low=1, high=100, role=PLANNING_BUDGET
        ),
        Param("elites", "int", 20, "best sequences a CEM round refits to (at most `candidates`)", low=1),
        Param("smoothing", "float", 0.1, "weight a CEM round keeps on the old distribution", low=0.0, high=1.0),
        Param(
            "particles",
            "int",
            4,
            "sampled model rollouts per candidate (0: one rollout of the predictive mean)",
            low=0,
            high=1000,
        ),
        Param("gamma", "float", 0.99, "discount factor of planned returns", low=0.0, high=1.0),
        Param(
            "termination",
            "choice",
            "learned",
            "episode ends in the model: a logistic network of the next observation, or none",
            choices=("learned", "none"),
        ),
        Param("value_bootstrap", "bool", False, "add a TD(0)-trained state value at the horizon"),
        Param("model", "choice", "ensemble", "the learned dynamics model", choices=("ensemble", "gp")),
        Param("members", "int", 5, "networks in the ensemble", low=1, high=100),
        Param("hidden_layers", "int", 2, "hidden layers of every network", low=1, high=8),
        Param("hidden_units", "int", 64, "units in each hidden layer", low=1, high=4096),
        Param("activation", "choice", "swish", "activation of the hidden layers", choices=_ACTIVATIONS),
        Param("model_epochs", "int", 5, "passes over the buffer per refit (ensemble and termination network)", low=0),
        Param("model_batch_size", "int", 64, "transitions per minibatch of the networks' training", low=1),
        Param("model_learning_rate", "float", 1e-3, "Adam's step size for every network", low=0.0, low_open=True),
        Param("gp_points", "int", 200, "most real transitions a Gaussian-process fit uses", low=1, high=5000),
        Param(
            "gp_selection",
            "choice",
            "recent",
            "how the Gaussian process picks its points past gp_points: most recent, uniform, or spread out",
            choices=("recent", "uniform", "spread"),
        ),
        Param("gp_iterations", "int", 100, "Adam steps on the GP's log marginal likelihood per refit", low=0),
        Param("buffer_size", "int", 20_000, "real transitions kept (oldest dropped first)", low=1, high=10**7),
        Param("learning_starts", "int", 200, "real steps of uniformly random actions before the first fit", low=1),
        Param("model_every", "int", 250, "real steps between refits of the model", low=1),
    )

    check_params: ClassVar[dict[str, Any]] = {
        "horizon": 6,
        "candidates": 32,
        "iterations": 2,
        "elites": 4,
        "particles": 0,
        "gamma": 0.9,
        "members": 2,
        "hidden_layers": 1,
        "hidden_units": 16,
        "model_epochs": 20,
        "model_learning_rate": 3e-3,
        "buffer_size": 512,
        "learning_starts": 100,
        "model_every": 500,
    }

    def observe(
        self, observation: Any, action: Any, reward: float, next_observation: Any, terminated: bool, truncated: bool
    ) -> None:
        """Store one real step; refit the model when it is due."""
        import jax

        super().observe(observation, action, reward, next_observation, terminated, truncated)
        if self.core_.refit_due(int(self.state_.steps)):
            with jax.enable_x64(True):
                self.state_ = self.core_.refit(self.state_)
                self.counters_[:] = np.asarray(self.core_.counters(self.state_))

    def predict(self, observation: Any, action: Any) -> tuple[np.ndarray, float]:
        """The model's mean next observation and reward (the held-out contract, `runner.models.held_out`)."""
        import jax

        with jax.enable_x64(True):
            nxt, reward = self.core_.predict_mean(self.state_.model, np.asarray(observation, np.float64), action)
            return np.asarray(nxt, dtype=np.float64), float(reward)

    def has_function_model(self) -> bool:
        """Model-predictive control always learns its model, so the trial measures it on held-out transitions."""
        return True

    def model_honesty(self, held: Any) -> Any:
        """The fitted model's held-out errors beside its predicted spread and coverage
        (`runner.neural.model_error.held_out_honesty`, 20 sampled rollouts from the greedy plans' key); None before
        the first fit."""
        import jax

        from runner.neural.model_error import held_out_honesty

        if int(self.state_.refits) == 0:
            return None
        with jax.enable_x64(True):
            return held_out_honesty(self.core_.dynamics, self.state_.model, held, self.state_.greedy_key)

    def counter_problems(self, real_steps: int) -> list[str]:
        """Planning updates are the simulated steps of one plan per real step from `learning_starts` on, model
        updates one refit at `learning_starts` and every `model_every` steps after, real updates the value
        network's minibatch updates."""
        problems = super().counter_problems(real_steps)
        counts, core = self.counters(), self.core_
        expected = {
            "real_updates": core.value_updates_after(real_steps),
            "planning_updates": core.plans_after(real_steps) * core.simulated_per_plan,
            "model_updates": len(core.refit_steps(real_steps)),
        }
        for name, value in expected.items():
            if counts[name] != value:
                problems.append(f"{name} {counts[name]} != {value} expected after {real_steps} steps")
        return problems
