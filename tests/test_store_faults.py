"""Broken stores and hostile results folders: each fault is one line and exit 2, or a clean re-run, and nothing
that was stored is lost (stored rows are compared before and after)."""

import contextlib
import errno
import hashlib
import os
import shutil
import sqlite3
import subprocess
from collections.abc import Iterator
from pathlib import Path

import pandas as pd
import pytest

import runner.analysis.report as report_module
import runner.run as run_module
from runner.cli import main
from runner.errors import StoreError
from runner.experiment_report import report_experiment
from runner.lock import LOCK_NAME, ExperimentLock
from runner.metrics import TIMING_COLUMNS
from runner.run import RunOptions, run_experiment
from runner.store import DB_NAME, Store
from runner.store_check import check_store

_TEXT = """\
experiment: ledger
seeds: 2
real_steps: 400
evaluation: {every: 100, episodes: 2}
environments:
  - label: hall
    grid:
      map: |
        S.~.
        .#.G
      slip: 0.2
    step_limit: 40
agents:
  - {label: q, kind: q_learning}
  - {label: dyna, kind: dyna_q, params: {planning_steps: 5}}
baseline: q
"""
_TRIALS = 4
_POINTS = 5


@pytest.fixture(scope="module")
def pristine(tmp_path_factory) -> Path:
    """A stored experiment with its report, run once; each test works on a copy."""
    root = tmp_path_factory.mktemp("pristine")
    (root / "ledger.yaml").write_text(_TEXT, encoding="utf-8")
    run_experiment(root / "ledger.yaml", results_root=root / "results", options=RunOptions(jobs=1))
    report_experiment(root / "results" / "ledger")
    return root


@pytest.fixture
def work(pristine, tmp_path, monkeypatch) -> Path:
    """A copy of the stored experiment; the working directory is its root, as a user's would be."""
    shutil.copytree(pristine, tmp_path / "w")
    monkeypatch.chdir(tmp_path / "w")
    return tmp_path / "w"


def _folder(work: Path) -> Path:
    return work / "results" / "ledger"


def _rows(folder: Path, frozen: bool = False) -> pd.DataFrame:
    """Stored trials and metric rows with timing columns left out, sorted, as plain values.

    `frozen`: the database lies on a read-only file system (SQLite may then only read it as immutable).
    """
    with sqlite3.connect(f"file:{folder / DB_NAME}{'?immutable=1' if frozen else ''}", uri=True) as conn:
        metrics = pd.read_sql_query("SELECT * FROM metrics ORDER BY trial_id, point", conn)
        trials = pd.read_sql_query("SELECT trial_id, spec FROM trials ORDER BY trial_id", conn)
    conn.close()
    return trials.merge(metrics.drop(columns=list(TIMING_COLUMNS)), on="trial_id")


def _digest(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def _cli(capsys, *args: str) -> tuple[int, str]:
    code = main(list(args))
    err = capsys.readouterr().err
    return code, err


def _one_line(err: str, *fragments: str) -> str:
    lines = [line for line in err.splitlines() if not line.startswith("[")]  # progress bars aside
    assert len(lines) == 1, err
    assert "Traceback" not in err
    for fragment in fragments:
        assert fragment in lines[0], lines[0]
    return lines[0]


def _run(capsys, *extra: str) -> tuple[int, str]:
    return _cli(capsys, "run", "ledger.yaml", "--jobs", "1", "--no-report", *extra)


def test_a_database_truncated_to_zero_bytes_is_refused_not_replaced(work, capsys):
    db = _folder(work) / DB_NAME
    db.write_bytes(b"")
    code, err = _run(capsys)
    assert code == 2
    _one_line(err, "0 bytes", "--start-over")
    assert db.stat().st_size == 0


def test_a_foreign_database_is_refused_and_left_as_it_was(work, capsys):
    db = _folder(work) / DB_NAME
    db.unlink()
    with sqlite3.connect(db) as conn:
        conn.execute("CREATE TABLE accounts (name TEXT, balance REAL)")
        conn.execute("INSERT INTO accounts VALUES ('crane hire', 12.5)")
    conn.close()
    before = _digest(db)
    code, err = _run(capsys)
    assert code == 2
    _one_line(err, "not a stepmeter database")
    assert _digest(db) == before


def test_a_corrupted_page_is_one_line_and_the_file_is_left_as_it_was(work, capsys):
    db = _folder(work) / DB_NAME
    data = bytearray(db.read_bytes())
    page = int.from_bytes(data[16:18], "big")
    assert len(data) >= 4 * page
    data[2 * page : 3 * page] = bytes(range(256)) * (page // 256)
    db.write_bytes(bytes(data))
    before = _digest(db)
    code, err = _run(capsys)
    assert code == 2
    _one_line(err, str(db), "damaged")
    assert _digest(db) == before


def test_a_dropped_metrics_table_makes_run_store_every_trial_again(work, capsys):
    folder = _folder(work)
    before = _rows(folder)
    with sqlite3.connect(folder / DB_NAME) as conn:
        conn.execute("DROP TABLE metrics")
    conn.close()
    code, err = _cli(capsys, "report", str(folder))
    assert code == 2
    _one_line(err, "no such table: metrics")
    code = main(["run", "ledger.yaml", "--jobs", "1", "--no-report"])
    out = capsys.readouterr().out
    assert code == 0
    assert f"{_TRIALS} stored trials incomplete ({_TRIALS} missing metric rows)" in out
    pd.testing.assert_frame_equal(_rows(folder), before)


def test_a_deleted_metric_row_is_refused_by_report_and_its_trial_runs_again(work, capsys):
    folder = _folder(work)
    before = _rows(folder)
    with sqlite3.connect(folder / DB_NAME) as conn:
        conn.execute("DELETE FROM metrics WHERE point = 2 AND trial_id = (SELECT min(trial_id) FROM trials)")
        conn.execute("INSERT INTO metrics (trial_id, point) VALUES ('0000000000000000', 0)")
    conn.close()
    code, err = _cli(capsys, "report", str(folder))
    assert code == 2
    _one_line(err, "1 stored trial incomplete (1 missing metric rows; 1 metric rows of no stored trial)")
    code = main(["run", "ledger.yaml", "--jobs", "1", "--no-report"])
    out = capsys.readouterr().out
    assert code == 0
    assert "1 stored trial incomplete" in out
    assert "1 to run" in out
    pd.testing.assert_frame_equal(_rows(folder), before)


def test_a_tampered_spec_is_run_again_under_its_own_id(work, capsys):
    folder = _folder(work)
    before = _rows(folder)
    with sqlite3.connect(folder / DB_NAME) as conn:
        conn.execute("UPDATE trials SET spec = replace(spec, '\"seed\": 0', '\"seed\": 7') WHERE seed = 0")
    conn.close()
    code = main(["run", "ledger.yaml", "--jobs", "1", "--no-report"])
    out = capsys.readouterr().out
    assert code == 0
    assert "2 stored trials incomplete (2 with a spec that does not hash to its id)" in out
    pd.testing.assert_frame_equal(_rows(folder), before)


@pytest.mark.parametrize(
    ("fault", "fragment"),
    [
        (sqlite3.OperationalError("database or disk is full"), "no space left on the disk"),
        (OSError(errno.ENOSPC, "No space left on device"), "no space left on the disk"),
        (sqlite3.OperationalError("attempt to write a readonly database"), "read-only"),
        (OSError(errno.EACCES, "Permission denied"), "permission denied"),
        (OSError(errno.EROFS, "Read-only file system"), "read-only"),
    ],
    ids=["sqlite-full", "enospc", "sqlite-readonly", "eacces", "erofs"],
)
def test_a_write_fault_mid_run_is_one_line_and_keeps_what_was_stored(work, capsys, monkeypatch, fault, fragment):
    folder = _folder(work)
    with sqlite3.connect(folder / DB_NAME) as conn:
        conn.execute("DELETE FROM metrics WHERE trial_id IN (SELECT trial_id FROM trials WHERE seed = 1)")
        conn.execute("DELETE FROM trials WHERE seed = 1")
    conn.close()
    kept = _rows(folder)
    real_write = run_module.Store.write_trial
    writes = []

    def failing_write(self, *args, **kwargs):
        writes.append(1)
        if len(writes) == 2:
            raise fault
        return real_write(self, *args, **kwargs)

    monkeypatch.setattr(run_module.Store, "write_trial", failing_write)
    code, err = _run(capsys)
    assert code == 2
    _one_line(err, fragment)
    after = _rows(folder)
    assert len(after) == len(kept) + _POINTS  # the first new trial is stored whole, the failed one not at all
    pd.testing.assert_frame_equal(after[after["trial_id"].isin(kept["trial_id"])].reset_index(drop=True), kept)


@pytest.mark.skipif(os.geteuid() == 0, reason="root ignores file modes; the simulated faults above cover it")
def test_a_read_only_results_folder_is_one_line(work, capsys):
    folder = _folder(work)
    with sqlite3.connect(folder / DB_NAME) as conn:
        conn.execute("DELETE FROM metrics WHERE trial_id IN (SELECT trial_id FROM trials WHERE seed = 1)")
        conn.execute("DELETE FROM trials WHERE seed = 1")
    conn.close()
    kept = _rows(folder)
    for path in (folder, *folder.iterdir()):
        path.chmod(0o555 if path.is_dir() else 0o444)
    try:
        code, err = _run(capsys)
    finally:
        for path in (folder, *folder.iterdir()):
            path.chmod(0o755 if path.is_dir() else 0o644)
    assert code == 2
    _one_line(err)
    pd.testing.assert_frame_equal(_rows(folder), kept)


def test_a_full_disk_while_the_report_is_written_is_one_line_and_leaves_no_temporary_file(work, capsys, monkeypatch):
    folder = _folder(work)

    def no_space(path, write, below=None):
        raise OSError(errno.ENOSPC, "No space left on device", str(path))

    monkeypatch.setattr(report_module, "write_atomic", no_space)
    code, err = _cli(capsys, "report", str(folder))
    assert code == 2
    _one_line(err, "no space left on the disk")
    assert not list((folder / "report").glob(".*.tmp"))


def _outside(work: Path) -> Path:
    outside = work / "elsewhere"
    outside.mkdir()
    return outside


def test_a_symlinked_lock_is_refused_and_its_target_untouched(work, capsys):
    folder = _folder(work)
    target = _outside(work) / "precious.txt"
    target.write_text("crane maintenance log\n", encoding="utf-8")
    (folder / LOCK_NAME).unlink(missing_ok=True)
    (folder / LOCK_NAME).symlink_to(target)
    code, err = _run(capsys)
    assert code == 2
    _one_line(err, "refusing to write through a symbolic link", LOCK_NAME)
    assert target.read_text(encoding="utf-8") == "crane maintenance log\n"


def test_a_symlinked_database_is_refused_and_its_target_untouched(work, capsys):
    folder = _folder(work)
    target = _outside(work) / "other.sqlite"
    shutil.move(folder / DB_NAME, target)
    (folder / DB_NAME).symlink_to(target)
    before = _digest(target)
    code, err = _run(capsys)
    assert code == 2
    _one_line(err, "refusing to write through a symbolic link", DB_NAME)
    assert _digest(target) == before


def test_a_symlinked_report_folder_is_refused_and_nothing_lands_outside(work, capsys):
    folder = _folder(work)
    outside = _outside(work)
    shutil.rmtree(folder / "report")
    (folder / "report").symlink_to(outside, target_is_directory=True)
    code, err = _cli(capsys, "report", str(folder))
    assert code == 2
    _one_line(err, "refusing to write through a symbolic link", "report")
    assert list(outside.iterdir()) == []


def test_a_symlinked_figure_is_refused_and_its_target_untouched(work, capsys):
    folder = _folder(work)
    target = _outside(work) / "photo.png"
    target.write_bytes(b"not a figure of ours")
    first = sorted((folder / "report").glob("*.png"))[0]
    first.unlink()
    first.symlink_to(target)
    code, err = _cli(capsys, "report", str(folder))
    assert code == 2
    _one_line(err, "refusing to write through a symbolic link", first.name)
    assert target.read_bytes() == b"not a figure of ours"


def test_report_as_a_file_is_one_line(work, capsys):
    folder = _folder(work)
    shutil.rmtree(folder / "report")
    (folder / "report").write_text("notes\n", encoding="utf-8")
    code, err = _cli(capsys, "report", str(folder))
    assert code == 2
    _one_line(err, "expected a folder but found a file")
    assert (folder / "report").read_text(encoding="utf-8") == "notes\n"


def test_run_lock_as_a_folder_is_one_line(work, capsys):
    folder = _folder(work)
    (folder / LOCK_NAME).unlink(missing_ok=True)
    (folder / LOCK_NAME).mkdir()
    before = _rows(folder)
    code, err = _run(capsys)
    assert code == 2
    _one_line(err, "found a folder", LOCK_NAME)
    pd.testing.assert_frame_equal(_rows(folder), before)


def test_a_stored_value_that_is_not_json_is_one_line(work, capsys):
    folder = _folder(work)
    with sqlite3.connect(folder / DB_NAME) as conn:
        conn.execute("UPDATE meta SET value = '{\"name\": ' WHERE key = 'facts'")
    conn.close()
    code, err = _cli(capsys, "report", str(folder))
    assert code == 2
    _one_line(err, "not valid JSON", "--start-over")


def test_leftover_temporary_files_of_killed_reports_are_removed(work):
    report = _folder(work) / "report"
    leftovers = [report / ".summary.md.4194301.1.tmp", report / ".curves-hall.png.4194302.7.tmp"]
    for leftover in leftovers:
        leftover.write_bytes(b"half a file")
    running = report / f".report.html.{os.getpid()}.99.tmp"  # a writer that still runs keeps its file
    running.write_bytes(b"being written")
    report_experiment(_folder(work))
    assert not any(leftover.exists() for leftover in leftovers)
    assert running.exists()


def test_a_lock_removed_mid_run_stops_the_writer_after_what_it_stored(work, capsys, monkeypatch):
    folder = _folder(work)
    shutil.rmtree(folder)
    real_parallel = run_module.run_parallel

    def deleting_parallel(trials, jobs, on_outcome, *args, **kwargs):
        seen = []

        def then_delete(trial, outcome):
            seen.append(trial)
            if len(seen) == 2:
                (folder / LOCK_NAME).unlink()
            on_outcome(trial, outcome)

        real_parallel(trials, jobs, then_delete, *args, **kwargs)

    monkeypatch.setattr(run_module, "run_parallel", deleting_parallel)
    code, err = _run(capsys)
    assert code == 2
    _one_line(err, "removed or replaced", "run the same command again")
    with Store(folder) as store:
        assert len(store.stored_ids()) == 1


def test_a_replaced_lock_file_is_noticed(tmp_path):
    with ExperimentLock(tmp_path) as lock:
        lock.check_held()
        (tmp_path / LOCK_NAME).unlink()
        (tmp_path / LOCK_NAME).write_text("", encoding="utf-8")
        with pytest.raises(StoreError, match="removed or replaced"):
            lock.check_held()


def test_a_report_snapshot_does_not_see_a_trial_written_meanwhile(work):
    folder = _folder(work)
    with Store(folder) as reader, reader.snapshot():
        first = reader.query("SELECT count(*) FROM trials")[0][0]
        with sqlite3.connect(folder / DB_NAME) as writer:
            writer.execute("DELETE FROM metrics WHERE trial_id = (SELECT min(trial_id) FROM trials)")
            writer.execute("DELETE FROM trials WHERE trial_id = (SELECT min(trial_id) FROM trials)")
        writer.close()
        assert reader.query("SELECT count(*) FROM trials")[0][0] == first == _TRIALS
        assert reader.query("SELECT count(*) FROM metrics")[0][0] == _TRIALS * _POINTS
    with Store(folder) as reader:
        assert reader.query("SELECT count(*) FROM trials")[0][0] == _TRIALS - 1


def test_a_symlinked_write_ahead_log_is_refused_and_its_target_untouched(work, capsys):
    folder = _folder(work)
    target = _outside(work) / "journal.bin"
    target.write_bytes(b"someone else's journal")
    (folder / f"{DB_NAME}-wal").unlink(missing_ok=True)
    (folder / f"{DB_NAME}-wal").symlink_to(target)
    code, err = _run(capsys)
    assert code == 2
    _one_line(err, "refusing to write through a symbolic link", f"{DB_NAME}-wal")
    assert target.read_bytes() == b"someone else's journal"


def test_a_symlinked_experiment_folder_is_refused(work, capsys):
    folder = _folder(work)
    moved = _outside(work) / "ledger"
    shutil.move(folder, moved)
    folder.symlink_to(moved, target_is_directory=True)
    before = _digest(moved / DB_NAME)
    code, err = _run(capsys)
    assert code == 2
    _one_line(err, "would leave the results folder")
    assert _digest(moved / DB_NAME) == before


@contextlib.contextmanager
def _tiny_filesystem(mount_point: Path, size: str, read_only: bool = False) -> Iterator[Path]:
    """A tmpfs of `size` at mount_point (skips the test where mounting is not allowed)."""
    mount_point.mkdir()
    options = f"size={size}" + (",ro" if read_only else "")
    mounted = subprocess.run(["mount", "-t", "tmpfs", "-o", options, "tmpfs", str(mount_point)], capture_output=True)
    if mounted.returncode != 0:
        pytest.skip("mounting a tmpfs is not allowed here; the simulated faults above cover it")
    try:
        yield mount_point
    finally:
        subprocess.run(["umount", "-l", str(mount_point)], capture_output=True, check=False)


def test_a_really_full_disk_is_one_line_and_every_stored_trial_stays_whole(tmp_path, capsys, monkeypatch):
    if shutil.which("mount") is None or os.geteuid() != 0:
        pytest.skip("mounting a tmpfs needs root; the simulated faults above cover it")
    with _tiny_filesystem(tmp_path / "small", "2m") as small:
        (small / "ledger.yaml").write_text(_TEXT.replace("seeds: 2", "seeds: 300"), encoding="utf-8")
        monkeypatch.chdir(small)
        code, err = _run(capsys)
        assert code == 2
        _one_line(err, "no space left on the disk")
        with Store(small / "results" / "ledger") as store:
            health = check_store(store)
            stored = len(store.stored_ids())
        assert health.whole and 0 < stored < 600
        monkeypatch.chdir(tmp_path)


def test_a_really_read_only_file_system_is_one_line_and_loses_nothing(work, tmp_path, capsys, monkeypatch):
    if shutil.which("mount") is None or os.geteuid() != 0:
        pytest.skip("mounting a tmpfs needs root; the simulated faults above cover it")
    before = _rows(_folder(work))
    with _tiny_filesystem(tmp_path / "frozen", "8m") as frozen:
        shutil.copytree(work / "results", frozen / "results")
        shutil.copy(work / "ledger.yaml", frozen / "ledger.yaml")
        subprocess.run(["mount", "-o", "remount,ro", str(frozen)], check=True, capture_output=True)
        monkeypatch.chdir(frozen)
        code, err = _run(capsys)
        assert code == 2
        _one_line(err, "read-only")
        code, err = _cli(capsys, "report", "results/ledger")
        assert code == 2
        _one_line(err, "read-only")
        pd.testing.assert_frame_equal(_rows(frozen / "results" / "ledger", frozen=True), before)
        monkeypatch.chdir(tmp_path)
