"""`stepmeter show` re-runs one stored trial: its spec, rows, the comparison with the stored rows, and the greedy
policy with learned values drawn on the map; stored specs are checked as for `rerun`."""

import json
import sqlite3

import numpy as np
import pytest

from runner.cli import main
from runner.errors import StoreError, UntrustedCodeError
from runner.plan import trial_id
from runner.run import RunOptions, run_experiment
from runner.show import policy_map, show_trial

EXPERIMENT = """\
experiment: pick-aisle
seeds: 1
real_steps: 3000
evaluation: {every: 1000, episodes: 1}
environments:
  - label: aisle
    grid:
      map: |
        S...G
        .##..
    step_limit: 40
agents:
  - {label: dyna, kind: dyna_q, params: {planning_steps: 20}}
"""


@pytest.fixture(scope="module")
def folder(tmp_path_factory):
    root = tmp_path_factory.mktemp("show")
    path = root / "aisle.yaml"
    path.write_text(EXPERIMENT)
    run_experiment(path, results_root=root / "results", options=RunOptions(jobs=1))
    return root / "results" / "pick-aisle"


def _only_id(folder):
    with sqlite3.connect(folder / "experiment.sqlite") as conn:
        return conn.execute("SELECT trial_id FROM trials").fetchone()[0]


def test_show_reruns_the_trial_and_draws_the_greedy_policy(folder, capsys):
    stored_id = _only_id(folder)
    assert main(["show", str(folder), stored_id[:6]]) == 0
    out = capsys.readouterr().out
    assert f"trial {stored_id}: aisle / dyna / seed 0 (compiled path)" in out
    assert '"planning_steps": 20' in out
    assert "re-run rows: the same as the stored rows, bit for bit" in out
    assert "       3,000 " in out  # the last evaluation point, with its thousands separator
    policy = out.split("greedy policy at the end")[1].splitlines()
    # After 3,000 real steps with 20 planning updates each, the shortest way east along the top row is learned.
    assert policy[1].strip() == ">>>>G"
    values = out.split("learned state values at the end")[1].splitlines()[1].split()
    # Undiscounted goal reward 1, gamma 0.95: a cell k steps from the goal is worth about 0.95 ** (k - 1).
    assert [float(v) for v in values[:4]] == pytest.approx([0.95**3, 0.95**2, 0.95, 1.0], abs=0.02)


def test_show_says_when_rows_differ_from_the_stored_ones(folder, tmp_path, capsys):
    copy = tmp_path / "copy"
    copy.mkdir()
    with sqlite3.connect(folder / "experiment.sqlite") as source, sqlite3.connect(copy / "experiment.sqlite") as dest:
        source.backup(dest)
    with sqlite3.connect(copy / "experiment.sqlite") as conn:
        conn.execute("UPDATE metrics SET eval_return = eval_return + 0.5 WHERE point = 2")
    shown = show_trial(copy, _only_id(folder))
    assert shown.difference.startswith("first difference at row 2 (point 2), column eval_return")
    assert main(["show", str(copy), _only_id(folder)]) == 1


def test_show_refuses_edited_and_untrusted_specs(folder, tmp_path):
    copy = tmp_path / "copy"
    copy.mkdir()
    with sqlite3.connect(folder / "experiment.sqlite") as source, sqlite3.connect(copy / "experiment.sqlite") as dest:
        source.backup(dest)
    with sqlite3.connect(copy / "experiment.sqlite") as conn:
        old_id, text = conn.execute("SELECT trial_id, spec FROM trials").fetchone()
        spec = json.loads(text)
        spec["agent"]["params"]["planning_steps"] = 0
        conn.execute("UPDATE trials SET spec = ?", (json.dumps(spec),))
    with pytest.raises(StoreError, match="does not hash to its id"):
        show_trial(copy, old_id)
    spec["env"] = {"source": "entry", "entry": "os:system", "options": {}}
    new_id = trial_id(spec)
    with sqlite3.connect(copy / "experiment.sqlite") as conn:
        conn.execute("UPDATE trials SET spec = ?, trial_id = ?", (json.dumps(spec), new_id))
        conn.execute("UPDATE metrics SET trial_id = ?", (new_id,))
    with pytest.raises(UntrustedCodeError, match="--trust-code"):
        show_trial(copy, new_id)


def test_policy_map_marks_ties_walls_and_the_best_action():
    rows = ("S.#", ".XG")
    values = np.zeros((6, 4))
    values[0] = [0.1, 0.5, 0.2, 0.0]  # east is best
    values[3] = [0.9, 0.0, 0.0, 0.0]  # north is best
    arrows, numbers = policy_map(rows, values)
    assert arrows == [">?#", "^XG"]  # cell 1 never learned: all actions tie
    assert numbers == ["0.50 0.00     ", "0.90    X    G"]


def test_frozen_lake_is_drawn_with_its_own_action_order(tmp_path, capsys):
    (tmp_path / "lake.yaml").write_text(
        "experiment: lake\nseeds: 1\nreal_steps: 2000\nevaluation: {every: 1000, episodes: 5}\n"
        "environments:\n  - gym: FrozenLake-v1\nagents:\n  - {label: ce, kind: certainty_equivalence}\n"
    )
    run_experiment(tmp_path / "lake.yaml", results_root=tmp_path / "results", options=RunOptions(jobs=1))
    folder = tmp_path / "results" / "lake"
    assert main(["show", str(folder), _only_id(folder)]) == 0
    out = capsys.readouterr().out
    assert "on the FrozenLake-v1 lake" in out and "H hole, G goal" in out
    drawn = [line.strip() for line in out.split("H hole, G goal):")[1].splitlines()[1:5]]
    lake = ["SFFF", "FHFH", "FFFH", "HFFG"]  # gymnasium's 4x4 map
    for row, expected in zip(drawn, lake, strict=True):
        for cell, known in zip(row, expected, strict=True):
            assert cell == known if known in "HG" else cell in "<v>^?"
    # Left, down, right, up: the best action 0 is drawn as a left arrow on FrozenLake, an up arrow on grid maps.
    values = np.zeros((2, 4))
    values[0, 0] = 1.0
    assert policy_map(("SG",), values, arrows="<v>^", fixed="HG")[0] == ["<G"]
