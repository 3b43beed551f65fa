"""The contract of neural agent kinds: parameters and tags here, the learning in JAX (`runner.neural`).

A neural kind is a `NeuralAgent` subclass naming its schema, tags (`engine="jax"`) and `core`, the entry point of
its JAX side: a frozen dataclass built by `core.from_params(params, obs_size, n_actions)` with pure, jitted
methods `init(key)`, `act(state, obs) -> (state, action)`, `observe(state, obs, action, reward, next_obs,
terminated) -> state`, `greedy(network, obs) -> action` (on `state.online`) and `counters(state)`; a core may add
`observe_one` with the signature of `observe`, which the step-by-step path then calls instead (a host-side version
that dispatches its own jitted parts, e.g. so branches compile only when first due).

Actions are what the kind's tags accept: `actions=("discrete",)` (the default) takes a Discrete space from 0 and
the core gets the number of actions; a kind declaring `"box"` in its tags' actions takes a flat Box with finite
bounds, and its core is built by `core.from_params(params, obs_size, action_size, bounds=(low, high))` (tuples of
floats), acts with float32 arrays of shape (action_size,) and learns from them. An environment whose actions the
kind does not take is refused at `check` from the tags (`runner.tags.pairing_problem`), and at setup with one
line.

This module imports no JAX, so `stepmeter list` and `check` work without the `neural` extra and an experiment
naming a neural kind without it gets one line saying what to install (`neural_requirement`).

On an environment with JAX dynamics (`runner.neural.JAX_DYNAMICS_IDS`) a trial runs as compiled JAX loops
(`runner.neural.trial`); elsewhere the same core runs one call per real step through gymnasium (the methods below).
Every random draw comes from `jax.random` keys derived from the trial's agent stream (`runner.seeding.jax_key_data`),
and everything runs with 64-bit types enabled (the dynamics are float64; networks stay float32), so the same trial
gives the same rows bit for bit on the same machine.
"""

from __future__ import annotations

import importlib.util
from typing import Any, ClassVar

import gymnasium as gym
import numpy as np

from runner.agents.base import COUNTER_NAMES, SteppedAgent
from runner.errors import EnvironmentSourceError
from runner.params import Param
from runner.registry import import_entry_point
from runner.seeding import jax_key_data
from runner.tags import AgentTags

__all__ = ["NEURAL_PACKAGES", "MissingNeuralExtra", "NeuralAgent", "neural_requirement"]

NEURAL_PACKAGES = ("jax", "optax")
"""What the `neural` extra installs (`pip install "stepmeter[neural]"`)."""


class MissingNeuralExtra(EnvironmentSourceError):
    """A neural kind was asked for without JAX or optax installed; the message says what to install."""


def _absent(name: str) -> bool:
    try:
        return importlib.util.find_spec(name) is None
    except (ImportError, ValueError):
        return True


def neural_requirement(kind: str) -> str | None:
    """None when the neural extra is installed; else one sentence saying what `kind` needs and how to install it."""
    missing = [name for name in NEURAL_PACKAGES if _absent(name)]
    if not missing:
        return None
    return (
        f"agent kind {kind!r} needs {' and '.join(missing)}, which {'is' if len(missing) == 1 else 'are'} not "
        'installed: pip install "stepmeter[neural]" (or pip install jax optax)'
    )


class NeuralAgent(SteppedAgent):
    """Base class of neural kinds: parameters and tags in Python, acting and learning in JAX."""

    kind: ClassVar[str] = ""
    summary: ClassVar[str] = ""
    source: ClassVar[str] = ""
    schema: ClassVar[tuple[Param, ...]] = ()
    tags: ClassVar[AgentTags] = AgentTags(observations=("box",), engine="jax")
    core: ClassVar[str] = ""
    """'package.module:Class' of the kind's JAX core (imported at setup, never before)."""
    check_params: ClassVar[dict[str, Any]] = {}
    """Parameters the contract checks (`runner.checks`) use when given none: their tasks last a few thousand real
    steps, too short for defaults sized for tens of thousands."""
    model_honesty: ClassVar[Any] = None
    """Kinds with a probabilistic model override this with a method `model_honesty(held) -> ModelHonesty`
    (`runner.neural.model_error.held_out_honesty` on their fitted model), or None before the model is fitted; the
    step-by-step trial then records errors, predicted spread and coverage (`runner.metrics.HONESTY_COLUMNS`)."""

    def setup(self, observation_space: gym.Space, action_space: gym.Space, stream: Any) -> None:
        """Build the JAX core for these spaces and its initial state from the agent's stream (a seed, a
        SeedSequence or a compiled stream)."""
        problem = neural_requirement(self.kind)
        if problem is not None:
            raise MissingNeuralExtra(problem)
        import jax

        problem = self._space_problem(observation_space, action_space)
        if problem is not None:
            raise EnvironmentSourceError(problem)
        self.observation_space_ = observation_space
        self.action_space_ = action_space
        self.box_actions_ = isinstance(action_space, gym.spaces.Box)
        core_class = import_entry_point(self.core)
        obs_size = observation_space.shape[0]
        if self.box_actions_:
            bounds = (tuple(float(v) for v in action_space.low), tuple(float(v) for v in action_space.high))
            self.core_ = core_class.from_params(self._params, obs_size, action_space.shape[0], bounds=bounds)
        else:
            self.core_ = core_class.from_params(self._params, obs_size, int(action_space.n))
        with jax.enable_x64(True):
            self.state_ = self.core_.init(jax.random.wrap_key_data(jax_key_data(stream)))
        self.counters_ = np.zeros(len(COUNTER_NAMES), dtype=np.int64)

    def _space_problem(self, observation_space: gym.Space, action_space: gym.Space) -> str | None:
        """Why this kind cannot take these spaces, in one line; None when it can."""
        takes = self.tags.actions
        flat_obs = isinstance(observation_space, gym.spaces.Box) and len(observation_space.shape or ()) == 1
        discrete = isinstance(action_space, gym.spaces.Discrete) and int(action_space.start) == 0
        box = isinstance(action_space, gym.spaces.Box) and len(action_space.shape or ()) == 1
        if not flat_obs or not ((discrete and "discrete" in takes) or (box and "box" in takes)):
            wanted = " or ".join("discrete (from 0)" if t == "discrete" else "flat box" for t in takes)
            return (
                f"{self.kind} needs flat box observations and {wanted} actions, got {observation_space} and "
                f"{action_space}"
            )
        if box and not (np.all(np.isfinite(action_space.low)) and np.all(np.isfinite(action_space.high))):
            return f"{self.kind} needs finite bounds on box actions (it scales its actions to them), got {action_space}"
        return None

    def _action(self, action: Any) -> Any:
        """A core's action as the environment takes it: an int, or a float32 array of shape (action_size,)."""
        return np.array(action, dtype=np.float32) if self.box_actions_ else int(action)

    def act(self, observation: Any) -> Any:
        """The behaviour action for a real step."""
        import jax

        with jax.enable_x64(True):
            self.state_, action = self.core_.act(self.state_, np.asarray(observation, dtype=np.float32))
            return self._action(action)

    def observe(
        self, observation: Any, action: Any, reward: float, next_observation: Any, terminated: bool, truncated: bool
    ) -> None:
        """Learn from one real step (a truncated one bootstraps from `next_observation`)."""
        import jax

        with jax.enable_x64(True):
            observe = getattr(self.core_, "observe_one", self.core_.observe)
            self.state_ = observe(
                self.state_,
                np.asarray(observation, dtype=np.float32),
                np.asarray(action, dtype=np.float32) if self.box_actions_ else np.int32(action),
                np.float32(reward),
                np.asarray(next_observation, dtype=np.float32),
                np.bool_(terminated),
            )
            self.counters_[:] = np.asarray(self.core_.counters(self.state_))

    def greedy(self, observation: Any, stream: np.ndarray) -> Any:
        """The greedy action of the current network (the evaluation stream is not needed: ties go to the first)."""
        import jax

        with jax.enable_x64(True):
            return self._action(self.core_.greedy(self.state_.online, np.asarray(observation, dtype=np.float32)))

    def counters(self) -> dict[str, int]:
        """Counters by name."""
        return {name: int(v) for name, v in zip(COUNTER_NAMES, self.counters_, strict=True)}

    def counter_problems(self, real_steps: int) -> list[str]:
        """Negative counters; kinds add their own accounting."""
        return [f"{name} is negative ({value})" for name, value in self.counters().items() if value < 0]

    def replay_problems(self, real_steps: int) -> list[str]:
        """The accounting of model-free replay kinds: real updates as the core's `updates_after(real_steps)`
        says, and no planning or model updates."""
        problems = []
        counts = self.counters()
        expected = self.core_.updates_after(real_steps)
        if counts["real_updates"] != expected:
            problems.append(f"real_updates {counts['real_updates']} != {expected} expected after {real_steps} steps")
        if counts["planning_updates"] or counts["model_updates"]:
            problems.append(f"a model-free agent counted planning or model updates: {counts}")
        return problems

    def has_bin_model(self) -> bool:
        """Neural kinds never predict on a grid of bins (they take the box itself)."""
        return False

    def has_function_model(self) -> bool:
        """Whether the agent learns a function model whose error the trial measures on held-out transitions
        (kinds with one override this and `predict`)."""
        return False

    def model_error(self, table: tuple) -> tuple[float, float]:
        """Neural models are not compared with a true table."""
        return float("nan"), float("nan")
