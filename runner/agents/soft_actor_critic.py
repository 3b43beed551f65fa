"""The `soft_actor_critic` kind for box actions (Haarnoja, Zhou, Abbeel & Levine 2018; the learned temperature of
Haarnoja et al. 2018, "Soft actor-critic algorithms and applications"). Parameters and accounting here; the JAX
side is `runner.neural.soft_actor_critic`."""

from __future__ import annotations

from typing import Any, ClassVar

from runner.agents.neural import NeuralAgent
from runner.params import PLANNING_BUDGET, Param
from runner.tags import AgentTags

__all__ = ["SoftActorCritic"]

_ACTIVATIONS = ("relu", "tanh", "swish", "elu")


class SoftActorCritic(NeuralAgent):
    """Soft actor-critic: a tanh-squashed Gaussian policy, twin Q critics with Polyak targets, an entropy
    temperature fixed or learned towards minus the action dimensions, Adam, a replay buffer."""

    kind = "soft_actor_critic"
    summary = (
        "soft actor-critic for box actions: a tanh-squashed Gaussian policy scaled to the box, twin Q critics with "
        "Polyak-averaged targets, an entropy temperature fixed or learned towards -(action dimensions), Adam over "
        "minibatches from a buffer of real transitions"
    )
    source = "Haarnoja, Zhou, Abbeel & Levine (2018); learned temperature: Haarnoja et al. (2018b)"
    core = "runner.neural.soft_actor_critic:SoftActorCriticCore"
    tags = AgentTags(observations=("box",), actions=("box",), engine="jax")
    schema = (
        Param("gamma", "float", 0.99, "discount factor", low=0.0, high=1.0),
        Param(
            "learning_rate",
            "float",
            3e-4,
            "Adam's step size (policy, critics, temperature)",
            low=0.0,
            high=1.0,
            low_open=True,
        ),
        Param("hidden_layers", "int", 2, "hidden layers of each network", low=1, high=8),
        Param("hidden_units", "int", 256, "units in each hidden layer", low=1, high=4096),
        Param("activation", "choice", "relu", "activation of the hidden layers", choices=_ACTIVATIONS),
        Param("batch_size", "int", 256, "replayed transitions per minibatch update", low=1, high=65536),
        Param(
            "buffer_size",
            "int",
            1_000_000,
            "real transitions kept for replay (oldest dropped first)",
            low=1,
            high=10**7,
        ),
        Param(
            "learning_starts",
            "int",
            1000,
            "real steps, with actions uniform in the box, stored before the first update",
            low=1,
        ),
        Param("update_every", "int", 1, "real steps between rounds of updates", low=1),
        Param(
            "replays",
            "int",
            1,
            "updates per round (so replays / update_every per real step: the compute budget)",
            low=0,
            high=10_000,
            role=PLANNING_BUDGET,
        ),
        Param(
            "polyak_rate",
            "float",
            0.005,
            "after every update target <- rate critic + (1 - rate) target",
            low=0.0,
            high=1.0,
            low_open=True,
        ),
        Param("learn_temperature", "bool", True, "learn the entropy temperature towards -(action dimensions)"),
        Param(
            "temperature",
            "float",
            1.0,
            "the entropy temperature alpha: fixed, or where learning starts from",
            low=0.0,
            high=1e6,
            low_open=True,
        ),
    )

    check_params: ClassVar[dict[str, Any]] = {
        "gamma": 0.9,
        "learning_rate": 1e-3,
        "hidden_units": 32,
        "batch_size": 32,
        "buffer_size": 10_000,
        "learning_starts": 100,
        "temperature": 0.1,
    }

    def counter_problems(self, real_steps: int) -> list[str]:
        """Real updates are `replays` per round, a round every `update_every` real steps from `learning_starts`
        on; no planning or model updates."""
        return super().counter_problems(real_steps) + self.replay_problems(real_steps)
