"""Run trials in parallel with joblib; only the parent process writes to the store.

Compiled kernels are warmed in the parent first, which fills numba's on-disk cache, so worker processes
load them instead of compiling them again.
"""

from __future__ import annotations

import signal
import traceback
from collections.abc import Callable, Iterator
from dataclasses import dataclass
from typing import Any

import numpy as np
from joblib import Parallel, delayed

from runner.agents import make_agent
from runner.plan import PlannedTrial
from runner.streams import new_stream
from runner.trial import run_trial

__all__ = ["TrialOutcome", "execute_trial", "run_parallel", "warm_up"]


@dataclass
class TrialOutcome:
    """What a worker sends back: rows on success, or the error of a failed trial."""

    trial_id: str
    rows: dict[str, np.ndarray] | None
    trial_path: str
    error_type: str = ""
    message: str = ""
    traceback: str = ""


def _ignore_interrupts() -> None:
    """In a worker process, leave Ctrl-C to the parent, which stops the pool and keeps finished trials."""
    if signal.getsignal(signal.SIGINT) is not signal.SIG_IGN:
        signal.signal(signal.SIGINT, signal.SIG_IGN)


def execute_trial(trial_id: str, spec: dict[str, Any], in_worker: bool = False) -> TrialOutcome:
    """Run one trial; any exception or non-finite metric becomes a failed outcome."""
    if in_worker:
        _ignore_interrupts()
    try:
        result = run_trial(spec)
        for name, column in result.rows.items():
            if name != "train_return" and not np.all(np.isfinite(column)):
                raise FloatingPointError(f"metric {name!r} has a non-finite value")
        return TrialOutcome(trial_id, result.rows, result.trial_path)
    except Exception as err:
        return TrialOutcome(trial_id, None, "", type(err).__name__, str(err), traceback.format_exc())


def warm_up(kinds: set[str]) -> None:
    """Compile (or load from cache) every kernel the study's agent kinds use, in this process."""
    for kind in sorted(kinds):
        agent = make_agent(kind, {})
        agent.setup(3, 2, 0)
        for terminated in (False, True):
            action = agent.act(0)
            agent.observe(0, action, 0.0, 1, terminated)
        agent.greedy(0, new_stream(1))


def run_parallel(
    trials: list[PlannedTrial], jobs: int, on_outcome: Callable[[PlannedTrial, TrialOutcome], None]
) -> None:
    """Run every trial on `jobs` processes (1: in this process), calling on_outcome as each finishes."""
    by_id = {t.trial_id: t for t in trials}
    outcomes: Iterator[TrialOutcome]
    if jobs == 1:
        outcomes = (execute_trial(t.trial_id, t.spec) for t in trials)
    else:
        outcomes = Parallel(n_jobs=jobs, return_as="generator_unordered")(
            delayed(execute_trial)(t.trial_id, t.spec, in_worker=True) for t in trials
        )
    for outcome in outcomes:
        on_outcome(by_id[outcome.trial_id], outcome)
