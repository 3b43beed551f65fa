"""Limits that limit: --trial-timeout wherever the trial is (evaluation included, both paths), and the cluster
connection's address check and time-out (a port that accepts and never answers)."""

import socket
import threading
import time
from pathlib import Path

import pytest

from runner.cluster import check_address
from runner.config import load_experiment
from runner.errors import ClusterError
from runner.lock import LOCK_NAME
from runner.plan import plan_trials
from runner.run import RunOptions, run_experiment
from runner.schedule import ALARM_GRACE, execute_trial

# The goal is walled off, so a greedy evaluation wanders until its step cap of a billion steps (hours).
_WALLED = """\
experiment: walled
seeds: 1
real_steps: {steps}
evaluation: {{every: {every}, episodes: 1, step_cap: 1000000000}}
environments:
  - label: walled hall
    grid:
      map: |
        S.#G
        ..#.
agents:
  - {{label: dyna, kind: dyna_q, params: {{planning_steps: {planning}}}}}
"""


def _spec(tmp_path: Path, steps: int = 200, every: int = 100, planning: int = 5) -> dict:
    path = tmp_path / "walled.yaml"
    path.write_text(_WALLED.format(steps=steps, every=every, planning=planning), encoding="utf-8")
    return plan_trials(load_experiment(path))[0].spec


@pytest.mark.parametrize("path", ["compiled", "gymnasium"])
def test_the_trial_timeout_stops_an_evaluation_that_would_run_for_hours(tmp_path, path):
    spec = _spec(tmp_path)
    small = {**spec, "evaluation": {**spec["evaluation"], "step_cap": 5}}
    assert execute_trial("warm", small, path).rows is not None  # compiles (or loads) the loop first
    started = time.perf_counter()
    outcome = execute_trial("walled", spec, path, time_limit=0.5)
    seconds = time.perf_counter() - started
    assert outcome.rows is None and outcome.error_type == "TrialTimeout", outcome.message
    assert seconds < 2.5, seconds


def test_the_trial_timeout_stops_slow_training_steps_on_the_compiled_path(tmp_path):
    spec = _spec(tmp_path, steps=2_000_000, every=2_000_000, planning=2_000)
    small = {**spec, "real_steps": 4, "evaluation": {**spec["evaluation"], "every": 2, "step_cap": 5}}
    assert execute_trial("warm", small, "compiled").rows is not None
    started = time.perf_counter()
    outcome = execute_trial("slow", {**spec, "evaluation": {**spec["evaluation"], "step_cap": 5}}, "compiled", 0.5)
    seconds = time.perf_counter() - started
    assert outcome.error_type == "TrialTimeout", outcome.message
    assert seconds < 2.5, seconds


@pytest.mark.parametrize(
    "address", ["nonsense", "tcp://host", "tcp://host:port", "tcp://:8786", "host:99999", "tcp://a b:1"]
)
def test_a_malformed_cluster_address_is_one_line(address):
    with pytest.raises(ClusterError, match="expected a scheduler address like tcp://HOST:8786"):
        check_address(address)


@pytest.mark.parametrize(
    ("address", "parts"),
    [("tcp://10.0.0.5:8786", ("tcp", "10.0.0.5", 8786)), ("node7:8786", ("tcp", "node7", 8786)),
     ("tls://[::1]:8786", ("tls", "::1", 8786))],
)  # fmt: skip
def test_well_formed_cluster_addresses_are_taken_apart(address, parts):
    assert check_address(address) == parts


_SMALL = """\
experiment: silent
seeds: 1
real_steps: 100
evaluation: {every: 50, episodes: 1}
environments:
  - label: hall
    grid:
      map: |
        S..G
agents:
  - {label: q, kind: q_learning}
"""


def test_a_port_that_accepts_and_never_answers_is_one_line_within_the_timeout_and_frees_the_lock(tmp_path):
    listener = socket.create_server(("127.0.0.1", 0))
    accepted = []

    def accept_and_stay_silent():
        listener.settimeout(20)
        try:
            conn, _ = listener.accept()
            accepted.append(conn)
        except OSError:
            pass

    thread = threading.Thread(target=accept_and_stay_silent, daemon=True)
    thread.start()
    (tmp_path / "silent.yaml").write_text(_SMALL, encoding="utf-8")
    address = f"tcp://127.0.0.1:{listener.getsockname()[1]}"
    started = time.monotonic()
    try:
        with pytest.raises(ClusterError, match=f"no dask scheduler answered at '{address}' within 1 s"):
            run_experiment(
                tmp_path / "silent.yaml",
                results_root=tmp_path / "results",
                options=RunOptions(jobs=1, cluster=address, cluster_timeout=1.0),
            )
        seconds = time.monotonic() - started
    finally:
        listener.close()
        thread.join(timeout=20)
        for conn in accepted:
            conn.close()
    assert accepted, "the run never connected"
    assert seconds < 10, seconds
    assert (tmp_path / "results" / "silent" / LOCK_NAME).read_text(encoding="utf-8") == ""


def test_a_malformed_cluster_address_stops_the_run_before_anything_is_written(tmp_path):
    (tmp_path / "silent.yaml").write_text(_SMALL, encoding="utf-8")
    with pytest.raises(ClusterError, match="expected a scheduler address"):
        run_experiment(
            tmp_path / "silent.yaml", results_root=tmp_path / "results", options=RunOptions(cluster="tcp://host")
        )
    assert not (tmp_path / "results").exists()


def test_a_single_step_that_runs_for_long_is_stopped_after_the_limit(monkeypatch):
    """A step that never returns to the loop (e.g. an own agent training for minutes inside one call) is ended by
    the alarm a second past the limit, and the trial is a failed outcome, not a hang."""

    def one_endless_step(spec, path, time_limit):
        deadline = time.monotonic() + 60.0
        while time.monotonic() < deadline:
            time.sleep(0.01)
        raise AssertionError("the step was not interrupted")

    monkeypatch.setattr("runner.schedule.run_trial", one_endless_step)
    started = time.monotonic()
    outcome = execute_trial("0" * 16, {}, "auto", time_limit=0.5)
    took = time.monotonic() - started
    assert outcome.rows is None
    assert outcome.error_type == "TrialTimeout", outcome.traceback
    assert "inside one step" in outcome.message
    assert 0.5 + ALARM_GRACE - 0.05 <= took < 0.5 + ALARM_GRACE + 1.0
