"""numba's disk cache goes to a user folder when the installed package cannot be written."""

import os
import subprocess
import sys
from pathlib import Path

from runner import _numba_cache


def test_read_only_package_sends_the_cache_to_the_user_folder(monkeypatch, tmp_path):
    monkeypatch.delenv("NUMBA_CACHE_DIR", raising=False)
    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path))
    monkeypatch.setattr(_numba_cache.os, "access", lambda path, mode: False)
    _numba_cache.ensure_numba_cache_dir()
    assert os.environ["NUMBA_CACHE_DIR"] == str(tmp_path / "stepmeter" / "numba")
    assert (tmp_path / "stepmeter" / "numba").is_dir()


def test_a_cache_folder_the_user_chose_is_kept(monkeypatch, tmp_path):
    monkeypatch.setenv("NUMBA_CACHE_DIR", str(tmp_path / "mine"))
    monkeypatch.setattr(_numba_cache.os, "access", lambda path, mode: False)
    _numba_cache.ensure_numba_cache_dir()
    assert os.environ["NUMBA_CACHE_DIR"] == str(tmp_path / "mine")


def test_an_unwritable_user_folder_never_fails_the_import(monkeypatch, tmp_path):
    blocker = tmp_path / "file"
    blocker.write_text("not a folder")
    monkeypatch.delenv("NUMBA_CACHE_DIR", raising=False)
    monkeypatch.setenv("XDG_CACHE_HOME", str(blocker))
    monkeypatch.setattr(_numba_cache.os, "access", lambda path, mode: False)
    _numba_cache.ensure_numba_cache_dir()
    assert "NUMBA_CACHE_DIR" not in os.environ


def test_a_fresh_process_compiles_into_the_chosen_cache(tmp_path):
    """End to end: a trial run in a new process writes its compiled kernels into NUMBA_CACHE_DIR."""
    env = dict(os.environ, NUMBA_CACHE_DIR=str(tmp_path))
    code = (
        "from runner.checks import CORRIDOR\n"
        "from runner.agents.q_learning import QLearning\n"
        "from runner.trial import run_trial\n"
        "spec = {'format': 1, 'env': CORRIDOR, 'agent': {'kind': 'q_learning', 'params': QLearning().get_params()},"
        " 'seed': 0, 'real_steps': 10,"
        " 'evaluation': {'every': 5, 'episodes': 1, 'step_cap': 5, 'training_window': 2}}\n"
        "print(run_trial(spec).trial_path)\n"
    )
    out = subprocess.run([sys.executable, "-c", code], env=env, capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "compiled"
    assert any(p.suffix == ".nbi" for p in Path(tmp_path).rglob("*"))
