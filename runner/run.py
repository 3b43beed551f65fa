"""`stepmeter run`: validate, plan, skip what is stored, run the rest in parallel, store, report."""

from __future__ import annotations

import sys
import threading
from collections.abc import Callable
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import TextIO

from numba.core import event

from runner.cluster import DEFAULT_TIMEOUT, check_address, check_reachable
from runner.config import Experiment, load_experiment
from runner.errors import ConfigError
from runner.limits import CONFIRM_METRIC_ROWS, CONFIRM_TRIALS
from runner.lock import ExperimentLock
from runner.plan import PlannedTrial, plan_trials
from runner.progress import Progress
from runner.provenance import platform_text, versions, worker_threads
from runner.safe_files import remove_leftovers
from runner.schedule import TrialOutcome, run_parallel, warm_up
from runner.start_over import confirm_start_over
from runner.store import Store, experiment_dir, remove_store
from runner.store_check import repair_store
from runner.store_faults import faults_as_store_errors
from runner.wording import count
from runner.workers import default_jobs, stop_workers, worker_thread_caps

__all__ = ["RunOptions", "RunSummary", "experiment_facts", "run_experiment"]


@dataclass
class RunSummary:
    """What one invocation did."""

    folder: Path
    planned: int
    already_stored: int
    ran: int = 0
    failed: list[str] = field(default_factory=list)
    interrupted: bool = False


def experiment_facts(experiment: Experiment) -> dict:
    """The facts the report needs, stored with the experiment so a report never re-reads the YAML."""
    return {
        "name": experiment.name,
        "description": experiment.description,
        "experiment_hash": experiment.text_hash,
        "experiment_text": experiment.text,
        "real_steps": experiment.real_steps,
        "baseline": experiment.baseline,
        "thresholds": {e.label: e.threshold for e in experiment.environments},
        "earning_thresholds": {e.label: e.earning_threshold for e in experiment.environments},
        "measure": experiment.analysis.measure,
        "env_order": [e.label for e in experiment.environments],
        "agent_order": [a.label for a in experiment.agents],
        "consecutive": experiment.analysis.consecutive,
        "changes": {e.label: [c["at"] for c in e.spec.get("changes", [])] for e in experiment.environments},
        "resamples": experiment.analysis.resamples,
        "confidence": experiment.analysis.confidence,
        "costs": asdict(experiment.costs) if experiment.costs else None,
    }


@dataclass(frozen=True)
class RunOptions:
    """How to run an experiment: processes, trial path, per-trial wall limit, and which trials."""

    jobs: int | None = None
    trial_path: str = "auto"
    time_limit: float = 0.0
    start_over: bool = False
    failed_only: bool = False
    cluster: str | None = None
    assume_yes: bool = False
    cluster_timeout: float = DEFAULT_TIMEOUT


def run_experiment(
    path: str | Path,
    *,
    results_root: str | Path = "results",
    options: RunOptions = RunOptions(),
    command: str = "",
    stream: TextIO | None = None,
    ask: Callable[[str], bool] | None = None,
) -> RunSummary:
    """Run every declared trial that is not stored yet; finished trials are committed one by one.

    Only one run may write an experiment at a time (`ExperimentLock`); a second one is refused. An experiment
    larger than the confirmation limits runs only with `options.assume_yes` or when `ask` (a yes/no question to
    the user, given only on a terminal) says yes; so does `options.start_over` when trials are stored.
    """
    out = stream or sys.stdout
    if options.cluster:
        check_address(options.cluster)
    experiment = load_experiment(path)
    _confirm(experiment, options, ask)
    trials = plan_trials(experiment)
    folder = experiment_dir(results_root, experiment.name)
    print(f"results folder: {folder}{_where_note(results_root)}", file=out)
    with faults_as_store_errors(folder), ExperimentLock(folder) as lock:
        if lock.stale_owner:
            print(f"cleared a stale lock left by a run that no longer exists ({lock.stale_owner})", file=out)
        if options.start_over:
            confirm_start_over(folder, assume_yes=options.assume_yes, ask=ask)
            remove_store(folder)
        remove_leftovers(folder)
        remove_leftovers(folder / "report")
        with Store(folder, create=True) as store:
            health = repair_store(store)
            if not health.whole:
                print(f"{health.describe()}: their rows were removed and they run again", file=out)
            return _run_locked(experiment, trials, store, lock, path, options, command, out)


def _where_note(results_root: str | Path) -> str:
    """Say that a relative --results folder lies under the current directory, which is easy to forget."""
    if Path(results_root).is_absolute():
        return ""
    return f" (under the current directory {Path.cwd()}; --results chooses another folder)"


class _SayCompiling(event.Listener):
    """Says once that numba is compiling, when a compilation has gone on for `after` seconds.

    Loading numba's cache compiles nothing worth a word; only a compilation that lasts is.
    """

    def __init__(self, out: TextIO, after: float = 1.0) -> None:
        self.out = out
        self.after = after
        self.depth = 0
        self.timer: threading.Timer | None = None
        self.said = False

    def on_start(self, _event: event.Event) -> None:
        self.depth += 1
        if self.depth == 1 and not self.said:
            self.timer = threading.Timer(self.after, self._say)
            self.timer.daemon = True
            self.timer.start()

    def on_end(self, _event: event.Event) -> None:
        self.depth -= 1
        if self.depth == 0 and self.timer is not None:
            self.timer.cancel()
            self.timer = None

    def _say(self) -> None:
        if not self.said:
            self.said = True
            print("compiling (first run only; later runs load the compiled code from numba's cache) ...", file=self.out)
            self.out.flush()


def _warm_up_saying_when_compiling(runs: list[tuple[dict, str]], out: TextIO) -> None:
    """Warm the compiled kernels, saying so while numba compiles, so the wait before the first trial is explained."""
    with event.install_listener("numba:compile", _SayCompiling(out)):
        warm_up(runs)


def _confirm(experiment: Experiment, options: RunOptions, ask: Callable[[str], bool] | None) -> None:
    """Stop before anything is written when a large experiment was not confirmed."""
    size = experiment.size
    if options.assume_yes or not size.needs_confirmation():
        return
    what = (
        f"{experiment.file}: experiment {experiment.name!r} declares {size.describe()}, "
        f"over the {CONFIRM_TRIALS:,} trials or {CONFIRM_METRIC_ROWS:,} metric rows that run asks about"
    )
    if ask is not None and ask(f"{what}; run it?"):
        return
    raise ConfigError(f"{what}; not started (pass --yes to run it without asking)")


def _run_locked(
    experiment: Experiment,
    trials: list[PlannedTrial],
    store: Store,
    lock: ExperimentLock,
    path: str | Path,
    options: RunOptions,
    command: str,
    out: TextIO,
) -> RunSummary:
    store.declare(experiment_facts(experiment), trials)
    stored = store.stored_ids()
    todo = [t for t in trials if t.trial_id not in stored]
    if options.failed_only:
        failed = store.failed_ids()
        todo = [t for t in todo if t.trial_id in failed]
    summary = RunSummary(store.folder, len(trials), len(trials) - len([t for t in trials if t.trial_id not in stored]))
    n_jobs = max(1, min(options.jobs or default_jobs(), len(todo) or 1))
    where = f"the cluster at {options.cluster}" if options.cluster else count(n_jobs, "process")
    which = "previously failed trials" if options.failed_only else "to run"
    print(
        f"experiment {experiment.name}: {count(len(trials), 'trial')} declared, {summary.already_stored:,} already "
        f"stored, {len(todo):,} {which} on {where}",
        file=out,
    )
    if n_jobs == 1 or options.cluster or not todo:
        stop_workers()  # the command line may have started workers early; this run needs none
    if not todo:
        return summary
    if options.cluster:
        check_reachable(options.cluster, options.cluster_timeout)
    recorded = versions()
    if n_jobs > 1 and not options.cluster:
        recorded.update(worker_threads(worker_thread_caps()))
    run_id = store.begin_run(
        command=command or " ".join(sys.argv),
        experiment_file=str(Path(path).resolve()),
        experiment_text=experiment.text,
        experiment_hash=experiment.text_hash,
        versions=recorded,
        platform=platform_text(),
        jobs=n_jobs,
    )
    progress = Progress(len(todo))

    def keep(trial: PlannedTrial, outcome: TrialOutcome) -> None:
        lock.check_held()
        if outcome.rows is None:
            store.write_failure(trial.trial_id, run_id, outcome.error_type, outcome.message, outcome.traceback)
            summary.failed.append(
                f"{trial.env_label} / {trial.agent_label} / seed {trial.seed}: {outcome.error_type}: {outcome.message}"
            )
        else:
            store.write_trial(trial, run_id, outcome.rows, outcome.trial_path)
        progress.advance(failed=outcome.rows is None)

    outcome = "aborted"
    try:
        if n_jobs == 1 and not options.cluster:  # workers load their own kernels
            _warm_up_saying_when_compiling([(t.spec, options.trial_path) for t in todo], out)
        progress.restart()
        run_parallel(
            todo, n_jobs, keep, options.trial_path, options.time_limit, options.cluster, options.cluster_timeout
        )
        outcome = "failures" if summary.failed else "complete"
    except KeyboardInterrupt:
        summary.interrupted = True
        outcome = "interrupted"
    finally:
        progress.close()
        summary.ran = store.count_trials(run_id)
        store.end_run(run_id, outcome)
    return summary
