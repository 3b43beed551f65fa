"""The crane demo: `configs/crane.yaml` validates, its bins are the grid it declares, and a shortened copy (one
seed, fewer real steps) runs end to end through `stepmeter run` with its report; and the five classic-control ids
run in one experiment with the tabular kinds on bins and a user's own agent on boxes."""

import re
from pathlib import Path

import numpy as np
import pytest

import runner
from runner.cli import main
from runner.config import load_experiment

CONFIG = Path(__file__).resolve().parent.parent / "configs" / "crane.yaml"
EXAMPLES = Path(__file__).resolve().parent.parent / "examples"


def test_crane_config_declares_bins_and_a_threshold():
    pytest.importorskip("jax")
    experiment = load_experiment(CONFIG)
    (env,) = experiment.environments
    assert env.spec["id"] == "stepmeter/OverheadCrane-v0"
    assert [len(e) + 1 for e in env.spec["bins"]["edges"]] == [12, 8, 3, 3]
    assert env.tags.observation == "discrete" and env.tags.observation_size == 864
    assert env.threshold == -150
    assert {a.kind for a in experiment.agents} == {
        "q_learning",
        "dyna_q",
        "linear_sarsa",
        "linear_true_online_sarsa",
        "linear_dyna",
        "linear_replay_q_learning",
        "q_network",
        "neural_dyna",
        "mpc",
    }
    budgets = {a.kind: [] for a in experiment.agents}
    for a in experiment.agents:
        budgets[a.kind].append(a.params.get("planning_steps"))
    assert budgets["linear_dyna"] == [0, 5] and budgets["neural_dyna"] == [4]
    assert experiment.baseline == "true online Sarsa(lambda)"


@pytest.mark.slow
def test_a_shortened_crane_experiment_runs_and_reports(tmp_path, capsys):
    """Every family's kinds, the neural ones included, through `stepmeter run` and its report; `stepmeter rerun`
    then reproduces every stored trial's rows bit for bit."""
    pytest.importorskip("jax")
    text = re.sub(r"(?m)^real_steps: \d+$", "real_steps: 1200", CONFIG.read_text().replace("seeds: 5", "seeds: 1"))
    text = text.replace("every: 2000 ", "every: 600 ").replace("episodes: 3 ", "episodes: 1 ")
    assert "real_steps: 1200" in text and "every: 600 " in text and "seeds: 1" in text
    path = tmp_path / "crane.yaml"
    path.write_text(text)
    assert main(["run", str(path), "--results", str(tmp_path / "results"), "--jobs", "1"]) == 0
    frame = runner.load_results(tmp_path / "results" / "crane-loading-bay")
    assert len(frame) == 10 * 3  # ten agent variants x evaluation points at 0, 600 and 1200 real steps
    assert np.isfinite(frame["eval_return"]).all()
    assert (tmp_path / "results" / "crane-loading-bay" / "report" / "report.html").exists()
    capsys.readouterr()
    assert main(["rerun", str(tmp_path / "results" / "crane-loading-bay"), "--all"]) == 0
    out = capsys.readouterr().out
    assert "10 of 10 re-run trials reproduced their stored rows" in out, out
    assert out.count("same rows bit for bit") == 10


CLASSIC = ("CartPole-v1", "MountainCar-v0", "Acrobot-v1", "Pendulum-v1", "MountainCarContinuous-v0")
_HEAD = "seeds: 1\nreal_steps: 400\nevaluation: {every: 200, episodes: 1}\nenvironments:\n"


@pytest.mark.slow
def test_classic_control_ids_run_in_experiments(tmp_path, monkeypatch):
    """Every id with an own agent on boxes; the discrete-action ids with the tabular kinds on bins."""
    monkeypatch.syspath_prepend(str(EXAMPLES))
    boxes = tmp_path / "boxes.yaml"
    boxes.write_text(
        "experiment: classic-boxes\n"
        + _HEAD
        + "".join(f"  - gym: {env_id}\n    step_limit: 100\n" for env_id in CLASSIC)
        + "agents:\n  - kind: linear_q:LinearQ\n"
    )
    binned = tmp_path / "binned.yaml"
    binned.write_text(
        "experiment: classic-bins\n"
        + _HEAD
        + "".join(
            f"  - gym: {env_id}\n    step_limit: 100\n    bins: {{counts: 4, low: -2, high: 2}}\n"
            for env_id in CLASSIC[:3]
        )
        + "agents:\n  - kind: q_learning\n  - kind: dyna_q\n  - kind: certainty_equivalence\n"
    )
    for path, name, envs, agents in ((boxes, "classic-boxes", 5, 1), (binned, "classic-bins", 3, 3)):
        assert main(["run", str(path), "--results", str(tmp_path / "results"), "--jobs", "1", "--no-report"]) == 0
        frame = runner.load_results(tmp_path / "results" / name)
        assert frame["env"].nunique() == envs and frame["agent"].nunique() == agents
        assert len(frame) == envs * agents * 3 and np.isfinite(frame["eval_return"]).all()


def test_check_says_what_the_crane_gives_and_how_its_trials_run(capsys):
    pytest.importorskip("jax")
    assert main(["check", str(CONFIG)]) == 0
    out = capsys.readouterr().out
    assert "gives discrete observations (864 states), discrete actions (3); compiled kinds run whole trials " in out
    assert "(compiled dynamics through bins)" in out
    assert "environments[0].threshold: note: not checked against the best possible value: 'overhead crane' is" in out


CLASSIC_CONFIG = CONFIG.parent / "classic_control.yaml"


def test_classic_control_config_gives_acrobot_its_own_features():
    """Example 10.1's tiles on Mountain Car, hashed tiles on the six-dimensional Acrobot, for every linear kind;
    both registered thresholds (gymnasium's registry: MountainCar-v0 -110, Acrobot-v1 -100)."""
    pytest.importorskip("jax")
    experiment = load_experiment(CLASSIC_CONFIG)
    assert [env.threshold for env in experiment.environments] == [-110, -100]
    for variant in experiment.agents:
        if not variant.kind.startswith("linear"):
            continue
        assert variant.params_on("MountainCar-v0")["features"]["tiles"] == 8
        assert variant.params_on("Acrobot-v1")["features"]["hash_size"] == 1024
    budgets = [a.params["planning_steps"] for a in experiment.agents if a.kind in ("linear_dyna", "neural_dyna")]
    assert budgets == [0, 5, 2]


PENDULUM_CONFIG = CONFIG.parent / "pendulum.yaml"


def test_pendulum_config_compares_the_model_free_and_the_planning_kinds_on_box_actions():
    """Soft actor-critic against Dyna with the ensemble (neural_dyna on box actions, soft actor-critic's
    parameters given) and model-predictive control on both learned models, on Pendulum-v1 and the continuous
    crane's box actions (MPC learns the crane's episode ends there)."""
    pytest.importorskip("jax")
    experiment = load_experiment(PENDULUM_CONFIG)
    pendulum, crane = experiment.environments
    assert pendulum.spec["id"] == "Pendulum-v1" and pendulum.tags.action == "box" and pendulum.threshold == -200
    assert crane.spec["id"] == "stepmeter/OverheadCraneContinuous-v0" and crane.tags.action == "box"
    assert crane.threshold == -150 and crane.spec["step_limit"] == 300
    assert {k: crane.spec["options"][k] for k in ("rail_length", "bay_position", "crash_penalty")} == {
        "rail_length": 6.0,
        "bay_position": 4.0,
        "crash_penalty": 300.0,
    }
    assert [(a.kind, a.params.get("model")) for a in experiment.agents] == [
        ("soft_actor_critic", None),
        ("neural_dyna", "ensemble"),
        ("mpc", "ensemble"),
        ("mpc", "gp"),
    ]
    sac, dyna = experiment.agents[:2]
    assert all(dyna.params[name] == value for name, value in sac.params.items())
    assert dyna.params["planning_steps"] == 10
    assert all(a.params_on(crane.label)["termination"] == "learned" for a in experiment.agents[2:])
    assert all(a.params_on(pendulum.label)["termination"] == "none" for a in experiment.agents[2:])
    assert experiment.baseline == "soft actor-critic"
