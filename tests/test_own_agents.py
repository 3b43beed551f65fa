"""Users' own agents: a plain numpy class named by entry point runs on the step-by-step path, passes the contract
checks, has its parameters validated from its schema, and is never imported from a stored spec without trust."""

from pathlib import Path

import numpy as np
import pytest

from runner.agents import agent_class
from runner.checks import check_agent
from runner.config import load_experiment
from runner.errors import ConfigError, UnknownKindError, UntrustedCodeError
from runner.plan import plan_trials
from runner.trial import run_trial
from runner.trial_spec import TrialSpec
from runner.trust import check_stored_spec

EXAMPLES = Path(__file__).resolve().parent.parent / "examples"
CLASSIC = ("CartPole-v1", "MountainCar-v0", "Acrobot-v1", "Pendulum-v1", "MountainCarContinuous-v0")


@pytest.fixture(autouse=True)
def _examples_on_path(monkeypatch):
    monkeypatch.syspath_prepend(str(EXAMPLES))


def _spec(env_id: str, seed: int = 0, params: dict | None = None) -> dict:
    env = {"source": "gym", "id": env_id, "options": {}, "step_limit": 100}
    return TrialSpec.build(
        env,
        "linear_q:LinearQ",
        agent_class("linear_q:LinearQ")(**(params or {})).get_params(),
        seed,
        400,
        every=200,
        episodes=2,
        step_cap=100,
        training_window=3,
    ).as_dict()


def test_the_example_passes_the_contract_checks():
    check_agent("linear_q:LinearQ")


@pytest.mark.parametrize("env_id", CLASSIC)
def test_classic_control_ids_run_with_an_agent_that_takes_boxes(env_id):
    first = run_trial(_spec(env_id, seed=3))
    again = run_trial(_spec(env_id, seed=3))
    assert first.trial_path == "gymnasium"
    assert first.rows["real_steps"].tolist() == [0, 200, 400]
    assert first.rows["real_updates"].tolist() == [0, 200, 400]
    assert np.all(np.isfinite(first.rows["eval_return"]))
    assert np.array_equal(first.rows["eval_return"], again.rows["eval_return"])
    assert np.isnan(first.rows["model_tv_error"]).all()


def test_different_seeds_give_different_runs():
    a = run_trial(_spec("CartPole-v1", seed=1))
    b = run_trial(_spec("CartPole-v1", seed=2))
    assert not np.array_equal(a.episode_lengths, b.episode_lengths)


def _experiment(tmp_path, agents: str) -> Path:
    path = tmp_path / "own.yaml"
    path.write_text(
        "experiment: own\nseeds: 2\nreal_steps: 200\nevaluation: {every: 100, episodes: 1}\n"
        "environments:\n  - gym: CartPole-v1\n    step_limit: 50\n"
        f"agents:\n{agents}"
    )
    return path


def test_an_experiment_declares_an_own_agent_and_plans_its_trials(tmp_path):
    experiment = load_experiment(_experiment(tmp_path, "  - kind: linear_q:LinearQ\n    params: {tiles: [4, 8]}\n"))
    assert [a.label for a in experiment.agents] == ["linear_q:LinearQ (tiles=4)", "linear_q:LinearQ (tiles=8)"]
    trials = plan_trials(experiment)
    assert len(trials) == 4
    assert trials[0].spec["agent"]["params"]["tiles"] == 4


def test_own_agent_parameters_are_checked_from_its_schema(tmp_path):
    path = _experiment(tmp_path, "  - kind: linear_q:LinearQ\n    params:\n      tiles: 0\n")
    with pytest.raises(ConfigError, match=r"own.yaml:11: agents\[0\]\.params\.tiles: expected a whole number in "):
        load_experiment(path)


def test_a_class_without_the_protocol_is_refused():
    with pytest.raises(UnknownKindError, match="lacks setup, act, observe, greedy_action, counters"):
        agent_class("collections:OrderedDict")


def test_a_stored_spec_naming_an_own_agent_needs_trust():
    spec = _spec("CartPole-v1")
    stored_id = TrialSpec.from_dict(spec).trial_id
    with pytest.raises(UntrustedCodeError, match="linear_q:LinearQ"):
        check_stored_spec(stored_id, spec, trust_code=False, where="results/own")
    check_stored_spec(stored_id, spec, trust_code=True, where="results/own")
