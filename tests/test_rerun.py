"""`stepmeter rerun`: stored trials re-run from their stored specs reproduce their rows bit for bit, on the path
they were stored from; tampered rows and changed provenance are named; bad ids are one-line user errors."""

import json
import os
import shutil
import sqlite3
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from experiment_texts import hall_experiment

from runner.cli import main
from runner.run import RunOptions, run_experiment

_REPO = Path(__file__).resolve().parents[1]


def _experiment(tmp_path: Path, seeds: int = 2) -> Path:
    path = tmp_path / "redo.yaml"
    path.write_text(hall_experiment("redo", seeds), encoding="utf-8")
    return path


@pytest.fixture(scope="module")
def stored_once(tmp_path_factory) -> Path:
    """A store whose first 4 trials took the compiled path and whose 2 seed-2 trials were forced on gymnasium,
    run once for the module."""
    where = tmp_path_factory.mktemp("stored")
    results = where / "results"
    run_experiment(_experiment(where, 2), results_root=results, options=RunOptions(jobs=1))
    run_experiment(_experiment(where, 3), results_root=results, options=RunOptions(jobs=1, trial_path="gymnasium"))
    return results / "redo"


@pytest.fixture
def folder(stored_once, tmp_path) -> Path:
    """A copy of the module's store of its own, which a test may tamper with."""
    return Path(shutil.copytree(stored_once, tmp_path / "results" / "redo"))


def _stored(folder: Path) -> dict[str, tuple[str, int]]:
    with sqlite3.connect(folder / "experiment.sqlite") as conn:
        rows = conn.execute("SELECT trial_id, trial_path, seed FROM trials").fetchall()
    return {trial_id: (path, seed) for trial_id, path, seed in rows}


def _rerun(capsys, *args: str) -> tuple[int, list[str], list[str]]:
    code = main(["rerun", *args])
    out, err = capsys.readouterr()
    return code, out.splitlines(), err.splitlines()


def _cli(*args: str, cwd: Path) -> subprocess.CompletedProcess:
    env = dict(os.environ)
    env["PYTHONPATH"] = os.pathsep.join(p for p in (str(_REPO), env.get("PYTHONPATH", "")) if p)
    return subprocess.run(
        [sys.executable, "-m", "runner", *args], cwd=cwd, env=env, capture_output=True, text=True, timeout=120
    )


def test_the_fixture_stores_trials_from_both_paths(folder):
    stored = _stored(folder)
    assert len(stored) == 6
    assert {path for path, seed in stored.values() if seed < 2} == {"compiled"}
    assert {path for path, seed in stored.values() if seed == 2} == {"gymnasium"}


def test_one_id_reproduces_bit_for_bit_through_the_command(folder):
    trial_id = next(t for t, (path, _) in _stored(folder).items() if path == "compiled")
    result = _cli("rerun", str(folder), trial_id, cwd=folder.parent)
    assert result.returncode == 0, result.stderr
    lines = result.stdout.splitlines()
    assert lines[0].startswith(f"{trial_id}  hall / ")
    assert lines[0].endswith("(compiled path): same rows bit for bit")
    assert lines[-1] == "1 of 1 re-run trials reproduced their stored rows"


def test_a_gymnasium_trial_is_rerun_on_the_gymnasium_path(folder, capsys):
    trial_id = next(t for t, (path, _) in _stored(folder).items() if path == "gymnasium")
    code, out, err = _rerun(capsys, str(folder), trial_id)
    assert code == 0, err
    assert out[0].startswith(f"{trial_id}  hall / ")
    assert out[0].endswith(" / seed 2  (gymnasium path): same rows bit for bit")


def test_all_reruns_every_stored_trial_on_its_own_path(folder, capsys):
    stored = _stored(folder)
    code, out, err = _rerun(capsys, str(folder), "--all")
    assert code == 0, err
    checked = {line.split()[0]: line for line in out[:-1]}
    assert set(checked) == set(stored)
    for trial_id, (path, _) in stored.items():
        assert checked[trial_id].endswith(f"({path} path): same rows bit for bit")
    assert out[-1] == "6 of 6 re-run trials reproduced their stored rows"


def test_sample_checks_k_stored_trials_chosen_by_the_seed(folder, capsys):
    stored = _stored(folder)
    code, first, err = _rerun(capsys, str(folder), "--sample", "2", "--seed", "5")
    assert code == 0, err
    ids = [line.split()[0] for line in first[:-1]]
    assert len(ids) == len(set(ids)) == 2 and set(ids) <= set(stored)
    assert first[-1] == "2 of 2 re-run trials reproduced their stored rows"
    _, again, _ = _rerun(capsys, str(folder), "--sample", "2", "--seed", "5")
    assert again == first
    seeds = [sorted(line.split()[0] for line in _rerun(capsys, str(folder), "--sample", "2", "--seed", str(s))[1][:-1])
             for s in range(6)]  # fmt: skip
    assert len({tuple(s) for s in seeds}) > 1  # the seed changes the sample
    code, everything, _ = _rerun(capsys, str(folder), "--sample", "50")
    assert code == 0 and everything[-1] == "6 of 6 re-run trials reproduced their stored rows"


def test_a_unique_prefix_selects_its_trial(folder, capsys):
    stored = sorted(_stored(folder))
    trial_id = stored[0]
    prefix = next(trial_id[:n] for n in range(4, 17) if sum(t.startswith(trial_id[:n]) for t in stored) == 1)
    code, out, err = _rerun(capsys, str(folder), prefix)
    assert code == 0, err
    assert out[0].startswith(f"{trial_id}  ")  # the full id is shown
    assert out[-1] == "1 of 1 re-run trials reproduced their stored rows"


def test_a_tampered_metric_is_found_with_its_row_column_and_size(folder, capsys):
    stored = _stored(folder)
    trial_id = sorted(t for t, (path, _) in stored.items() if path == "compiled")[1]
    with sqlite3.connect(folder / "experiment.sqlite") as conn:
        (before,) = conn.execute("SELECT eval_return FROM metrics WHERE trial_id=? AND point=2", (trial_id,)).fetchone()
        conn.execute("UPDATE metrics SET eval_return = eval_return + 0.5 WHERE trial_id=? AND point=2", (trial_id,))
    conn.close()

    one = _cli("rerun", str(folder), trial_id, cwd=folder.parent)
    assert one.returncode == 1, one.stderr
    line = one.stdout.splitlines()[0]
    assert (
        line.startswith(f"{trial_id}  ")
        and "DIFFERENT: first difference at row 2 (point 2), column eval_return" in line
    )
    assert f"stored {before + 0.5!r}, now {float(before)!r}" in line
    assert line.endswith("largest difference 0.5 in eval_return at row 2")
    assert one.stdout.splitlines()[-1] == "0 of 1 re-run trials reproduced their stored rows"

    code, every, _ = _rerun(capsys, str(folder), "--all")
    assert code == 1
    different = [line for line in every if "DIFFERENT" in line]
    assert len(different) == 1 and different[0].startswith(trial_id)
    assert every[-1] == "5 of 6 re-run trials reproduced their stored rows"


def test_the_largest_difference_is_reported_where_it_is(folder, capsys):
    trial_id = sorted(_stored(folder))[0]
    with sqlite3.connect(folder / "experiment.sqlite") as conn:
        conn.execute("UPDATE metrics SET eval_return = eval_return + 0.25 WHERE trial_id=? AND point=1", (trial_id,))
        conn.execute("UPDATE metrics SET episodes = episodes + 3 WHERE trial_id=? AND point=3", (trial_id,))
    conn.close()
    code, out, _ = _rerun(capsys, str(folder), trial_id)
    assert code == 1
    assert "first difference at row 1 (point 1), column eval_return" in out[0]
    assert out[0].endswith("largest difference 3 in episodes at row 3")


def test_a_changed_stored_version_is_named(folder, capsys):
    trial_id = sorted(_stored(folder))[0]
    with sqlite3.connect(folder / "experiment.sqlite") as conn:
        (run_id, text) = conn.execute(
            "SELECT r.run_id, r.versions FROM runs r JOIN trials t ON t.run_id = r.run_id WHERE t.trial_id=?",
            (trial_id,),
        ).fetchone()
        versions = json.loads(text)
        versions["numpy"] = "0.0"
        conn.execute("UPDATE runs SET versions=? WHERE run_id=?", (json.dumps(versions), run_id))
    conn.close()
    code, out, err = _rerun(capsys, str(folder), trial_id)
    assert code == 0, err  # the rows still match; the changed version is a note, not a mismatch
    assert out[0].endswith("same rows bit for bit")
    notes = [line.strip() for line in out if line.startswith("    ")]
    assert notes == [f"differs from the stored run: numpy {np.__version__} (stored 0.0)"]


def test_unknown_packages_and_another_platform_are_named(folder, capsys):
    with sqlite3.connect(folder / "experiment.sqlite") as conn:
        for run_id, text in conn.execute("SELECT run_id, versions FROM runs").fetchall():
            versions = {**json.loads(text), "retiredpkg": "1.2"}
            conn.execute(
                "UPDATE runs SET versions=?, platform='Plan9; mips; z80' WHERE run_id=?", (json.dumps(versions), run_id)
            )
    conn.close()
    code, out, _ = _rerun(capsys, str(folder), sorted(_stored(folder))[0])
    assert code == 0
    notes = [line.strip() for line in out if line.startswith("    ")]
    assert "differs from the stored run: retiredpkg absent (stored 1.2)" in notes
    assert any(n.startswith("differs from the stored run: platform ") and n.endswith("(stored Plan9; mips; z80)")
               for n in notes)  # fmt: skip


@pytest.mark.parametrize(
    ("given", "message"),
    [
        ("zz", "'zz' is not a trial id; expected 4 to 16 hex digits"),
        ("0123456789abcdef", "no stored trial with id '0123456789abcdef'"),
        ("abc", "'abc' is not a trial id"),
    ],
)
def test_bad_and_unknown_ids_are_one_line_errors(stored_once, given, message, capsys):
    """Through `main` in this process; `test_a_sample_size_below_one_is_a_one_line_user_error` checks the same
    one-line path through the command in a process of its own."""
    assert not any(t.startswith(given) for t in _stored(stored_once))
    code, out, err = _rerun(capsys, str(stored_once), given)
    assert code == 2
    assert len(err) == 1 and err[0].startswith("stepmeter: error: ") and message in err[0], err
    assert out == []


def test_no_selection_and_a_missing_store_are_user_errors(tmp_path, folder, capsys):
    code, _, err = _rerun(capsys, str(folder))
    assert code == 2 and err == ["stepmeter: error: rerun: give TRIAL_ID(s), --sample K or --all"]
    (tmp_path / "nothing").mkdir()
    code, _, err = _rerun(capsys, str(tmp_path / "nothing"), "--all")
    assert code == 2 and len(err) == 1 and "no stepmeter experiment here" in err[0]


def test_a_sample_size_below_one_is_a_one_line_user_error(folder, capsys):
    result = _cli("rerun", str(folder), "--sample", "-1", cwd=folder.parent)
    assert result.returncode == 2, result.stderr[-500:]
    lines = result.stderr.splitlines()
    assert len(lines) == 1 and lines[0].startswith("stepmeter: error: "), result.stderr[-500:]
    assert "--sample" in lines[0] and "Traceback" not in result.stderr
    code, out, err = _rerun(capsys, str(folder), "--sample", "0")
    assert code == 2 and out == [] and len(err) == 1 and "--sample" in err[0]
