"""The optional `costs` block: valid prices reach the stored facts; malformed ones get one line with key path."""

import pytest
from experiment_texts import EXAMPLE_EXPERIMENT

from runner.config import Costs, load_experiment
from runner.errors import ConfigError
from runner.run import experiment_facts


def _load(tmp_path, block):
    path = tmp_path / "priced.yaml"
    path.write_text(EXAMPLE_EXPERIMENT + block)
    return load_experiment(path)


def test_a_costs_block_is_validated_and_stored_with_the_facts(tmp_path):
    experiment = _load(tmp_path, "costs:\n  unit: euros\n  real_step: 0.06\n  cpu_second: 0.00001\n")
    assert experiment.costs == Costs(unit="euros", real_step=0.06, cpu_second=1e-5)
    assert experiment_facts(experiment)["costs"] == {"unit": "euros", "real_step": 0.06, "cpu_second": 1e-5}


def test_without_a_costs_block_there_are_no_prices(tmp_path):
    experiment = _load(tmp_path, "")
    assert experiment.costs is None and experiment_facts(experiment)["costs"] is None


@pytest.mark.parametrize(
    ("block", "path", "fragment"),
    [
        ("costs: 3\n", "costs", "expected a mapping"),
        ("costs:\n  real_step: 1\n  cpu_second: 1\n", "costs.unit", "missing; this key is required"),
        ("costs:\n  unit: ''\n  real_step: 1\n  cpu_second: 1\n", "costs.unit", "expected the name of a unit"),
        ("costs:\n  unit: euros\n  real_step: 0\n  cpu_second: 1\n", "costs.real_step", "got 0"),
        ("costs:\n  unit: euros\n  real_step: -2\n  cpu_second: 1\n", "costs.real_step", "got -2"),
        ("costs:\n  unit: euros\n  real_step: .nan\n  cpu_second: 1\n", "costs.real_step", "got nan"),
        ("costs:\n  unit: euros\n  real_step: 1\n  cpu_second: .inf\n", "costs.cpu_second", "got inf"),
        ("costs:\n  unit: euros\n  real_step: cheap\n  cpu_second: 1\n", "costs.real_step", "got 'cheap'"),
        ("costs:\n  unit: euros\n  real_step: 1\n", "costs.cpu_second", "missing; this key is required"),
        (
            "costs:\n  unit: euros\n  real_step: 1\n  cpu_seconds: 1\n",
            "costs.cpu_seconds",
            "did you mean 'cpu_second'?",
        ),
    ],
)
def test_malformed_costs_get_one_line_with_the_key_path(tmp_path, block, path, fragment):
    with pytest.raises(ConfigError) as caught:
        _load(tmp_path, block)
    message = str(caught.value)
    assert "\n" not in message and f": {path}: " in message and fragment in message
