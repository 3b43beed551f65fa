"""Per-environment parameters of an agent entry (`by_environment`): the override reaches only that environment's
trials, the others keep their ids, and every mistake is one line with the file, line and key path."""

import pytest

from runner.check_listing import check_listing
from runner.config import load_experiment
from runner.errors import ConfigError
from runner.plan import plan_trials

_TEXT = """\
experiment: features-by-environment
seeds: 1
real_steps: 1000
environments:
  - gym: MountainCar-v0
  - gym: Acrobot-v1
agents:
  - label: linear Sarsa
    kind: linear_sarsa
    params:
      alpha: [0.1, 0.3]
      features: {kind: tiles, tilings: 8, tiles: 6}
"""
_OVERRIDE = """\
    by_environment:
      Acrobot-v1: {features: {kind: fourier, order: 2}}
"""


def _load(tmp_path, text):
    path = tmp_path / "x.yaml"
    path.write_text(text)
    return load_experiment(path)


def _features(trials, env_id):
    return [t.spec["agent"]["params"]["features"] for t in trials if t.spec["env"]["id"] == env_id]


def test_the_override_reaches_only_its_environment(tmp_path):
    plain = plan_trials(_load(tmp_path, _TEXT))
    overridden = plan_trials(_load(tmp_path, _TEXT + _OVERRIDE))
    assert [f["kind"] for f in _features(overridden, "Acrobot-v1")] == ["fourier", "fourier"]
    assert [f["kind"] for f in _features(overridden, "MountainCar-v0")] == ["tiles", "tiles"]
    ids = {t.trial_id for t in plain}
    assert [t.trial_id in ids for t in overridden] == [True, True, False, False]
    assert [t.spec["agent"]["params"]["alpha"] for t in overridden] == [0.1, 0.3, 0.1, 0.3]


def test_check_names_what_differs_on_the_environment(tmp_path):
    lines = check_listing(_load(tmp_path, _TEXT + _OVERRIDE))
    marked = [line for line in lines if "runs here with" in line]
    assert len(marked) == 1 and "'fourier'" in marked[0]
    assert lines.index(marked[0]) > next(i for i, line in enumerate(lines) if line.startswith("  Acrobot-v1"))


@pytest.mark.parametrize(
    ("override", "line", "expected"),
    [
        ("      Pendulum-v1: {alpha: 0.2}\n", 14, "by_environment.Pendulum-v1: expected the label of an environment"),
        (
            "      Acrobot-v1: {alpah: 0.2}\n",
            14,
            "by_environment.Acrobot-v1.alpah: unknown parameter of 'linear_sarsa'; did you mean 'alpha'?",
        ),
        ("      Acrobot-v1: {alpha: 0.2}\n", 14, "Acrobot-v1.alpha: expected a parameter with one value in `params`"),
        ("      Acrobot-v1: {epsilon: [0.1, 0.2]}\n", 14, "Acrobot-v1.epsilon: expected one value"),
        ("      Acrobot-v1: {epsilon: 2.0}\n", 14, "Acrobot-v1.epsilon: expected"),
        ("      Acrobot-v1: {features: {kind: fourier, order: -1}}\n", 14, "Acrobot-v1.features.order: expected"),
        ("      Acrobot-v1: 3\n", 14, "by_environment.Acrobot-v1: expected a mapping"),
    ],
)
def test_mistakes_are_one_line_with_the_key_path(tmp_path, override, line, expected):
    with pytest.raises(ConfigError) as err:
        _load(tmp_path, _TEXT + "    by_environment:\n" + override)
    message = str(err.value)
    assert "\n" not in message
    assert message.startswith(f"{tmp_path / 'x.yaml'}:{line}: agents[0].")
    assert expected in message
