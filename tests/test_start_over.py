"""`run --start-over` deletes stored trials only with consent; messages count trials in words that agree."""

import subprocess
import sys

import pytest

from runner.errors import ConfigError
from runner.run import RunOptions, run_experiment
from runner.store import Store, experiment_dir
from runner.wording import count, number

EXPERIMENT = """\
experiment: crane-bay
seeds: 2
real_steps: 200
evaluation: {every: 100, episodes: 1}
environments:
  - label: bay
    grid:
      map: |
        S..
        ..G
    step_limit: 20
agents:
  - {label: q, kind: q_learning}
"""


def _setup(tmp_path):
    path = tmp_path / "crane.yaml"
    path.write_text(EXPERIMENT)
    results = tmp_path / "results"
    run_experiment(path, results_root=results, options=RunOptions(jobs=1))
    return path, results, experiment_dir(results, "crane-bay")


def _stored(folder):
    with Store(folder) as store:
        return store.query("SELECT count(*) FROM trials")[0][0]


def test_start_over_without_a_terminal_refuses_and_names_yes(tmp_path):
    path, results, folder = _setup(tmp_path)
    with pytest.raises(ConfigError, match=r"would delete 2 stored trials .*add --yes"):
        run_experiment(path, results_root=results, options=RunOptions(jobs=1, start_over=True), ask=None)
    assert _stored(folder) == 2


def test_start_over_asks_and_keeps_trials_on_no(tmp_path):
    path, results, folder = _setup(tmp_path)
    questions = []

    def answer(question):
        questions.append(question)
        return False

    with pytest.raises(ConfigError, match="not deleted"):
        run_experiment(path, results_root=results, options=RunOptions(jobs=1, start_over=True), ask=answer)
    assert len(questions) == 1 and "2 stored trials" in questions[0]
    assert _stored(folder) == 2


def test_start_over_deletes_on_yes_or_with_the_flag(tmp_path):
    path, results, _ = _setup(tmp_path)
    again = run_experiment(path, results_root=results, options=RunOptions(jobs=1, start_over=True), ask=lambda q: True)
    assert (again.already_stored, again.ran) == (0, 2)
    flagged = run_experiment(path, results_root=results, options=RunOptions(jobs=1, start_over=True, assume_yes=True))
    assert (flagged.already_stored, flagged.ran) == (0, 2)


def test_the_command_line_refuses_without_a_terminal_in_one_line(tmp_path):
    path, _, folder = _setup(tmp_path)
    result = subprocess.run(
        [sys.executable, "-m", "runner", "run", str(path), "--start-over", "--jobs", "1", "--no-report"],
        cwd=tmp_path,
        stdin=subprocess.DEVNULL,
        capture_output=True,
        text=True,
        timeout=120,
    )
    assert result.returncode == 2
    assert "Traceback" not in result.stderr
    errors = result.stderr.strip().splitlines()
    assert len(errors) == 1 and "--yes" in errors[0] and "nothing deleted" in errors[0]
    assert f"results folder: {folder}" in result.stdout and "under the current directory" in result.stdout
    assert _stored(folder) == 2


def test_counts_and_numbers_agree_in_number():
    assert count(1, "trial") == "1 trial"
    assert count(2, "trial") == "2 trials"
    assert count(10000, "trial") == "10,000 trials"
    assert count(1, "process") == "1 process" and count(3, "process") == "3 processes"
    assert number(1200) == "1,200" and number(0.5) == "0.5" and number(12345.6) == "12,346"
