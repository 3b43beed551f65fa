"""Linear kinds in experiment files: features checked with file, line and key path; on an environment with bins
they see the box and the tabular kinds the bins, and the tabular trials keep their ids."""

import pytest

from runner.config import load_experiment
from runner.errors import ConfigError
from runner.plan import plan_trials

_TEXT = """\
experiment: linear-here
seeds: 1
real_steps: 1000
environments:
  - gym: MountainCar-v0
    bins: {counts: [6, 6]}
agents:
  - kind: dyna_q
  - kind: linear_sarsa
    params:
      alpha: 0.5
      features: {kind: tiles, tilings: 8, tiles: 8}
"""


def _load(tmp_path, text):
    path = tmp_path / "x.yaml"
    path.write_text(text)
    return load_experiment(path)


def test_linear_kinds_see_the_box_and_tabular_kinds_the_bins(tmp_path):
    trials = {t.spec["agent"]["kind"]: t for t in plan_trials(_load(tmp_path, _TEXT))}
    assert trials["dyna_q"].spec["env"]["bins"] is not None
    assert "bins" not in trials["linear_sarsa"].spec["env"]
    without_bins = _TEXT.replace("    bins: {counts: [6, 6]}\n", "").replace("  - kind: dyna_q\n", "")
    (same,) = plan_trials(_load(tmp_path, without_bins))
    assert same.trial_id == trials["linear_sarsa"].trial_id
    only_tabular = _TEXT.split("  - kind: linear_sarsa")[0]
    (tabular,) = plan_trials(_load(tmp_path, only_tabular))
    assert tabular.trial_id == trials["dyna_q"].trial_id


@pytest.mark.parametrize(
    ("features", "where", "fragment"),
    [
        ("{kind: tiles, tilings: 0}", "agents[1].params.features.tilings", "whole number in [1, 64]"),
        ("{kind: fourier, low: [0, x]}", "agents[1].params.features.low[1]", "a finite number"),
        ("{kind: splines}", "agents[1].params.features.kind", "expected one of 'tiles', 'rbf', 'fourier', 'raw'"),
        ("tiles", "agents[1].params.features", "expected a mapping"),
    ],
)
def test_bad_features_name_file_line_and_key_path(tmp_path, features, where, fragment):
    text = _TEXT.replace("{kind: tiles, tilings: 8, tiles: 8}", features)
    with pytest.raises(ConfigError) as caught:
        _load(tmp_path, text)
    message = str(caught.value)
    assert message.startswith(f"{tmp_path / 'x.yaml'}:12: {where}: "), message
    assert fragment in message and "\n" not in message


def test_a_linear_kind_without_a_box_is_refused_in_one_line(tmp_path):
    text = _TEXT.replace("  - gym: MountainCar-v0\n    bins: {counts: [6, 6]}\n", '  - grid: {map: "S.G"}\n')
    with pytest.raises(ConfigError, match=r"x.yaml:8: agents\[1\].kind: agent kind 'linear_sarsa' takes box"):
        _load(tmp_path, text)
