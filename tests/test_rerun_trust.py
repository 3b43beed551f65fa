"""`stepmeter rerun` treats a results folder as data: an edited spec, or one naming code outside stepmeter, is
refused in one line before anything is imported or run; entry points must name classes of the expected kind."""

import json
import sqlite3
from pathlib import Path

import gymnasium
import pytest

from runner.agents import TabularAgent, agent_class
from runner.cli import main
from runner.errors import UnknownKindError
from runner.plan import trial_id
from runner.registry import import_entry_point
from runner.run import RunOptions, run_experiment
from runner.trust import TRUST_FLAG

_EXPERIMENT = """\
experiment: trusty
seeds: 1
real_steps: 200
evaluation: {every: 100, episodes: 1}
environments:
  - label: hall
    grid: {map: "S.G"}
    step_limit: 20
agents:
  - {label: q, kind: q_learning}
"""


@pytest.fixture
def folder(tmp_path) -> Path:
    path = tmp_path / "trusty.yaml"
    path.write_text(_EXPERIMENT, encoding="utf-8")
    run_experiment(path, results_root=tmp_path / "results", options=RunOptions(jobs=1))
    return tmp_path / "results" / "trusty"


def _edit_spec(folder: Path, change, *, rehash: bool) -> str:
    """Rewrite the stored spec of the only trial; with `rehash`, also move the trial to the id of the new spec."""
    with sqlite3.connect(folder / "experiment.sqlite") as conn:
        old_id, text = conn.execute("SELECT trial_id, spec FROM trials").fetchone()
        spec = json.loads(text)
        change(spec)
        new_id = trial_id(spec) if rehash else old_id
        conn.execute("UPDATE trials SET spec = ?, trial_id = ?", (json.dumps(spec), new_id))
        conn.execute("UPDATE metrics SET trial_id = ?", (new_id,))
    return new_id


def _command_env(marker: Path):
    def change(spec):
        spec["env"] = {"source": "entry", "entry": "os:system", "options": {"command": f"touch {marker}"}}

    return change


def test_rerun_of_an_os_system_entry_runs_nothing_and_names_the_flag(folder, tmp_path, capsys):
    marker = tmp_path / "ran"
    _edit_spec(folder, _command_env(marker), rehash=True)
    code = main(["rerun", str(folder), "--all"])
    out, err = capsys.readouterr()
    assert code == 2
    assert not marker.exists()
    lines = err.splitlines()
    assert len(lines) == 1 and TRUST_FLAG in lines[0] and "os:system" in lines[0], err
    assert out == ""


def test_even_with_trust_an_entry_point_must_name_an_environment_class(folder, tmp_path, capsys):
    marker = tmp_path / "ran"
    _edit_spec(folder, _command_env(marker), rehash=True)
    code = main(["rerun", str(folder), "--all", TRUST_FLAG])
    _, err = capsys.readouterr()
    assert code == 2
    assert not marker.exists()
    assert err.splitlines() == [
        "stepmeter: error: entry point 'os:system' names a builtin_function_or_method, not a subclass of gymnasium.Env"
    ]


def test_a_spec_edited_without_its_id_is_refused_as_tampered(folder, tmp_path, capsys):
    def change(spec):
        spec["agent"]["params"]["alpha"] = 0.5

    stored = _edit_spec(folder, change, rehash=False)
    code = main(["rerun", str(folder), "--all", TRUST_FLAG])
    _, err = capsys.readouterr()
    assert code == 2
    assert len(err.splitlines()) == 1
    assert f"trial {stored}: its stored spec does not hash to its id" in err


def test_an_untouched_store_still_reruns(folder, capsys):
    assert main(["rerun", str(folder), "--all"]) == 0
    assert "1 of 1 re-run trials reproduced their stored rows" in capsys.readouterr().out


@pytest.mark.parametrize(
    ("entry", "fragment"),
    [
        ("os:system", "names a builtin_function_or_method"),
        ("builtins:dict", "names a class, not a subclass"),
        ("json:dumps", "names a function"),
        ("os:sep", "names a str"),
    ],
)
def test_entry_points_must_name_classes_of_the_expected_kind(entry, fragment):
    with pytest.raises(UnknownKindError, match=fragment):
        import_entry_point(entry, gymnasium.Env, "gymnasium.Env")
    with pytest.raises(UnknownKindError, match=fragment):
        agent_class(entry)


def test_expected_classes_are_accepted():
    assert import_entry_point("runner.envs.takeaway:TakeAwayGame", gymnasium.Env).__name__ == "TakeAwayGame"
    assert issubclass(agent_class("runner.agents.q_learning:QLearning"), TabularAgent)


def test_a_module_that_raises_on_import_is_one_line(tmp_path, monkeypatch):
    (tmp_path / "explodes_on_import.py").write_text("raise RuntimeError('boom\\nsecond line')\n", encoding="utf-8")
    monkeypatch.syspath_prepend(str(tmp_path))
    with pytest.raises(UnknownKindError) as info:
        agent_class("explodes_on_import:Agent")
    assert str(info.value) == (
        "importing module 'explodes_on_import' of entry point 'explodes_on_import:Agent' failed: "
        "RuntimeError: boom second line"
    )
