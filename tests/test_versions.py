"""Earlier versions of an edited experiment stay reachable: versions by hash with what changed, load_results with
versions='all', labels that collide across versions told apart, and stores from before versions were recorded."""

import json
import sqlite3

import pytest

import runner
from runner.analysis.frames import open_store
from runner.analysis.versions import describe_changes, experiment_versions
from runner.experiment_report import report_experiment
from runner.run import RunOptions, run_experiment

EXPERIMENT = """\
experiment: dock
seeds: 2
real_steps: 200
evaluation: {{every: 100, episodes: 1}}
environments:
  - label: dock
    grid:
      map: |
        S..
        {row}
    step_limit: 20
agents:
  - {{label: q, kind: q_learning}}
  - {{label: dyna, kind: dyna_q, params: {{planning_steps: {steps}}}}}
baseline: q
"""


def _run(tmp_path, row="..G", steps=5):
    path = tmp_path / "dock.yaml"
    path.write_text(EXPERIMENT.format(row=row, steps=steps))
    run_experiment(path, results_root=tmp_path / "results", options=RunOptions(jobs=1))
    return tmp_path / "results" / "dock"


def test_an_edited_map_keeps_earlier_trials_reachable_under_their_version(tmp_path):
    _run(tmp_path)
    folder = _run(tmp_path, row=".#G")
    with open_store(folder) as store:
        versions = experiment_versions(store)
    assert [(v.name, v.current, v.trials_stored) for v in versions] == [("v1", False, 4), ("v2", True, 4)]
    assert versions[1].changes == ("environments[0].grid.map changed",)

    current = runner.load_results(folder)
    assert set(current["version"]) == {2} and current["trial_id"].nunique() == 4
    everything = runner.load_results(folder, versions="all")
    assert everything["trial_id"].nunique() == 8
    old = everything[everything["version"] == 1]
    # The environment changed under the same label, so the earlier trials carry the version on the environment.
    assert set(old["env"]) == {"dock (v1)"} and set(old["agent"]) == {"q", "dyna"}
    assert set(everything.loc[everything["version"] == 2, "env"]) == {"dock"}

    output, note = report_experiment(folder)
    assert folder / "report" / "versions.csv" in output.files
    assert "the experiment file has 2 versions; the current one is v2 (environments[0].grid.map changed)" in note
    assert "4 stored trials of earlier versions are left out of this report" in note
    table = (folder / "report" / "versions.csv").read_text().splitlines()
    assert table[0] == "version,hash,first_run,runs,trials_stored,current,changes"
    assert table[1].startswith(f"v1,{versions[0].hash[:12]},")
    assert table[2].endswith(",4,yes,environments[0].grid.map changed")
    assert "Versions of the experiment file (2)" in (folder / "report" / "report.html").read_text()


def test_a_changed_parameter_marks_the_agent_label_and_shared_trials_stay_current(tmp_path):
    _run(tmp_path, steps=5)
    folder = _run(tmp_path, steps=10)
    everything = runner.load_results(folder, versions="all")
    labels = everything.groupby(["agent", "version"])["trial_id"].nunique().to_dict()
    # q trials are declared by both versions (same ids), so they count once, in the current version.
    assert labels == {("q", 2): 2, ("dyna", 2): 2, ("dyna (v1)", 1): 2}
    assert set(everything.loc[everything["agent"] == "dyna (v1)", "param_planning_steps"]) == {5}
    assert set(everything.loc[everything["agent"] == "dyna", "param_planning_steps"]) == {10}


def test_a_store_written_before_versions_were_recorded_still_reads(tmp_path):
    folder = _run(tmp_path)
    with sqlite3.connect(folder / "experiment.sqlite") as conn:
        facts = json.loads(conn.execute("SELECT value FROM meta WHERE key = 'facts'").fetchone()[0])
        del facts["experiment_hash"], facts["experiment_text"]
        conn.execute("UPDATE meta SET value = ? WHERE key = 'facts'", (json.dumps(facts),))
    with open_store(folder) as store:
        (only,) = experiment_versions(store)
    assert only.current and only.trials_stored == 4
    assert set(runner.load_results(folder, versions="all")["version"]) == {1}


def test_changes_are_listed_by_key_path():
    before = "seeds: 2\nagents:\n  - {kind: q_learning}\n"
    after = "seeds: 3\nagents:\n  - {kind: q_learning}\n  - {kind: dyna_q}\n"
    assert describe_changes(before, after) == ["seeds: 2 -> 3", "agents[1] added"]
    assert describe_changes(before, "# tuned\n" + before) == ["only comments or layout changed"]
    with pytest.raises(ValueError, match="versions must be one of"):
        runner.load_results("nowhere", versions="old")
