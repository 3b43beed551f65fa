"""The contract every tabular agent kind follows.

The constructor only stores parameters. `setup` creates the learned state: a tuple of numpy arrays
(`arrays_`, whose first entry is always the Q-table the greedy evaluation policy reads), a float vector of
hyperparameters (`hyper_`) and the counters. Acting and learning are two compiled kernels over those arrays,
so the same kernels can later run inside a fully compiled trial loop.
"""

from __future__ import annotations

from typing import Any, ClassVar

import numpy as np

from runner.agents.kernels import q_table_greedy
from runner.errors import EnvironmentSourceError
from runner.models.bin_prediction import no_prediction
from runner.models.function_prediction import no_function_prediction
from runner.models.table_error import no_model_error
from runner.params import Param, resolve_params
from runner.streams import as_stream
from runner.tags import AgentTags

__all__ = ["COUNTER_NAMES", "KindParams", "SteppedAgent", "TabularAgent"]

COUNTER_NAMES = ("real_updates", "planning_updates", "model_updates")
"""Order of `counters_`: value updates from real transitions, from the model, and model updates."""


class KindParams:
    """What every agent kind has: the registry's class attributes, and the parameters it was built with, checked
    against its schema with defaults filled."""

    kind: ClassVar[str] = ""
    summary: ClassVar[str] = ""
    source: ClassVar[str] = ""
    schema: ClassVar[tuple[Param, ...]] = ()

    def __init__(self, **params: Any) -> None:
        self._params = resolve_params(self.schema, params)

    def get_params(self) -> dict[str, Any]:
        """Exactly the parameters the agent was built with (defaults filled), so it can be rebuilt."""
        return dict(self._params)


class SteppedAgent(KindParams):
    """What the kinds driven step by step from Python (neural kinds, own agents) share: they never search a
    game's rules, plan on a true table or note a label."""

    @classmethod
    def needs_rules(cls) -> bool:
        """Never: these kinds do not search a game's rules."""
        return False

    def uses_table(self) -> bool:
        """Never: these kinds do not plan on the true table."""
        return False

    def label_note(self) -> str:
        """No note on the label."""
        return ""


class TabularAgent(KindParams):
    """Base class: parameters in, arrays and compiled kernels out."""

    tags: ClassVar[AgentTags] = AgentTags()
    """What the kind takes and needs (see `runner.tags.AgentTags`): discrete observations and actions, compiled
    kernels, no learned model unless a kind says otherwise. `needs` holds `rules` for kinds that search a game's
    rules and `table` for oracles that plan on the environment's true table (`setup` then requires it)."""

    @classmethod
    def needs_rules(cls) -> bool:
        """Whether the kind searches a game's rules (it runs only on game environments, `game_rules()`)."""
        return "rules" in cls.tags.needs

    def setup(
        self,
        n_states: int,
        n_actions: int,
        stream: int | np.random.SeedSequence | np.ndarray,
        table: tuple | None = None,
        rules: tuple | None = None,
        bounds: tuple[np.ndarray, np.ndarray] | None = None,
    ) -> None:
        """Create the learned state for an environment of that size.

        `stream` is the agent's random stream (see `runner.streams`), or a seed to build one from. `table` is the
        environment's true transition table as the compiled path's tuple, when it is known (see
        `runner.envs.table.TransitionTable.as_tuple`); only oracle kinds may use it. `rules` is what a
        game environment tells a player about its rules (`env.unwrapped.game_rules()`, a tuple of arrays), for
        kinds that search a game tree. `bounds` are a box observation space's (low, high) arrays, for kinds that
        take boxes (`n_states` is then the number of observation dimensions); None: unbounded.
        """
        if self.uses_table() and table is None:
            raise EnvironmentSourceError(
                f"{self.kind} with these parameters plans on the true transition table, so it needs a "
                "table-backed environment (a grid map, FrozenLake, CliffWalking or Taxi)"
            )
        self.table_ = table
        self.rules_ = rules
        self.n_states_ = int(n_states)
        self.n_actions_ = int(n_actions)
        self.stream_ = as_stream(stream)
        unbounded = np.full(self.n_states_, np.inf)
        self.bounds_ = (-unbounded, unbounded) if bounds is None else tuple(np.asarray(b, float) for b in bounds)
        self.counters_ = np.zeros(len(COUNTER_NAMES), dtype=np.int64)
        self.arrays_ = self.make_arrays(self.n_states_, self.n_actions_)
        self.hyper_ = np.asarray(self.make_hyper(), dtype=np.float64)

    def uses_table(self) -> bool:
        """Whether this agent, with its parameters, plans on the true table (an oracle upper bound)."""
        return "table" in self.tags.needs

    def label_note(self) -> str:
        """Text appended to the agent's variant label in every output (e.g. to mark an oracle); empty: none."""
        return ""

    def make_arrays(self, n_states: int, n_actions: int) -> tuple[np.ndarray, ...]:
        """The learned state; entry 0 is the Q-table of shape (n_states, n_actions)."""
        raise NotImplementedError

    def make_hyper(self) -> list[float]:
        """Numeric hyperparameters in the order the kernels read them."""
        raise NotImplementedError

    def act(self, state: int) -> int:
        """Behaviour action for a real step (draws from the agent's own stream)."""
        return int(self.act_kernel(self.arrays_, self.hyper_, state, self.stream_))

    def observe(
        self, state: int, action: int, reward: float, next_state: int, terminated: bool, truncated: bool = False
    ) -> None:
        """Learn from one real transition (and plan, for agents that plan).

        A truncated step (the episode was cut by a time limit) still bootstraps from `next_state`: only
        `terminated` ends the return, so the tabular kernels need no more than it.
        """
        self.observe_kernel(
            self.arrays_,
            self.hyper_,
            self.counters_,
            state,
            action,
            float(reward),
            next_state,
            bool(terminated),
            self.stream_,
        )

    def greedy(self, state: int, stream: np.ndarray) -> int:
        """Greedy action for evaluation; ties are broken with the evaluation stream, not the agent's."""
        return int(self.greedy_kernel(self.arrays_, self.hyper_, state, stream))

    def counters(self) -> dict[str, int]:
        """Counters by name."""
        return {name: int(v) for name, v in zip(COUNTER_NAMES, self.counters_, strict=True)}

    def counter_problems(self, real_steps: int) -> list[str]:
        """How the counters break this kind's accounting after `real_steps` observed steps (empty: none).

        Subclasses extend it with their own rules, e.g. planning updates = n x real updates for Dyna-Q.
        """
        return [f"{name} is negative ({value})" for name, value in self.counters().items() if value < 0]

    greedy_kernel = staticmethod(q_table_greedy)
    """Compiled (arrays, hyper, state, stream) -> action of the evaluation policy. The default is greedy on the
    Q-table; search agents replace it with a search that leaves the agent's counters alone."""

    model_error_kernel = staticmethod(no_model_error)
    """Compiled (arrays, table) -> (mean total-variation distance, mean absolute reward error) of the agent's
    learned model against a true transition table; model-free kinds keep this default, which gives NaN."""

    predict_kernel = staticmethod(no_prediction)
    """Compiled (arrays, state, action, grid, out) -> predicted reward, writing the predicted next observation
    into `out`, for kinds with a learned model on a grid of bins (`runner.models.bin_prediction`: the expected
    bin centre); model-free kinds keep this default, which predicts NaN."""

    def has_bin_model(self) -> bool:
        """Whether the kind predicts next observations on bins (its model error is measured on held-out data)."""
        return self.predict_kernel is not TabularAgent.predict_kernel

    function_predict_kernel = staticmethod(no_function_prediction)
    """Compiled (arrays, observation, action, out) -> predicted reward, writing the predicted next observation
    into `out`, for compiled kinds with a learned function model on box observations
    (`runner.models.function_prediction`); kinds without one keep this default, which predicts NaN."""

    def has_function_model(self) -> bool:
        """Whether the kind's compiled kernels predict next observations (the compiled box loop measures them)."""
        return self.function_predict_kernel is not TabularAgent.function_predict_kernel

    def model_error(self, table: tuple) -> tuple[float, float]:
        """The learned model's error against a true table (see `model_error_kernel`)."""
        tv, reward = self.model_error_kernel(self.arrays_, table)
        return float(tv), float(reward)

    @staticmethod
    def act_kernel(arrays, hyper, state, rng):  # pragma: no cover - replaced by every kind
        raise NotImplementedError

    @staticmethod
    def observe_kernel(arrays, hyper, counters, state, action, reward, next_state, terminated, rng):
        raise NotImplementedError  # pragma: no cover - replaced by every kind
