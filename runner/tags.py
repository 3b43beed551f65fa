"""The two sides of the trial contract: what an agent kind takes and needs, what an environment gives.

Agent kinds declare `AgentTags` as a class attribute; an environment's `EnvTags` are read from the built
environment (its spaces, whether its steps are a known table, whether compiled dynamics exist for it). Config,
`check`, `stepmeter list`, the contract suite and the choice of trial path read these tags instead of trying.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import gymnasium as gym

__all__ = ["ENGINES", "SPACE_KINDS", "AgentTags", "EnvTags", "pairing_problem", "seen_env_spec", "space_kind"]

SPACE_KINDS = ("discrete", "box")
_NEEDS = ("table", "rules")
_MODELS = ("none", "table", "function")
ENGINES = ("numba", "jax")


@dataclass(frozen=True)
class AgentTags:
    """What an agent kind takes and needs.

    `observations` and `actions` are the space kinds it accepts (`discrete` and/or `box`); `needs` lists what it
    must be given beside observations (`table`: the environment's true transition table; `rules`: a game's
    rules); `learned_model` is the model it learns (`none`, `table` of counts or outcomes, or a `function`);
    `compiled` says whether whole trials of it run in compiled code, and `engine` in whose: `numba` kernels that
    the numba trial loops call (tabular and linear kinds), or `jax` for neural kinds, whose trials run as their own
    compiled JAX loops on environments with JAX dynamics (`runner.neural`) and which need the `neural` extra.
    The planning budget is not a tag: it is the role of a parameter in the kind's schema (`runner.params`).
    """

    observations: tuple[str, ...] = ("discrete",)
    actions: tuple[str, ...] = ("discrete",)
    needs: tuple[str, ...] = ()
    learned_model: str = "none"
    compiled: bool = True
    engine: str = "numba"

    def __post_init__(self) -> None:
        for name, values, allowed in (
            ("observations", self.observations, SPACE_KINDS),
            ("actions", self.actions, SPACE_KINDS),
            ("needs", self.needs, _NEEDS),
        ):
            bad = [v for v in values if v not in allowed]
            if bad or (name != "needs" and not values):
                raise ValueError(f"AgentTags.{name} must be a non-empty tuple of {allowed}, got {values!r}")
        if self.engine not in ENGINES:
            raise ValueError(f"AgentTags.engine must be one of {ENGINES}, got {self.engine!r}")
        if self.learned_model not in _MODELS:
            raise ValueError(f"AgentTags.learned_model must be one of {_MODELS}, got {self.learned_model!r}")

    def describe(self) -> str:
        """One line for `stepmeter list`."""
        extra = ['the neural extra (JAX and optax: pip install "stepmeter[neural]")'] if self.engine == "jax" else []
        needs = ", ".join([*self.needs, *extra]) or "nothing else"
        compiled = ("yes (JAX)" if self.engine == "jax" else "yes") if self.compiled else "no"
        return (
            f"observations: {' or '.join(self.observations)}; actions: {' or '.join(self.actions)}; "
            f"needs: {needs}; learned model: {self.learned_model}; compiled kernels: {compiled}"
        )


@dataclass(frozen=True)
class EnvTags:
    """What a built environment gives: its observation and action space kinds and sizes, whether its steps are
    a known transition table, whether compiled dynamics reproduce it, and whether it tells players a game's
    rules. `observation_size` is the number of states (discrete) or of numbers (box)."""

    observation: str
    action: str
    observation_size: int
    action_size: int
    table_backed: bool
    compiled_dynamics: bool
    game_rules: bool

    def describe(self) -> str:
        """A few words, e.g. 'box observations (4 numbers), discrete actions (2)'."""
        obs = (
            f"box observations ({self.observation_size} {'number' if self.observation_size == 1 else 'numbers'})"
            if self.observation == "box"
            else f"discrete observations ({self.observation_size} states)"
        )
        act = (
            f"box actions ({self.action_size} {'number' if self.action_size == 1 else 'numbers'})"
            if self.action == "box"
            else f"discrete actions ({self.action_size})"
        )
        return f"{obs}, {act}"


def seen_env_spec(agent: AgentTags, env_spec: dict[str, Any]) -> dict[str, Any]:
    """The environment spec an agent kind runs on. `bins` are how kinds that take discrete observations see a box;
    kinds that take box observations see the box itself, so for them the spec is the one without `bins` (the same
    trial as on the environment declared without them)."""
    if env_spec.get("bins") and "box" in agent.observations:
        return {key: value for key, value in env_spec.items() if key != "bins"}
    return env_spec


def space_kind(space: gym.Space) -> tuple[str, int] | None:
    """('discrete', n) for a Discrete space starting at 0, ('box', size) for a flat float Box; None otherwise."""
    if isinstance(space, gym.spaces.Discrete) and int(space.start) == 0:
        return "discrete", int(space.n)
    if isinstance(space, gym.spaces.Box) and len(space.shape) == 1:
        return "box", int(space.shape[0])
    return None


def pairing_problem(kind: str, agent: AgentTags, uses_table: bool, env_label: str, env: EnvTags) -> str | None:
    """Why an agent kind cannot serve an environment, with what would fit, in one sentence; None when it can."""
    if env.observation not in agent.observations:
        fits = (
            "add `bins:` to the environment to give the tabular kinds a grid of bins (e.g. bins: {counts: [8, 8], "
            "low: [...], high: [...]}), or use a kind that takes box observations (your own package.module:Class)"
            if env.observation == "box"
            else "use a kind that takes discrete observations (`stepmeter list agents`)"
        )
        return (
            f"agent kind {kind!r} takes {' or '.join(agent.observations)} observations but {env_label!r} gives "
            f"{env.describe()}; {fits}"
        )
    if env.action not in agent.actions:
        return (
            f"agent kind {kind!r} takes {' or '.join(agent.actions)} actions but {env_label!r} gives "
            f"{env.describe()}; use a kind that takes {env.action} actions (`stepmeter list agents`)"
        )
    if "rules" in agent.needs and not env.game_rules:
        return (
            f"agent kind {kind!r} searches a game's rules but {env_label!r} gives none; use a game environment "
            "(e.g. entry: runner.envs.takeaway:TakeAwayGame)"
        )
    if uses_table and not env.table_backed:
        return (
            f"agent kind {kind!r} with these parameters plans on the true transition table but {env_label!r} is "
            "not table-backed; use a grid map, FrozenLake, CliffWalking or Taxi, or a learned model"
        )
    return None
