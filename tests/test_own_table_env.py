"""A user's `module:Class` environment with a toy-text table runs on the compiled path with exact model error."""

import subprocess
import sys
from pathlib import Path

import numpy as np

from runner.config import load_experiment
from runner.envs.sources import build_env
from runner.envs.table import table_from_env, why_not_table_backed
from runner.plan import plan_trials
from runner.trial import run_trial

EXPERIMENT = """\
experiment: parcel-chute
seeds: 1
real_steps: 600
evaluation: {{every: 200, episodes: 2}}
environments:
  - entry: {entry}
    options: {{length: 5}}
    step_limit: 30
agents:
  - {{label: dyna, kind: dyna_q, params: {{planning_steps: 5}}}}
"""

OWN_MODULE = Path(__file__).with_name("own_table_env.py")


def _spec(tmp_path, entry):
    path = tmp_path / "chute.yaml"
    path.write_text(EXPERIMENT.format(entry=entry))
    return plan_trials(load_experiment(path))[0].spec


def test_the_table_is_read_as_the_class_declares_it():
    env = build_env({"source": "entry", "entry": "own_table_env:ParcelChute", "options": {"length": 4}})
    assert why_not_table_backed(env) is None
    table = table_from_env(env)
    assert (table.n_states, table.n_actions) == (4, 2)
    pair = 2 * 2 + 0  # state 2, action 0: on to the bin (station 3) with 0.75, stick with 0.25
    outcomes = slice(table.offsets[pair], table.offsets[pair + 1])
    assert table.next_state[outcomes].tolist() == [3, 2]
    assert table.cdf[outcomes].tolist() == [0.75, 1.0]
    assert table.reward[outcomes].tolist() == [1.0, 0.0]
    assert table.terminated[outcomes].tolist() == [True, False]


def test_a_users_table_env_runs_compiled_with_exact_model_error(tmp_path):
    spec = _spec(tmp_path, "own_table_env:ParcelChute")
    compiled = run_trial(spec)
    assert compiled.trial_path == "compiled"
    stepped = run_trial(spec, "gymnasium")
    for result in (compiled, stepped):
        errors = result.rows["model_tv_error"]
        assert np.isnan(errors[0])  # nothing learned yet at step 0
        assert np.isfinite(errors[1:]).all() and (errors[1:] < 0.5).all()  # measured against the class's own table
    assert compiled.rows["eval_return"][-1] == 1.0  # every greedy episode drops the parcel in the bin


def test_a_class_whose_steps_leave_its_table_stays_on_the_gymnasium_path(tmp_path):
    env = build_env({"source": "entry", "entry": "own_table_env:LeakyChute", "options": {}})
    reason = why_not_table_backed(env)
    assert "LeakyChute's step left its own table" in reason and "2.0" in reason
    spec = _spec(tmp_path, "own_table_env:LeakyChute")
    result = run_trial(spec)
    assert result.trial_path == "gymnasium"
    assert np.isnan(result.rows["model_tv_error"]).all()


def test_an_entry_module_beside_the_experiment_imports_without_pythonpath(tmp_path):
    (tmp_path / "floor_chute.py").write_text(OWN_MODULE.read_text())
    (tmp_path / "chute.yaml").write_text(EXPERIMENT.format(entry="floor_chute:ParcelChute"))
    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir()
    env = {"PATH": "/usr/bin:/bin"}
    checked = subprocess.run(
        [sys.executable, "-m", "runner", "check", str(tmp_path / "chute.yaml")],
        cwd=elsewhere,
        env=env,
        capture_output=True,
        text=True,
        timeout=120,
    )
    assert checked.returncode == 0, checked.stderr
    assert "is valid" in checked.stdout

    (tmp_path / "broken_chute.py").write_text("import no_such_module_for_chutes\n")
    (tmp_path / "broken.yaml").write_text(EXPERIMENT.format(entry="broken_chute:ParcelChute"))
    failed = subprocess.run(
        [sys.executable, "-m", "runner", "check", str(tmp_path / "broken.yaml")],
        cwd=elsewhere,
        env=env,
        capture_output=True,
        text=True,
        timeout=120,
    )
    assert failed.returncode == 2 and "Traceback" not in failed.stderr
    assert f"{tmp_path / 'broken.yaml'}:6: environments[0].entry:" in failed.stderr
    assert "no_such_module_for_chutes" in failed.stderr
