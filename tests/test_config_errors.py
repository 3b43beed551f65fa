"""Malformed experiments are rejected with one line: `<file>:<line>: <key path>: <expected / got>`."""

from dataclasses import dataclass
from pathlib import Path

import gymnasium
import pytest
from experiment_texts import EXAMPLE_EXPERIMENT

from runner.config import load_experiment
from runner.errors import ConfigError

# A valid start of an experiment; cases about agents append an `agents:` section, which begins on line 6.
_HEAD = """\
experiment: broken
seeds: 2
real_steps: 1000
environments:
  - grid: {map: "S.G"}
"""
# The same start without environments, for cases about environments (`environments:` is line 4).
_TOP = "experiment: broken\nseeds: 2\nreal_steps: 100\n"

_EXAMPLE = EXAMPLE_EXPERIMENT


@dataclass(frozen=True)
class Case:
    """A malformed experiment and where and how its error must point."""

    id: str
    text: str
    line: int
    path: str
    fragment: str


_CASES = [
    # top level
    Case("top-level-is-a-list", "- experiment: x\n", 1, "(top level)", "expected a mapping of experiment keys"),
    Case("missing-experiment", "seeds: 2\nreal_steps: 100\n", 1, "experiment", "missing; this key is required"),
    Case("experiment-name-with-slash", "experiment: team/maze\n", 1, "experiment", "got 'team/maze'"),
    Case("unknown-top-key", "experiment: x\nseed: 3\n", 2, "seed", "did you mean 'seeds'?"),
    Case("duplicate-key", "experiment: x\nseeds: 2\nreal_steps: 100\nseeds: 3\n", 4, "seeds", "key given twice"),
    Case("non-text-key", "experiment: x\nseeds: 2\n1000: 3\n", 3, "1000", "unknown key"),
    # seeds, budget and evaluation
    Case("seeds-zero", "experiment: x\nseeds: 0\n", 2, "seeds", "expected a count >= 1"),
    Case("seeds-duplicated", "experiment: x\nseeds: [1, 2, 1]\n", 2, "seeds", "got 1 more than once"),
    Case(
        "seeds-negative",
        "experiment: x\nseeds:\n  - 1\n  - -4\n",
        4,
        "seeds[1]",
        "expected a whole number >= 0, got -4",
    ),
    Case("real-steps-text", "experiment: x\nseeds: 2\nreal_steps: lots\n", 3, "real_steps", "got 'lots'"),
    Case(
        "every-beyond-budget",
        _TOP + "evaluation:\n  every: 500\n",
        5,
        "evaluation.every",
        "expected at most real_steps (100), got 500",
    ),
    Case(
        "unknown-evaluation-key",
        _TOP + "evaluation:\n  every: 50\n  episode: 3\n",
        6,
        "evaluation.episode",
        "did you mean 'episodes'?",
    ),
    # environments
    Case("no-environments", _TOP + "environments: []\n", 4, "environments", "got an empty list"),
    Case(
        "gym-and-grid",
        _TOP + "environments:\n  - gym: FrozenLake-v1\n    grid: {map: S.G}\n",
        5,
        "environments[0]",
        "got gym and grid",
    ),
    Case(
        "gym-id-wrong-version",
        _TOP + "environments:\n  - gym: FrozenLake-v9\n",
        5,
        "environments[0].gym",
        "did you mean 'FrozenLake-v1'",
    ),
    Case(
        "gym-id-typo",
        _TOP + "environments:\n  - gym: FrozenLak-v1\n",
        5,
        "environments[0].gym",
        "did you mean 'FrozenLake-v1'",
    ),
    Case(
        "gym-options-rejected",
        _TOP + "environments:\n  - gym: FrozenLake-v1\n    options: {map_nam: 4x4}\n",
        6,
        "environments[0].options",
        "map_nam",
    ),
    Case(
        "tabular-kind-on-box-observations",
        _TOP + "environments:\n  - gym: CartPole-v1\nagents:\n  - kind: q_learning\n",
        7,
        "agents[0].kind",
        "agent kind 'q_learning' takes discrete observations but 'CartPole-v1' gives box observations (4 numbers)"
        ", discrete actions (2); add `bins:`",
    ),
    Case(
        "tabular-kind-on-box-actions",
        _TOP + "environments:\n  - gym: Pendulum-v1\n    bins: {counts: 5}\nagents:\n  - kind: dyna_q\n",
        8,
        "agents[0].kind",
        "takes discrete actions but 'Pendulum-v1' gives discrete observations (125 states), box actions (1 number)",
    ),
    Case(
        "search-kind-without-rules",
        _TOP + "environments:\n  - grid: {map: S.G}\nagents:\n  - kind: negamax_search\n",
        7,
        "agents[0].kind",
        "searches a game's rules but 'grid-0' gives none",
    ),
    Case(
        "bins-unbounded-without-range",
        _TOP + "environments:\n  - gym: CartPole-v1\n    bins: {counts: 4}\n",
        6,
        "environments[0].bins",
        "missing low: observation dimension 1 is unbounded",
    ),
    Case(
        "bins-counts-wrong-length",
        _TOP + "environments:\n  - gym: MountainCar-v0\n    bins: {counts: [4, 4, 4]}\n",
        6,
        "environments[0].bins.counts",
        "expected a bin count for each of the 2 dimensions",
    ),
    Case(
        "bins-count-zero",
        _TOP + "environments:\n  - gym: MountainCar-v0\n    bins:\n      counts: [4, 0]\n",
        7,
        "environments[0].bins.counts[1]",
        "expected a whole number in [1, 10,000], got 0",
    ),
    Case(
        "bins-edges-not-increasing",
        _TOP + "environments:\n  - gym: MountainCar-v0\n    bins:\n      edges:\n        - [-1, 0]\n"
        "        - [0.01, 0.0]\n",
        9,
        "environments[0].bins.edges[1]",
        "strictly increasing",
    ),
    Case(
        "bins-high-below-low",
        _TOP + "environments:\n  - gym: MountainCar-v0\n    bins: {counts: 3, low: [0, 0], high: [1, -1]}\n",
        6,
        "environments[0].bins.high[1]",
        "expected high above low (0), got -1",
    ),
    Case(
        "bins-unknown-key",
        _TOP + "environments:\n  - gym: MountainCar-v0\n    bins: {count: 3}\n",
        6,
        "environments[0].bins.count",
        "unknown key; expected one of counts, low, high, edges",
    ),
    Case(
        "bins-too-many",
        _TOP + "environments:\n  - gym: Acrobot-v1\n    bins: {counts: 20}\n",
        6,
        "environments[0].bins",
        "expected at most 1,000,000 bins in all, these make 64,000,000",
    ),
    Case(
        "bins-on-discrete-observations",
        _TOP + "environments:\n  - gym: FrozenLake-v1\n    bins: {counts: 3}\n",
        6,
        "environments[0].bins",
        "expected an environment with flat box observations to bin",
    ),
    Case(
        "map-ragged-row",
        _TOP + "environments:\n  - grid:\n      map: |\n        S...\n        .#.\n        ...G\n",
        8,
        "environments[0].grid.map",
        "map row 2 has 3 cells, expected 4",
    ),
    Case(
        "map-ragged-row-after-blank-line",
        _TOP + "environments:\n  - grid:\n      map: |\n        S...\n\n        ....\n        ..G\n",
        10,
        "environments[0].grid.map",
        "has 3 cells, expected 4",
    ),
    Case(
        "map-ragged-inline",
        _TOP + 'environments:\n  - grid: {map: "S..\\n.G"}\n',
        5,
        "environments[0].grid.map",
        "map row 2 has 2 cells, expected 3",
    ),
    Case(
        "map-unknown-cell",
        _TOP + "environments:\n  - grid:\n      map: |\n        S..\n        .#.\n        .?G\n",
        9,
        "environments[0].grid.map",
        "unknown cell '?'",
    ),
    Case(
        "map-without-goal",
        _TOP + "environments:\n  - grid:\n      map: |\n        S..\n        ...\n",
        6,
        "environments[0].grid.map",
        "no goal cell 'G'",
    ),
    Case(
        "slip-above-one",
        _TOP + "environments:\n  - grid:\n      map: S.G\n      slip: 1.5\n",
        7,
        "environments[0].grid.slip",
        "expected a number in [0, 1], got 1.5",
    ),
    # agents
    Case(
        "analysis-consecutive-zero",
        _TOP + "analysis:\n  consecutive: 0\n",
        5,
        "analysis.consecutive",
        "expected a whole number in [1, 100000], got 0",
    ),
    Case(
        "analysis-unknown-key", _TOP + "analysis: {resample: 10}\n", 4, "analysis.resample", "did you mean 'resamples'?"
    ),
    Case(
        "analysis-measure-unknown",
        _TOP + "analysis:\n  measure: online\n",
        5,
        "analysis.measure",
        "expected one of 'greedy_return', 'earning_rate', got 'online'",
    ),
    Case(
        "earning-measure-without-its-threshold",
        _HEAD + "analysis: {measure: earning_rate}\nagents:\n  - kind: q_learning\n",
        5,
        "environments[0]",
        "missing earning_threshold: analysis.measure is earning_rate",
    ),
    Case(
        "earning-threshold-not-a-number",
        _TOP + "environments:\n  - grid: {map: 'S.G'}\n    earning_threshold: fast\n",
        6,
        "environments[0].earning_threshold",
        "expected a finite number in [-1e9, 1e9] (reward per real step), got 'fast'",
    ),
    Case("agent-kind-typo", _HEAD + "agents:\n  - kind: dyna\n", 7, "agents[0].kind", "did you mean 'dyna_q'"),
    Case(
        "alpha-out-of-range",
        _HEAD + "agents:\n  - kind: q_learning\n    params:\n      alpha: 1.5\n",
        9,
        "agents[0].params.alpha",
        "expected a number in (0, 1], got 1.5",
    ),
    Case(
        "unknown-parameter",
        _HEAD + "agents:\n  - kind: dyna_q\n    params: {planing_steps: 5}\n",
        8,
        "agents[0].params.planing_steps",
        "did you mean 'planning_steps'?",
    ),
    Case(
        "params-not-a-mapping",
        _HEAD + "agents:\n  - kind: q_learning\n    params: []\n",
        8,
        "agents[0].params",
        "expected a mapping",
    ),
    Case(
        "grid-value-invalid",
        _HEAD + "agents:\n  - kind: dyna_q\n    params:\n      planning_steps: [5, -1]\n",
        9,
        "agents[0].params.planning_steps[1]",
        "got -1",
    ),
    Case(
        "grid-empty",
        _HEAD + "agents:\n  - kind: dyna_q\n    params:\n      planning_steps: []\n",
        9,
        "agents[0].params.planning_steps",
        "got an empty list",
    ),
    Case(
        "duplicate-agent-label",
        _HEAD + "agents:\n  - {label: a, kind: q_learning}\n  - {label: a, kind: dyna_q}\n",
        8,
        "agents[1].label",
        "'a' is used twice",
    ),
    Case(
        "duplicate-param-key",
        _HEAD + "agents:\n  - kind: q_learning\n    params:\n      alpha: 0.1\n      alpha: 0.2\n",
        10,
        "agents[0].params.alpha",
        "key given twice",
    ),
    # baseline
    Case(
        "baseline-names-no-agent",
        _HEAD + "agents:\n  - {label: q, kind: q_learning}\nbaseline: qq\n",
        8,
        "baseline",
        "did you mean 'q'?",
    ),
    Case(
        "baseline-has-several-variants",
        _HEAD + "agents:\n  - {label: d, kind: dyna_q, params: {planning_steps: [1, 2]}}\nbaseline: d\n",
        8,
        "baseline",
        "'d' has 2",
    ),
]


def _write(tmp_path: Path, text: str) -> Path:
    path = tmp_path / "experiment.yaml"
    path.write_text(text, encoding="utf-8")
    return path


def _error(path: Path) -> str:
    with pytest.raises(ConfigError) as info:
        load_experiment(path)
    return str(info.value)


@pytest.mark.parametrize("case", _CASES, ids=lambda c: c.id)
def test_malformed_experiment_points_at_file_line_and_key(tmp_path, case):
    path = _write(tmp_path, case.text)
    message = _error(path)
    assert "\n" not in message
    prefix = f"{path}:{case.line}: {case.path}: "
    assert message.startswith(prefix), message
    assert case.fragment in message[len(prefix) :]


def test_yaml_syntax_error_points_at_the_problem_line(tmp_path):
    path = _write(tmp_path, "experiment: x\nseeds: [1, 2\nreal_steps: 3\n")
    message = _error(path)
    assert "\n" not in message
    assert message.startswith(f"{path}:3: not valid YAML: ")


def test_missing_experiment_file_is_named(tmp_path):
    path = tmp_path / "nowhere.yaml"
    message = _error(path)
    assert message == f"{path}: no such experiment file"


def test_valid_example_expands_the_agent_grid(tmp_path):
    experiment = load_experiment(_write(tmp_path, _EXAMPLE))
    assert [a.label for a in experiment.agents] == [
        "q",
        "dyna (planning_steps=0)",
        "dyna (planning_steps=5)",
        "dyna (planning_steps=50)",
        "ce",
    ]
    dyna5 = experiment.agents[2]
    assert (dyna5.kind, dyna5.entry_label, dyna5.varied) == ("dyna_q", "dyna", {"planning_steps": 5})
    assert dyna5.params["planning_steps"] == 5
    assert dyna5.params["alpha"] == 0.1  # defaults are filled in
    assert experiment.baseline == "q"
    assert (experiment.real_steps, experiment.evaluation.every, experiment.evaluation.episodes) == (3000, 500, 5)


def test_valid_example_thresholds_and_step_caps(tmp_path):
    experiment = load_experiment(_write(tmp_path, _EXAMPLE))
    maze, lake = experiment.environments
    assert (maze.label, lake.label) == ("maze", "FrozenLake-v1")
    assert maze.threshold is None
    assert lake.threshold == gymnasium.spec("FrozenLake-v1").reward_threshold
    assert maze.step_cap == 200
    assert lake.step_cap == gymnasium.spec("FrozenLake-v1").max_episode_steps
    assert maze.spec["slip"] == 0.2


@pytest.mark.parametrize(
    ("seeds", "expected"),
    [("2", (0, 1)), ("5", (0, 1, 2, 3, 4)), ("[7, 3]", (7, 3))],
    ids=["count-2", "count-5", "explicit-list"],
)
def test_seeds_count_expands_to_range(tmp_path, seeds, expected):
    text = _EXAMPLE.replace("seeds: 2\n", f"seeds: {seeds}\n")
    assert tuple(load_experiment(_write(tmp_path, text)).seeds) == expected
