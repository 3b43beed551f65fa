"""The `q_network` kind: a replay-based Q-network (Mnih et al. 2015), optionally with Double Q-learning targets
(van Hasselt, Guez & Silver 2016). Parameters and accounting here; the JAX side is `runner.neural.q_network`."""

from __future__ import annotations

from typing import Any, ClassVar

from runner.agents.neural import NeuralAgent
from runner.params import PLANNING_BUDGET, Param

__all__ = ["QNetwork"]

_ACTIVATIONS = ("relu", "tanh", "swish", "elu")


class QNetwork(NeuralAgent):
    """Replay-based Q-network: an MLP of declared sizes, a replay buffer, a target network, Huber loss, Adam."""

    kind = "q_network"
    summary = (
        "replay-based Q-network: an MLP trained by Adam on the Huber loss over minibatches from a buffer of real "
        "transitions, a target network, linearly decaying epsilon; Double Q-learning targets as an option"
    )
    source = "Mnih et al. (2015); Double Q-learning targets: van Hasselt, Guez & Silver (2016)"
    core = "runner.neural.q_network:QNetworkCore"
    schema = (
        Param("gamma", "float", 0.99, "discount factor", low=0.0, high=1.0),
        Param("learning_rate", "float", 5e-4, "Adam's step size", low=0.0, high=1.0, low_open=True),
        Param("hidden_layers", "int", 2, "hidden layers of the MLP", low=1, high=8),
        Param("hidden_units", "int", 64, "units in each hidden layer", low=1, high=4096),
        Param("activation", "choice", "relu", "activation of the hidden layers", choices=_ACTIVATIONS),
        Param("batch_size", "int", 64, "replayed transitions per minibatch update", low=1, high=65536),
        Param(
            "buffer_size", "int", 50_000, "real transitions kept for replay (oldest dropped first)", low=1, high=10**7
        ),
        Param("learning_starts", "int", 500, "real steps stored before the first update", low=1),
        Param("update_every", "int", 1, "real steps between rounds of updates", low=1),
        Param(
            "replays",
            "int",
            1,
            "minibatch updates per round (so replays / update_every per real step: the compute budget)",
            low=0,
            high=10_000,
            role=PLANNING_BUDGET,
        ),
        Param("target_period", "int", 200, "updates between copies of the online network to the target", low=1),
        Param(
            "polyak_rate",
            "float",
            0.0,
            "0: periodic target copies; in (0, 1]: target <- rate online + (1 - rate) target after every update "
            "(target_period then unused)",
            low=0.0,
            high=1.0,
        ),
        Param("epsilon_start", "float", 1.0, "exploration rate at the first real step", low=0.0, high=1.0),
        Param("epsilon_end", "float", 0.05, "exploration rate after epsilon_steps real steps", low=0.0, high=1.0),
        Param("epsilon_steps", "int", 10_000, "real steps over which epsilon falls linearly", low=1),
        Param("double_q", "bool", False, "Double Q-learning targets: the online network picks, the target values"),
    )

    check_params: ClassVar[dict[str, Any]] = {
        "gamma": 0.9,
        "learning_rate": 1e-3,
        "hidden_units": 32,
        "batch_size": 32,
        "learning_starts": 100,
        "epsilon_steps": 1500,
        "target_period": 50,
    }

    def counter_problems(self, real_steps: int) -> list[str]:
        """Real updates are `replays` per round, a round every `update_every` real steps from `learning_starts`
        on; no planning or model updates."""
        return super().counter_problems(real_steps) + self.replay_problems(real_steps)
