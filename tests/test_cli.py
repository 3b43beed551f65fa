"""The `stepmeter` command run as a real subprocess: exit codes, one-line errors and stored results."""

import os
import re
import subprocess
import sys
from pathlib import Path

from experiment_texts import EXAMPLE_EXPERIMENT

from runner.agents import AGENTS

_REPO = Path(__file__).resolve().parents[1]

_BROKEN = """\
experiment: broken
seeds: 2
real_steps: 1000
environments:
  - grid: {map: "S.G"}
agents:
  - kind: q_learning
    params:
      alpha: 1.5
"""

_VALID = EXAMPLE_EXPERIMENT

_TINY = """\
experiment: tiny
seeds: 2
real_steps: 400
evaluation: {every: 100, episodes: 2}
environments:
  - label: corridor
    grid:
      map: |
        S..#
        ...G
    step_limit: 50
agents:
  - {label: q, kind: q_learning}
  - {label: dyna, kind: dyna_q, params: {planning_steps: 5}}
"""


def _stepmeter(*args: str, cwd: Path) -> subprocess.CompletedProcess:
    env = dict(os.environ)
    env["PYTHONPATH"] = os.pathsep.join(p for p in (str(_REPO), env.get("PYTHONPATH", "")) if p)
    env["MPLBACKEND"] = "Agg"
    return subprocess.run(
        [sys.executable, "-m", "runner", *args],
        cwd=cwd,
        env=env,
        capture_output=True,
        text=True,
        timeout=120,
        check=False,
    )


def test_check_broken_experiment_prints_one_error_line(tmp_path):
    (tmp_path / "broken.yaml").write_text(_BROKEN, encoding="utf-8")
    result = _stepmeter("check", "broken.yaml", cwd=tmp_path)
    assert result.returncode == 2
    lines = result.stderr.splitlines()
    assert len(lines) == 1
    assert lines[0].startswith("stepmeter: error: broken.yaml:9: agents[0].params.alpha: ")
    assert "Traceback" not in result.stderr + result.stdout


def test_check_valid_experiment_lists_variants_with_trial_counts(tmp_path):
    (tmp_path / "smoke.yaml").write_text(_VALID, encoding="utf-8")
    result = _stepmeter("check", "smoke.yaml", cwd=tmp_path)
    assert result.returncode == 0, result.stderr
    assert "2 environments x 5 agent variants x 2 seeds = 20 trials" in result.stdout
    for label in ("q", "dyna (planning_steps=0)", "dyna (planning_steps=5)", "dyna (planning_steps=50)", "ce"):
        rows = re.findall(rf"^\s+{re.escape(label)}\s+2 trials$", result.stdout, flags=re.MULTILINE)
        assert len(rows) == 2, label  # once under each environment
    assert "baseline: q" in result.stdout


def test_list_names_every_agent_kind_and_planning_steps(tmp_path):
    result = _stepmeter("list", cwd=tmp_path)
    assert result.returncode == 0, result.stderr
    for kind in AGENTS.names():
        assert re.search(rf"^\s+{kind}: ", result.stdout, flags=re.MULTILINE), kind
    assert "planning_steps" in result.stdout
    # parameters declared with the planning-budget role are marked, whatever their name; others are not
    for name in ("planning_steps", "replays", "simulations"):
        assert re.search(rf"^\s+{name} .*\[planning budget\]$", result.stdout, flags=re.MULTILINE), name
    assert not re.search(r"^\s+max_sweeps .*\[planning budget\]$", result.stdout, flags=re.MULTILINE)


def test_report_on_folder_without_experiment_is_one_error_line(tmp_path):
    folder = tmp_path / "empty"
    folder.mkdir()
    result = _stepmeter("report", "empty", cwd=tmp_path)
    assert result.returncode == 2
    lines = result.stderr.splitlines()
    assert len(lines) == 1
    assert lines[0].startswith("stepmeter: error: empty")
    assert "experiment.sqlite" in lines[0]
    assert list(folder.iterdir()) == []  # nothing was created


def test_run_stores_reports_and_skips_stored_trials(tmp_path):
    (tmp_path / "tiny.yaml").write_text(_TINY, encoding="utf-8")
    results = tmp_path / "out"
    command = ("run", "tiny.yaml", "--jobs", "1", "--results", str(results))

    first = _stepmeter(*command, cwd=tmp_path)
    assert first.returncode == 0, first.stderr
    assert "4 trials declared, 0 already stored, 4 to run" in first.stdout
    folder = results / "tiny"
    assert (folder / "experiment.sqlite").is_file()
    assert list((folder / "report").glob("curves_*.png"))
    assert (folder / "report" / "summary.md").is_file()

    again = _stepmeter(*command, cwd=tmp_path)
    assert again.returncode == 0, again.stderr
    assert "4 already stored, 0 to run" in again.stdout
