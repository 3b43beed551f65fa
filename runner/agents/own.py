"""Users' own agents in any framework: a plain Python class named `package.module:Class`, run step by step.

The class needs no base class from stepmeter. It declares

- `schema`: a tuple of `runner.params.Param` (its parameters, checked like any kind's), and
- `tags`: a `runner.tags.AgentTags` (what it takes: discrete or box observations and actions; `compiled=False`),

and has these methods (numpy, JAX, torch or anything else inside):

- `__init__(**params)` storing the parameters; `get_params()` returning them (optional: the checked values are
  kept by stepmeter either way);
- `setup(observation_space, action_space, rng)`: create the learned state; `rng` is a `numpy.random.Generator`
  derived from the trial seed (use it, or seed your framework from it, for every random draw);
- `act(observation) -> action`: the behaviour action for a real step;
- `observe(observation, action, reward, next_observation, terminated, truncated)`: learn from a real step;
  `truncated` says the episode was cut by its time limit (bootstrap from `next_observation`), `terminated` that
  it ended (do not);
- `greedy_action(observation) -> action`: the evaluation policy (it must not learn nor change counters);
- `counters() -> dict`: `real_updates`, `planning_updates` and `model_updates` so far;
- optional `predict(observation, action) -> (next_observation, reward)` when it has a learned model, and
  `counter_problems(real_steps) -> list[str]` stating its accounting.

`own_agent_class` wraps such a class into an `OwnAgent` subclass, which gives it the interface the trial loop, the
config and the contract checks use.
"""

from __future__ import annotations

import functools
from typing import Any, ClassVar

import gymnasium as gym
import numpy as np

from runner.agents.base import COUNTER_NAMES, SteppedAgent
from runner.errors import UnknownKindError
from runner.params import Param
from runner.tags import AgentTags

__all__ = ["OWN_AGENT_METHODS", "OwnAgent", "own_agent_class", "why_not_own_agent"]

OWN_AGENT_METHODS = ("setup", "act", "observe", "greedy_action", "counters")


def why_not_own_agent(cls: Any) -> str | None:
    """None when `cls` follows the plain agent protocol above; else what is missing, in a few words."""
    if not isinstance(cls, type):
        return (
            f"a {type(cls).__name__}, not a class (expected a subclass of runner.agents.TabularAgent or a plain "
            "agent class)"
        )
    missing = [m for m in OWN_AGENT_METHODS if not callable(getattr(cls, m, None))]
    if missing:
        return (
            f"a class, not a subclass of runner.agents.TabularAgent nor a plain agent (it lacks {', '.join(missing)})"
        )
    if not isinstance(getattr(cls, "tags", None), AgentTags):
        return "a class without `tags = runner.tags.AgentTags(...)`"
    schema = getattr(cls, "schema", None)
    if not isinstance(schema, tuple) or not all(isinstance(p, Param) for p in schema):
        return "a class without `schema`, a tuple of runner.params.Param"
    if cls.tags.learned_model == "function" and not callable(getattr(cls, "predict", None)):
        return "a class whose tags say it learns a function model but that has no predict(observation, action)"
    if cls.tags.compiled or cls.tags.needs or cls.tags.engine != "numba":
        return "a class whose tags claim compiled kernels, a true table or game rules (own agents have none of them)"
    return None


class OwnAgent(SteppedAgent):
    """A user's plain agent behind the interface the trial loop uses (subclassed per user class)."""

    user_class: ClassVar[type] = object
    tags: ClassVar[AgentTags] = AgentTags(compiled=False)

    def __init__(self, **params: Any) -> None:
        super().__init__(**params)
        self.agent = self.user_class(**self._params)

    def setup(self, observation_space: gym.Space, action_space: gym.Space, seed: Any) -> None:
        """Create the learned state; `seed` is an int, a SeedSequence or a compiled stream (its words seed the
        Generator handed to the user's agent)."""
        self.observation_space_ = observation_space
        self.action_space_ = action_space
        self.agent.setup(observation_space, action_space, np.random.default_rng(seed))
        self.counters_ = np.zeros(len(COUNTER_NAMES), dtype=np.int64)

    def _refresh(self) -> None:
        counts = self.agent.counters()
        self.counters_[:] = [int(counts.get(name, 0)) for name in COUNTER_NAMES]

    def act(self, observation: Any) -> Any:
        """The user's behaviour action."""
        return self.agent.act(observation)

    def observe(
        self, observation: Any, action: Any, reward: float, next_observation: Any, terminated: bool, truncated: bool
    ) -> None:
        """Let the user's agent learn from one real step, then read its counters."""
        self.agent.observe(observation, action, float(reward), next_observation, bool(terminated), bool(truncated))
        self._refresh()

    def greedy(self, observation: Any, stream: np.ndarray) -> Any:
        """The user's evaluation action (the evaluation stream is not needed: the user's policy owns its ties)."""
        return self.agent.greedy_action(observation)

    def counters(self) -> dict[str, int]:
        """Counters by name."""
        self._refresh()
        return {name: int(v) for name, v in zip(COUNTER_NAMES, self.counters_, strict=True)}

    def counter_problems(self, real_steps: int) -> list[str]:
        """Negative counters, plus the user's own accounting rules when the class states them."""
        problems = [f"{name} is negative ({value})" for name, value in self.counters().items() if value < 0]
        own = getattr(self.agent, "counter_problems", None)
        return problems + (list(own(real_steps)) if callable(own) else [])

    def has_model(self) -> bool:
        """Whether the user's agent can predict (a learned function model whose error the trial measures)."""
        return callable(getattr(self.agent, "predict", None))

    def predict(self, observation: Any, action: Any) -> tuple[Any, float]:
        """The user's model: (predicted next observation, predicted reward)."""
        return self.agent.predict(observation, action)

    def model_error(self, table: tuple) -> tuple[float, float]:
        """Own agents' models are not compared with a true table."""
        return float("nan"), float("nan")


@functools.lru_cache(maxsize=64)
def own_agent_class(user_class: type, entry_point: str) -> type[OwnAgent]:
    """The `OwnAgent` subclass for a user's class (one per class, so it has a stable identity)."""
    reason = why_not_own_agent(user_class)
    if reason is not None:
        raise UnknownKindError(f"entry point {entry_point!r} names {reason}; see runner/agents/own.py")
    doc = (user_class.__doc__ or "").strip().splitlines()
    return type(
        f"Own{user_class.__name__}",
        (OwnAgent,),
        {
            "user_class": user_class,
            "kind": entry_point,
            "summary": getattr(user_class, "summary", doc[0] if doc else entry_point),
            "source": getattr(user_class, "source", "your own code"),
            "schema": user_class.schema,
            "tags": user_class.tags,
            "__module__": __name__,
        },
    )
