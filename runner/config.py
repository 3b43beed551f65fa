"""Experiment files: validate a YAML experiment into frozen objects before any work is scheduled.

Every error names the file, the line and the key path and says what was expected and what came.
"""

from __future__ import annotations

import difflib
import hashlib
import itertools
import json
import math
import re
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from runner.agents import agent_class
from runner.agents.neural import neural_requirement
from runner.envs.bins import BinsError, resolve_bins
from runner.envs.grid import GridMapError, parse_grid_map
from runner.envs.sources import GRID_SCHEMA, SOURCES, build_env, environment_tags, gym_reward_threshold, gym_spec
from runner.errors import ConfigError, EnvironmentSourceError, UnknownKindError
from runner.limits import (
    MAX_ENVIRONMENTS,
    MAX_EPISODES,
    MAX_METRIC_ROWS,
    MAX_POINTS_PER_TRIAL,
    MAX_REAL_STEPS,
    MAX_REWARD,
    MAX_SEED,
    MAX_STEP_CAP,
    MAX_TRIALS,
    MAX_VARIANTS,
    ExperimentSize,
)
from runner.params import Param, check_value
from runner.registry import add_entry_folder
from runner.tags import EnvTags, pairing_problem
from runner.yaml_source import KeyPath, SourceText, format_path, read_yaml

__all__ = ["AgentVariant", "Analysis", "Costs", "EnvironmentDecl", "Evaluation", "Experiment", "load_experiment"]

_NAME = re.compile(r"^[A-Za-z0-9][A-Za-z0-9_.-]{0,63}$")
_TOP_KEYS = (
    "experiment",
    "description",
    "seeds",
    "real_steps",
    "evaluation",
    "analysis",
    "environments",
    "agents",
    "baseline",
    "costs",
)
_ANALYSIS_SCHEMA = (
    Param(
        "consecutive",
        "int",
        1,
        "evaluation points in a row the return must stay at the threshold",
        low=1,
        high=MAX_POINTS_PER_TRIAL,
    ),
    Param("resamples", "int", 2000, "bootstrap resamples behind every interval", low=100, high=1_000_000),
    Param("confidence", "float", 0.95, "confidence level of every interval", low=0.5, high=1.0, high_open=True),
    Param(
        "measure",
        "choice",
        "greedy_return",
        "what ranks agents: greedy evaluation return, or reward earned per real step while learning",
        choices=("greedy_return", "earning_rate"),
    ),
)
_COSTS_SCHEMA = (
    Param(
        "real_step", "float", None, "what one real environment step costs, in `unit`", low=0.0, high=1e15, low_open=True
    ),
    Param("cpu_second", "float", None, "what one CPU-second costs, in `unit`", low=0.0, high=1e15, low_open=True),
)
_COST_UNIT = re.compile(r"^[^\x00-\x1f]{1,32}$")
_EVAL_KEYS = ("every", "episodes", "step_cap", "training_window")
_ENV_KEYS = ("label", *SOURCES, "options", "step_limit", "threshold", "earning_threshold", "bins")
_GRID_KEYS = ("map", *(p.name for p in GRID_SCHEMA), "changes")
_AGENT_KEYS = ("label", "kind", "params", "by_environment")
_DEFAULT_STEP_CAP = 1000


@dataclass(frozen=True)
class Evaluation:
    """The evaluation protocol: every N real steps, K greedy episodes on a separate environment instance."""

    every: int
    episodes: int
    step_cap: int | None
    training_window: int


@dataclass(frozen=True)
class Analysis:
    """How results are analysed: the threshold rule and the intervals."""

    consecutive: int = 1
    resamples: int = 2000
    confidence: float = 0.95
    measure: str = "greedy_return"


@dataclass(frozen=True)
class Costs:
    """What a real step and a CPU-second cost the user, in one unit of their choice (minutes, euros...)."""

    unit: str
    real_step: float
    cpu_second: float


@dataclass(frozen=True)
class EnvironmentDecl:
    """One environment of the experiment: its label, resolved spec and thresholds.

    `threshold` is a greedy evaluation return; `earning_threshold` is reward earned per real step while learning
    (the `earning_rate` measure). Either may be None.
    """

    label: str
    spec: dict[str, Any]
    threshold: float | None
    step_cap: int
    earning_threshold: float | None = None
    tags: EnvTags | None = None
    box_tags: EnvTags | None = None  # with `bins`: what the box itself gives (to kinds that take boxes)


@dataclass(frozen=True)
class AgentVariant:
    """One agent variant after grid expansion: label, kind and fully resolved parameters."""

    label: str
    entry_label: str
    kind: str
    params: dict[str, Any]
    varied: dict[str, Any]
    index: int = 0  # position of its entry under `agents`
    by_environment: dict[str, dict[str, Any]] = field(default_factory=dict)

    def params_on(self, env_label: str) -> dict[str, Any]:
        """The resolved parameters this variant runs with on one environment (its `by_environment` entry, if any,
        over the entry's own)."""
        return self.by_environment.get(env_label, self.params)


@dataclass(frozen=True)
class Experiment:
    """A validated experiment."""

    name: str
    description: str
    file: str
    text: str
    text_hash: str
    seeds: Sequence[int]
    real_steps: int
    evaluation: Evaluation
    analysis: Analysis
    environments: tuple[EnvironmentDecl, ...]
    agents: tuple[AgentVariant, ...]
    baseline: str | None
    costs: Costs | None = None

    @property
    def size(self) -> ExperimentSize:
        """Trials and expected metric rows, computed without expanding the seeds."""
        trials = len(self.environments) * len(self.agents) * len(self.seeds)
        return ExperimentSize(trials, self.real_steps // self.evaluation.every + 1)


def load_experiment(path: str | Path) -> Experiment:
    """Read and validate an experiment file; raise ConfigError with file, line and key path on any problem.

    Modules named by `entry:` or `kind:` entry points are also looked for beside the file (`add_entry_folder`).
    """
    src = read_yaml(path)
    add_entry_folder(Path(path).parent)
    data = src.data
    if not isinstance(data, dict):
        raise src.error((), f"expected a mapping of experiment keys ({', '.join(_TOP_KEYS)}), got {_kind(data)}")
    _no_unknown_keys(src, data, (), _TOP_KEYS)
    name = _require(src, data, ("experiment",))
    if not isinstance(name, str) or not _NAME.match(name):
        raise src.error(
            ("experiment",), f"expected a name of letters, digits, '-', '_' or '.' (at most 64, no '/'), got {name!r}"
        )
    description = data.get("description", "")
    if not isinstance(description, str):
        raise src.error(("description",), f"expected text, got {_kind(description)}")
    seeds = _seeds(src, _require(src, data, ("seeds",)))
    real_steps = _positive_int(src, ("real_steps",), _require(src, data, ("real_steps",)), MAX_REAL_STEPS)
    evaluation = _evaluation(src, data.get("evaluation"), real_steps)
    analysis = _analysis(src, data.get("analysis"))
    environments = _environments(src, _require(src, data, ("environments",)), evaluation, real_steps)
    _primary_thresholds(src, analysis, environments)
    agents = _agents(src, _require(src, data, ("agents",)), [env.label for env in environments])
    _check_pairs(src, environments, agents)
    baseline = _baseline(src, data.get("baseline"), agents)
    costs = _costs(src, data.get("costs"))
    _check_size(src, len(environments), len(agents), len(seeds), real_steps // evaluation.every + 1)
    return Experiment(
        name=name,
        description=description,
        file=src.file,
        text=src.text,
        text_hash=hashlib.sha256(src.text.encode()).hexdigest(),
        seeds=seeds,
        real_steps=real_steps,
        evaluation=evaluation,
        analysis=analysis,
        environments=environments,
        agents=agents,
        baseline=baseline,
        costs=costs,
    )


def _kind(value: Any) -> str:
    if value is None:
        return "nothing"
    if value == []:
        return "an empty list"
    if isinstance(value, bool):
        return f"{value!r}".lower()
    if isinstance(value, dict):
        return "a mapping"
    if isinstance(value, list):
        return "a list"
    return repr(value)


def _require(src: SourceText, data: dict, path: KeyPath) -> Any:
    key = path[-1]
    if key not in data or data[key] is None:
        raise src.error(path, "missing; this key is required")
    return data[key]


def _no_unknown_keys(src: SourceText, data: dict, path: KeyPath, known: tuple[str, ...]) -> None:
    for key in data:
        if key not in known:
            close = difflib.get_close_matches(str(key), known, n=1, cutoff=0.6)
            hint = f"did you mean {close[0]!r}? " if close else ""
            raise src.error((*path, key), f"unknown key; {hint}expected one of {', '.join(known)}")


def _positive_int(src: SourceText, path: KeyPath, value: Any, most: int) -> int:
    if isinstance(value, bool) or not isinstance(value, int) or value < 1:
        raise src.error(path, f"expected a whole number >= 1, got {_kind(value)}")
    if value > most:
        raise src.error(path, f"expected a whole number at most {most:,}, got {value:,}")
    return value


def _check_size(src: SourceText, envs: int, variants: int, seeds: int, points: int) -> None:
    """Refuse experiments whose trials or metric rows the store and the report could not hold."""
    size = ExperimentSize(envs * variants * seeds, points)
    shape = f"{envs:,} environments x {variants:,} agent variants x {seeds:,} seeds"
    if size.trials > MAX_TRIALS:
        raise src.error(("seeds",), f"expected at most {MAX_TRIALS:,} trials, got {size.trials:,} ({shape})")
    if size.metric_rows > MAX_METRIC_ROWS:
        raise src.error(
            ("evaluation", "every"),
            f"expected at most {MAX_METRIC_ROWS:,} metric rows, got {size.metric_rows:,} ({shape} x {points:,} "
            "evaluation points); evaluate less often or declare fewer trials",
        )


def _mapping(src: SourceText, path: KeyPath, value: Any) -> dict:
    if not isinstance(value, dict):
        raise src.error(path, f"expected a mapping, got {_kind(value)}")
    return value


def _seeds(src: SourceText, value: Any) -> Sequence[int]:
    """A count becomes a range (never a list: `seeds: 1000000000` costs nothing until the trial cap refuses it)."""
    if isinstance(value, int) and not isinstance(value, bool):
        if value < 1:
            raise src.error(("seeds",), f"expected a count >= 1 or a list of seeds, got {value}")
        if value > MAX_TRIALS:
            raise src.error(("seeds",), f"expected at most {MAX_TRIALS:,} seeds, got {value:,}")
        return range(value)
    if isinstance(value, list) and value:
        seen: set[int] = set()
        for i, seed in enumerate(value):
            if isinstance(seed, bool) or not isinstance(seed, int) or seed < 0:
                raise src.error(("seeds", i), f"expected a whole number >= 0, got {_kind(seed)}")
            if seed > MAX_SEED:
                raise src.error(
                    ("seeds", i), f"expected a seed below 2**63 (the store keeps 64-bit integers), got {seed}"
                )
            if seed in seen:
                raise src.error(("seeds",), f"expected distinct seeds, got {seed} more than once")
            seen.add(seed)
        return tuple(value)
    raise src.error(("seeds",), f"expected a count >= 1 or a non-empty list of seeds, got {_kind(value)}")


def _evaluation(src: SourceText, value: Any, real_steps: int) -> Evaluation:
    path: KeyPath = ("evaluation",)
    data = _mapping(src, path, value if value is not None else {})
    _no_unknown_keys(src, data, path, _EVAL_KEYS)
    every = _positive_int(src, (*path, "every"), data.get("every", max(1, real_steps // 20)), MAX_REAL_STEPS)
    if every > real_steps:
        raise src.error((*path, "every"), f"expected at most real_steps ({real_steps}), got {every}")
    if real_steps // every + 1 > MAX_POINTS_PER_TRIAL:
        raise src.error(
            (*path, "every"),
            f"expected at most {MAX_POINTS_PER_TRIAL:,} evaluation points per trial, got {real_steps // every + 1:,} "
            f"(real_steps {real_steps:,} / every {every:,} + 1)",
        )
    episodes = _positive_int(src, (*path, "episodes"), data.get("episodes", 10), MAX_EPISODES)
    cap = data.get("step_cap")
    step_cap = None if cap is None else _positive_int(src, (*path, "step_cap"), cap, MAX_STEP_CAP)
    window = _positive_int(src, (*path, "training_window"), data.get("training_window", 10), MAX_POINTS_PER_TRIAL)
    return Evaluation(every, episodes, step_cap, window)


def _analysis(src: SourceText, value: Any) -> Analysis:
    path: KeyPath = ("analysis",)
    data = _mapping(src, path, value if value is not None else {})
    _no_unknown_keys(src, data, path, tuple(p.name for p in _ANALYSIS_SCHEMA))
    resolved = {}
    for param in _ANALYSIS_SCHEMA:
        try:
            resolved[param.name] = check_value(param, data.get(param.name, param.default))
        except ValueError as err:
            raise src.error((*path, param.name), str(err)) from None
    return Analysis(**resolved)


def _costs(src: SourceText, value: Any) -> Costs | None:
    """The optional `costs` block: a unit name and the price of a real step and of a CPU-second in it."""
    if value is None:
        return None
    path: KeyPath = ("costs",)
    data = _mapping(src, path, value)
    _no_unknown_keys(src, data, path, ("unit", *(p.name for p in _COSTS_SCHEMA)))
    unit = _require(src, data, (*path, "unit"))
    if not isinstance(unit, str) or not _COST_UNIT.match(unit.strip()):
        raise src.error((*path, "unit"), f"expected the name of a unit (1 to 32 characters), got {_kind(unit)}")
    prices = {}
    for param in _COSTS_SCHEMA:
        try:
            prices[param.name] = float(check_value(param, _require(src, data, (*path, param.name))))
        except ValueError as err:
            raise src.error((*path, param.name), str(err)) from None
    return Costs(unit=unit.strip(), **prices)


def _environments(src: SourceText, value: Any, evaluation: Evaluation, real_steps: int) -> tuple[EnvironmentDecl, ...]:
    if not isinstance(value, list) or not value:
        raise src.error(("environments",), f"expected a non-empty list of environments, got {_kind(value)}")
    if len(value) > MAX_ENVIRONMENTS:
        raise src.error(("environments",), f"expected at most {MAX_ENVIRONMENTS:,} environments, got {len(value):,}")
    out: list[EnvironmentDecl] = []
    labels: set[str] = set()
    for i, item in enumerate(value):
        decl = _environment(src, ("environments", i), item, evaluation, real_steps)
        if decl.label in labels:
            raise src.error(("environments", i, "label"), f"expected a unique label, {decl.label!r} is used twice")
        labels.add(decl.label)
        out.append(decl)
    return tuple(out)


def _environment(
    src: SourceText, path: KeyPath, value: Any, evaluation: Evaluation, real_steps: int
) -> EnvironmentDecl:
    data = _mapping(src, path, value)
    _no_unknown_keys(src, data, path, _ENV_KEYS)
    given = [s for s in SOURCES if s in data]
    if len(given) != 1:
        what = "none" if not given else " and ".join(given)
        raise src.error(path, f"expected exactly one of {', '.join(SOURCES)}, got {what}")
    source = given[0]
    step_limit = data.get("step_limit")
    if step_limit is not None:
        step_limit = _positive_int(src, (*path, "step_limit"), step_limit, MAX_STEP_CAP)
    options = data.get("options")
    if options is not None:
        _mapping(src, (*path, "options"), options)
        _json_values(src, (*path, "options"), options)
    spec, default_label, threshold, time_limit = _SOURCE_RESOLVERS[source](src, path, data, real_steps)
    time_limit = step_limit or time_limit
    spec["step_limit"] = step_limit
    label = data.get("label", default_label)
    if not isinstance(label, str) or not label.strip():
        raise src.error((*path, "label"), f"expected a non-empty text label, got {_kind(label)}")
    if "threshold" in data:
        threshold = _threshold(src, (*path, "threshold"), data["threshold"], "a return to reach")
    earning = _threshold(src, (*path, "earning_threshold"), data.get("earning_threshold"), "reward per real step")
    tags, box_tags = _check_buildable(src, path, source, spec, data.get("bins"))
    step_cap = evaluation.step_cap or time_limit or _DEFAULT_STEP_CAP
    return EnvironmentDecl(
        label=label,
        spec=spec,
        threshold=threshold,
        step_cap=int(step_cap),
        earning_threshold=earning,
        tags=tags,
        box_tags=box_tags,
    )


def _gym_source(src: SourceText, path: KeyPath, data: dict, real_steps: int) -> tuple[dict, str, float | None, int]:
    """A gymnasium id: (spec, default label, registered threshold, registered step limit)."""
    env_id = data["gym"]
    if not isinstance(env_id, str):
        raise src.error((*path, "gym"), f"expected a gymnasium id such as 'FrozenLake-v1', got {_kind(env_id)}")
    try:
        registered = gym_spec(env_id)
    except UnknownKindError as err:
        raise src.error((*path, "gym"), str(err)) from None
    spec = {"source": "gym", "id": env_id, "options": dict(data.get("options") or {})}
    return spec, env_id, gym_reward_threshold(env_id), registered.max_episode_steps


def _grid_source(src: SourceText, path: KeyPath, data: dict, real_steps: int) -> tuple[dict, str, None, None]:
    """A text grid map: (spec, default label, no threshold, no step limit)."""
    if data.get("options") is not None:
        raise src.error((*path, "options"), "expected no options beside a grid; put settings under grid")
    spec = {"source": "grid", **_grid(src, (*path, "grid"), data["grid"], real_steps)}
    return spec, f"grid-{path[-1]}", None, None


def _entry_source(src: SourceText, path: KeyPath, data: dict, real_steps: int) -> tuple[dict, str, None, None]:
    """A 'package.module:Class' entry point: (spec, default label, no threshold, no step limit)."""
    entry = data["entry"]
    if not isinstance(entry, str) or ":" not in entry:
        raise src.error((*path, "entry"), f"expected 'package.module:Class', got {_kind(entry)}")
    spec = {"source": "entry", "entry": entry, "options": dict(data.get("options") or {})}
    return spec, entry.rpartition(":")[2], None, None


_SOURCE_RESOLVERS = {"gym": _gym_source, "grid": _grid_source, "entry": _entry_source}
"""How each source of `runner.envs.sources.SOURCES` turns its keys into a resolved spec."""


def _threshold(src: SourceText, path: KeyPath, raw: Any, what: str) -> float | None:
    """A threshold: a finite number, or nothing."""
    if raw is None:
        return None
    if isinstance(raw, bool) or not isinstance(raw, (int, float)) or not abs(raw) <= MAX_REWARD:
        raise src.error(path, f"expected a finite number in [-1e9, 1e9] ({what}), got {_kind(raw)}")
    return float(raw)


def _primary_thresholds(src: SourceText, analysis: Analysis, environments: tuple[EnvironmentDecl, ...]) -> None:
    """With `measure: earning_rate`, every environment needs an earning threshold for the headline to answer."""
    if analysis.measure != "earning_rate":
        return
    for i, env in enumerate(environments):
        if env.earning_threshold is None:
            raise src.error(
                ("environments", i),
                "missing earning_threshold: analysis.measure is earning_rate, so give the reward per real step "
                "that counts as learned (e.g. earning_threshold: 0.02)",
            )


def _grid(src: SourceText, path: KeyPath, value: Any, real_steps: int) -> dict[str, Any]:
    data = _mapping(src, path, value)
    _no_unknown_keys(src, data, path, _GRID_KEYS)
    rows = _grid_map(src, (*path, "map"), _require(src, data, (*path, "map")))
    resolved: dict[str, Any] = {"map": "\n".join(rows)}
    for param in GRID_SCHEMA:
        raw = data.get(param.name, param.default)
        try:
            resolved[param.name] = check_value(param, raw)
        except ValueError as err:
            raise src.error((*path, param.name), str(err)) from None
    if "changes" in data:
        resolved["changes"] = _grid_changes(src, (*path, "changes"), data["changes"], rows, real_steps)
    return resolved


def _grid_map(src: SourceText, path: KeyPath, text: Any) -> tuple[str, ...]:
    if not isinstance(text, str):
        raise src.error(path, f"expected the map as text (use '|' for a block), got {_kind(text)}")
    try:
        return parse_grid_map(text)
    except GridMapError as err:
        line = src.line(path) if err.row is None else src.content_line(path, err.row)
        raise ConfigError(f"{src.file}:{line}: {format_path(path)}: {err}") from None


def _grid_changes(
    src: SourceText, path: KeyPath, value: Any, first: tuple[str, ...], real_steps: int
) -> list[dict[str, Any]]:
    """Maps that replace the first one after given real steps, e.g. an aisle blocked half-way."""
    if not isinstance(value, list) or not value:
        raise src.error(path, f"expected a list of changes like [{{at: 3000, map: ...}}], got {_kind(value)}")
    changes: list[dict[str, Any]] = []
    for i, item in enumerate(value):
        ipath = (*path, i)
        data = _mapping(src, ipath, item)
        _no_unknown_keys(src, data, ipath, ("at", "map"))
        at = _positive_int(src, (*ipath, "at"), _require(src, data, (*ipath, "at")), MAX_REAL_STEPS)
        if at >= real_steps:
            raise src.error((*ipath, "at"), f"expected a real step below real_steps ({real_steps}), got {at}")
        if changes and at <= changes[-1]["at"]:
            raise src.error(
                (*ipath, "at"), f"expected a step after the previous change ({changes[-1]['at']}), got {at}"
            )
        rows = _grid_map(src, (*ipath, "map"), _require(src, data, (*ipath, "map")))
        if (len(rows), len(rows[0])) != (len(first), len(first[0])):
            raise src.error(
                (*ipath, "map"),
                f"expected the first map's size {len(first)}x{len(first[0])}, got {len(rows)}x{len(rows[0])}",
            )
        changes.append({"at": at, "map": "\n".join(rows)})
    return changes


def _json_values(src: SourceText, path: KeyPath, value: Any) -> None:
    """Options are stored in the trial spec as JSON: text, finite numbers that fit 64 bits, true/false, lists."""
    if isinstance(value, dict):
        for key, item in value.items():
            _json_values(src, (*path, key), item)
    elif isinstance(value, list):
        for i, item in enumerate(value):
            _json_values(src, (*path, i), item)
    elif isinstance(value, bool) or value is None or isinstance(value, str):
        return
    elif isinstance(value, int):
        if not -MAX_SEED - 1 <= value <= MAX_SEED:
            raise src.error(path, f"expected a whole number that fits 64 bits, got {value}")
    elif not isinstance(value, float) or not math.isfinite(value):
        raise src.error(path, f"expected text, a finite number, true/false or a list, got {_kind(value)}")


def _option_at_fault(spec: dict[str, Any], err: Exception) -> str | None:
    """The option whose value an environment's KeyError or ValueError names, when exactly one does."""
    named = err.args[0] if len(err.args) == 1 else None
    options = spec.get("options") or {}
    hits = [k for k, v in options.items() if isinstance(v, (str, int, float)) and v == named]
    return hits[0] if len(hits) == 1 else None


def _check_buildable(
    src: SourceText, path: KeyPath, source: str, spec: dict[str, Any], bins: Any
) -> tuple[EnvTags, EnvTags | None]:
    """Build the environment once (a failure points at its options when it has any), resolve its `bins` against
    its observation space into `spec`, and return what it gives (and, with bins, what its box gives)."""
    at = (*path, "options") if spec.get("options") else (*path, source)
    try:
        env = build_env(spec)
    except UnknownKindError as err:  # the entry point itself cannot be imported or is not a class
        raise src.error((*path, source), str(err)) from None
    except EnvironmentSourceError as err:
        raise src.error(at, str(err)) from None
    except Exception as err:  # user code or gymnasium may raise anything on bad options
        what = spec.get("id") or spec.get("entry") or "the environment"
        culprit = _option_at_fault(spec, err)
        if culprit is not None:
            raise src.error(
                (*path, "options", culprit),
                f"{what} does not accept {spec['options'][culprit]!r} here ({type(err).__name__}: "
                f"{_short(err)}); see its documentation for the values it takes",
            ) from None
        raise src.error(at, f"could not build {what}: {type(err).__name__}: {_short(err)}") from None
    try:
        box_tags = None
        if bins is not None:
            box_tags = environment_tags(env, spec)
            try:
                spec["bins"] = resolve_bins(bins, env.observation_space)
            except BinsError as err:
                raise src.error((*path, "bins", *err.key), str(err)) from None
            env.close()
            env = build_env(spec)
        return environment_tags(env, spec), box_tags
    except EnvironmentSourceError as err:
        raise src.error(at, str(err)) from None
    finally:
        env.close()


def _short(err: Exception, limit: int = 300) -> str:
    text = " ".join(str(err).split())
    return text if len(text) <= limit else text[:limit] + "..."


def _agents(src: SourceText, value: Any, env_labels: list[str]) -> tuple[AgentVariant, ...]:
    """Every agent variant; duplicates are found through a dict of canonical parameters (linear in variants)."""
    if not isinstance(value, list) or not value:
        raise src.error(("agents",), f"expected a non-empty list of agents, got {_kind(value)}")
    out: list[AgentVariant] = []
    entry_labels: set[str] = set()
    seen: dict[tuple, str] = {}
    for i, item in enumerate(value):
        path: KeyPath = ("agents", i)
        variants = _agent(src, path, item, MAX_VARIANTS - len(out), env_labels)
        if variants[0].entry_label in entry_labels:
            raise src.error((*path, "label"), f"expected a unique label, {variants[0].entry_label!r} is used twice")
        entry_labels.add(variants[0].entry_label)
        for variant in variants:
            key = (variant.kind, json.dumps([variant.params, variant.by_environment], sort_keys=True))
            if key in seen:
                raise src.error(path, f"expected distinct agents, this one repeats {seen[key]!r} exactly")
            seen[key] = variant.label
            out.append(variant)
    return tuple(out)


def _agent(src: SourceText, path: KeyPath, value: Any, room: int, env_labels: list[str]) -> list[AgentVariant]:
    """The variants of one agent entry (one per combination of listed values); at most `room` of them."""
    data = _mapping(src, path, value)
    _no_unknown_keys(src, data, path, _AGENT_KEYS)
    kind = _require(src, data, (*path, "kind"))
    if not isinstance(kind, str):
        raise src.error((*path, "kind"), f"expected an agent kind such as 'dyna_q', got {_kind(kind)}")
    try:
        cls = agent_class(kind)
    except (UnknownKindError, TypeError) as err:
        raise src.error((*path, "kind"), str(err)) from None
    missing = neural_requirement(kind) if cls.tags.engine == "jax" else None
    if missing is not None:
        raise src.error((*path, "kind"), missing)
    params = data.get("params")
    params = {} if params is None else _mapping(src, (*path, "params"), params)
    schema = {p.name: p for p in cls.schema}
    fixed: dict[str, Any] = {}
    grids: dict[str, list[Any]] = {}
    for name, raw in params.items():
        ppath = (*path, "params", name)
        _known_param(src, ppath, kind, schema, name)
        if isinstance(raw, list):
            if not raw:
                raise src.error(ppath, "expected a value or a non-empty list of values to try, got an empty list")
            checked = []
            for j, item in enumerate(raw):
                try:
                    checked.append(check_value(schema[name], item))
                except ValueError as err:
                    raise src.error((*ppath, j), str(err)) from None
            if len(set(map(repr, checked))) != len(checked):
                raise src.error(ppath, "expected distinct values to try, got a repeated value")
            grids[name] = checked
            combos = math.prod(len(v) for v in grids.values())
            if combos > room:
                raise src.error(
                    ppath,
                    f"expected at most {MAX_VARIANTS:,} agent variants in all, these lists make {combos:,} "
                    f"({' x '.join(str(len(v)) for v in grids.values())})",
                )
        else:
            try:
                fixed[name] = check_value(schema[name], raw)
            except ValueError as err:
                inner = getattr(err, "subpath", ())
                raise src.error((*ppath, *inner), getattr(err, "bare", str(err))) from None
    overrides = _environment_overrides(
        src, (*path, "by_environment"), data.get("by_environment"), kind, schema, grids, env_labels
    )
    label = data.get("label", kind)
    if not isinstance(label, str) or not label.strip():
        raise src.error((*path, "label"), f"expected a non-empty text label, got {_kind(label)}")
    variants = []
    for combo in itertools.product(*grids.values()) if grids else [()]:
        varied = dict(zip(grids, combo, strict=True))
        try:
            agent = cls(**fixed, **varied)
        except Exception as err:  # an own agent's constructor is the user's code and may raise anything
            raise src.error(
                (*path, "kind"), f"{kind} could not be built with these parameters: {type(err).__name__}: {_short(err)}"
            ) from None
        resolved = agent.get_params()
        suffix = ", ".join(f"{k}={v}" for k, v in varied.items())
        variant_label = f"{label} ({suffix})" if suffix else label
        if agent.label_note():
            variant_label = f"{variant_label} [{agent.label_note()}]"
        on_envs = {
            env: _params_on_environment(src, (*path, "by_environment", env), cls, {**fixed, **varied, **extra})
            for env, extra in overrides.items()
        }
        variants.append(AgentVariant(variant_label, label, kind, resolved, varied, path[-1], on_envs))
    return variants


def _known_param(src: SourceText, ppath: KeyPath, kind: str, schema: dict[str, Param], name: Any) -> None:
    """One line when `name` is not a parameter of the kind, with the closest known name."""
    if name not in schema:
        close = difflib.get_close_matches(str(name), list(schema), n=1, cutoff=0.6)
        hint = f"did you mean {close[0]!r}? " if close else ""
        known = ", ".join(schema) or "none"
        raise src.error(ppath, f"unknown parameter of {kind!r}; {hint}expected one of {known}")


def _environment_overrides(
    src: SourceText, path: KeyPath, value: Any, kind: str, schema: dict[str, Param], grids: dict, env_labels: list[str]
) -> dict[str, dict[str, Any]]:
    """An entry's `by_environment`: environment label -> parameters that differ there (single values, checked
    like `params`; not a parameter whose values are tried, which would make variants differ by environment)."""
    if value is None:
        return {}
    data = _mapping(src, path, value)
    out: dict[str, dict[str, Any]] = {}
    for env, raw in data.items():
        epath = (*path, env)
        if env not in env_labels:
            raise src.error(epath, f"expected the label of an environment of this experiment ({', '.join(env_labels)})")
        out[env] = {}
        for name, item in _mapping(src, epath, raw).items():
            ppath = (*epath, name)
            _known_param(src, ppath, kind, schema, name)
            if name in grids:
                raise src.error(ppath, "expected a parameter with one value in `params`, this one lists values to try")
            if isinstance(item, list):
                raise src.error(ppath, "expected one value (lists of values to try belong in `params`)")
            try:
                out[env][name] = check_value(schema[name], item)
            except ValueError as err:
                inner = getattr(err, "subpath", ())
                raise src.error((*ppath, *inner), getattr(err, "bare", str(err))) from None
    return out


def _params_on_environment(src: SourceText, path: KeyPath, cls: type, params: dict[str, Any]) -> dict[str, Any]:
    """The resolved parameters of a variant on one environment with its overrides."""
    try:
        return cls(**params).get_params()
    except Exception as err:  # an own agent's constructor is the user's code and may raise anything
        raise src.error(
            path, f"could not be built with these parameters: {type(err).__name__}: {_short(err)}"
        ) from None


def _baseline(src: SourceText, value: Any, agents: tuple[AgentVariant, ...]) -> str | None:
    if value is None:
        return None
    labels = [a.label for a in agents]
    if isinstance(value, str):
        if value in labels:
            return value
        matches = [a.label for a in agents if a.entry_label == value]
        if len(matches) == 1:
            return matches[0]
        if len(matches) > 1:
            raise src.error(
                ("baseline",),
                f"expected one agent variant, {value!r} has {len(matches)}: " + ", ".join(repr(m) for m in matches),
            )
    close = difflib.get_close_matches(str(value), labels, n=1, cutoff=0.5)
    hint = f"did you mean {close[0]!r}? " if close else ""
    raise src.error(("baseline",), f"{hint}expected the label of an agent variant, got {_kind(value)}")


def _check_pairs(src: SourceText, environments: tuple[EnvironmentDecl, ...], agents: tuple[AgentVariant, ...]) -> None:
    """Every agent variant must be able to serve every environment (their tags say so), with parameters that fit
    its kind of actions (a kind's `action_params_problem`, when it has one); else one line naming both and what
    would fit."""
    seen: set[tuple[str, str]] = set()
    for variant in agents:
        cls = agent_class(variant.kind)
        for env in environments:
            params = variant.params_on(env.label)
            agent = cls(**params)
            uses_table = bool(getattr(agent, "uses_table", lambda: False)())
            key = (variant.kind, repr(sorted(params.items())), env.label)
            if key in seen or env.tags is None:
                continue
            seen.add(key)
            gives = env.box_tags if env.box_tags is not None and "box" in cls.tags.observations else env.tags
            problem = pairing_problem(variant.kind, cls.tags, uses_table, env.label, gives)
            if problem is not None:
                raise src.error(("agents", variant.index, "kind"), problem)
            params_problem = getattr(agent, "action_params_problem", None)
            problem = params_problem(gives.action) if params_problem is not None else None
            if problem is not None:
                raise src.error(("agents", variant.index, "params"), f"on {env.label!r}: {problem}")
