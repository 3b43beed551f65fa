"""Experiment sizes: seed counts stay ranges, `check` states the cost and summarises long lists, and `run` asks
before a very large experiment."""

from pathlib import Path

import pytest

from runner import limits
from runner.cli import main
from runner.config import load_experiment
from runner.errors import ConfigError
from runner.limits import ExperimentSize
from runner.run import RunOptions, run_experiment

_VALUES = ", ".join(str(round(0.0005 + i * 0.000999, 7)) for i in range(1000))

_TEXT = """\
experiment: sizes
seeds: {seeds}
real_steps: 400
evaluation: {{every: 100, episodes: 1}}
environments:
  - label: hall
    grid: {{map: S.G}}
    step_limit: 20
agents:
  - {{label: q, kind: q_learning}}
  - label: sweep
    kind: q_learning
    params: {{alpha: [{values}]}}
"""


def _write(tmp_path: Path, seeds: int = 1, values: str = _VALUES) -> Path:
    path = tmp_path / "sizes.yaml"
    path.write_text(_TEXT.format(seeds=seeds, values=values), encoding="utf-8")
    return path


def test_a_seed_count_stays_a_range_and_is_counted_without_expanding(tmp_path):
    experiment = load_experiment(_write(tmp_path, seeds=999, values="0.3, 0.4"))
    assert isinstance(experiment.seeds, range) and len(experiment.seeds) == 999
    assert experiment.size == ExperimentSize(trials=3 * 999, points_per_trial=5)


def test_check_summarises_a_thousand_values_and_states_the_cost(tmp_path, capsys):
    assert main(["check", str(_write(tmp_path, seeds=2))]) == 0
    lines = capsys.readouterr().out.splitlines()
    assert len(lines) <= 8, lines
    assert "1 environment x 1,001 agent variants x 2 seeds = 2,002 trials" in lines[0]
    assert lines[1].startswith("expected: 2,002 trials, 10,010 metric rows (about ")
    assert any("sweep: 1000 variants (alpha = 0.0005, 0.001499, 0.002498, ..." in line for line in lines)
    assert not any("ask" in line for line in lines)


def test_check_says_when_run_will_ask(tmp_path, capsys, monkeypatch):
    monkeypatch.setattr(limits, "CONFIRM_TRIALS", 100)
    assert main(["check", str(_write(tmp_path, seeds=2, values="0.3, 0.4"))]) == 0
    assert "run will ask before starting an experiment this large" not in capsys.readouterr().out
    assert main(["check", str(_write(tmp_path, seeds=50, values="0.3, 0.4"))]) == 0
    assert "run will ask before starting an experiment this large (--yes answers for you)" in capsys.readouterr().out


def test_a_large_run_needs_yes_or_an_answer_and_writes_nothing_until_then(tmp_path, capsys, monkeypatch):
    monkeypatch.setattr(limits, "CONFIRM_TRIALS", 3)
    path = _write(tmp_path, seeds=2, values="0.3")
    results = tmp_path / "results"
    code = main(["run", str(path), "--results", str(results), "--jobs", "1", "--no-report"])
    err = capsys.readouterr().err.splitlines()
    assert code == 2 and len(err) == 1
    assert "declares 4 trials" in err[0] and "not started (pass --yes to run it without asking)" in err[0]
    assert not results.exists()
    asked = []
    with pytest.raises(ConfigError, match="not started"):
        run_experiment(path, results_root=results, options=RunOptions(jobs=1), ask=lambda q: asked.append(q) or False)
    assert len(asked) == 1 and asked[0].endswith("run it?") and not results.exists()
    summary = run_experiment(path, results_root=results, options=RunOptions(jobs=1), ask=lambda q: True)
    assert summary.ran == 4
    assert main(["run", str(path), "--results", str(results), "--jobs", "1", "--no-report", "--yes"]) == 0


def test_the_size_figures_follow_from_trials_and_points():
    size = ExperimentSize(trials=10_000, points_per_trial=200)
    assert size.metric_rows == 2_000_000
    assert size.report_bytes == 2_000_000 * limits._REPORT_BYTES_PER_ROW
    assert not size.needs_confirmation()
    assert ExperimentSize(trials=limits.CONFIRM_TRIALS + 1, points_per_trial=1).needs_confirmation()
    assert ExperimentSize(trials=1, points_per_trial=limits.CONFIRM_METRIC_ROWS + 1).needs_confirmation()
