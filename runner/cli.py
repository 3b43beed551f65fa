"""The `stepmeter` command: run, check, report and list."""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from runner import __version__
from runner.errors import (
    ClusterError,
    ConfigError,
    EnvironmentSourceError,
    ExperimentBusyError,
    StoreError,
    UnknownKindError,
    UntrustedCodeError,
)
from runner.store_faults import faults_as_store_errors
from runner.trust import TRUST_FLAG
from runner.wording import count

__all__ = ["main"]

_USER_ERRORS = (
    ClusterError,
    ConfigError,
    EnvironmentSourceError,
    StoreError,
    ExperimentBusyError,
    UnknownKindError,
    UntrustedCodeError,
)


def _parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="stepmeter",
        description="How many real environment steps does learning a model and planning with it save?",
    )
    parser.add_argument("--version", action="version", version=f"stepmeter {__version__}")
    sub = parser.add_subparsers(dest="command", required=True, metavar="COMMAND")

    run = sub.add_parser("run", help="run an experiment's trials (skipping stored ones), then write its report")
    run.add_argument("experiment", help="the experiment YAML file")
    run.add_argument("--jobs", type=int, default=None, help="worker processes (default: all cores)")
    run.add_argument("--results", default="results", help="folder that holds experiment results (default: results)")
    run.add_argument("--no-report", action="store_true", help="do not write the report at the end")
    run.add_argument(
        "--path",
        choices=("auto", "compiled", "gymnasium"),
        default="auto",
        help="auto (default): whole trials in compiled code for agent kinds with compiled kernels on table-backed "
        "environments or on compiled dynamics (through bins, or as a box for kinds that take boxes), else step by step "
        "through gymnasium, which also measures function models' errors; gymnasium "
        "forces the step-by-step path",
    )

    run.add_argument(
        "--trial-timeout",
        type=float,
        default=0.0,
        metavar="SECONDS",
        help="store a trial as failed when it runs longer than this many wall seconds (default: no limit)",
    )
    run.add_argument(
        "--yes",
        action="store_true",
        help="answer yes for you: run an experiment of more than 100,000 trials or 10 million metric rows, "
        "and let --start-over delete stored trials, without asking",
    )
    run.add_argument(
        "--start-over",
        action="store_true",
        help="delete the experiment's stored results first (asks on a terminal; elsewhere needs --yes)",
    )
    run.add_argument("--failed-only", action="store_true", help="run only trials that failed before")
    run.add_argument(
        "--cluster",
        metavar="ADDRESS",
        default=None,
        help="run trials on the dask.distributed scheduler at ADDRESS (e.g. tcp://10.0.0.5:8786); "
        "needs pip install '.[cluster]'; use only a cluster you trust (it exchanges pickled tasks)",
    )
    run.add_argument(
        "--cluster-timeout",
        type=float,
        default=10.0,
        metavar="SECONDS",
        help="give up on the cluster when its scheduler does not answer, or no worker joins, within this many "
        "seconds (default 10)",
    )

    rerun = sub.add_parser("rerun", help="re-run stored trials and check that their rows come out bit for bit")
    rerun.add_argument("folder", help="the experiment's results folder, e.g. results/warehouse-spills")
    rerun.add_argument("trial_ids", nargs="*", metavar="TRIAL_ID", help="trial ids (or unique prefixes)")
    rerun.add_argument("--sample", type=int, default=None, metavar="K", help="check K stored trials at random")
    rerun.add_argument("--all", action="store_true", help="check every stored trial")
    rerun.add_argument("--seed", type=int, default=0, help="seed of the random sample (default 0)")
    rerun.add_argument(
        TRUST_FLAG,
        action="store_true",
        help="let stored specs import code outside stepmeter (your own agent kinds and environment classes); "
        "only for results folders whose writers you trust",
    )

    show = sub.add_parser(
        "show", help="re-run one stored trial: its spec, its rows and, on grid maps, the greedy policy it learned"
    )
    show.add_argument("folder", help="the experiment's results folder, e.g. results/warehouse-spills")
    show.add_argument("trial_id", metavar="TRIAL_ID", help="a trial id (or a unique prefix) as in trial_scores.csv")
    show.add_argument(
        TRUST_FLAG,
        action="store_true",
        help="let the stored spec import code outside stepmeter; only for results folders whose writers you trust",
    )

    compare = sub.add_parser(
        "compare", help="one report of several results folders whose environments and protocols match"
    )
    compare.add_argument("folders", nargs="+", metavar="RESULTS", help="two or more results folders")
    compare.add_argument(
        "--out", default="comparison", help="where to write the report (default: comparison, in the current directory)"
    )

    seeds = sub.add_parser("seeds", help="how many seeds an experiment needs to detect given AUC differences")
    seeds.add_argument("folder", help="a stored (pilot) experiment's results folder")
    seeds.add_argument(
        "--difference",
        type=float,
        action="append",
        metavar="D",
        help="an AUC difference to detect, in return units (repeat for several; default 5%%, 10%% and 20%% of each "
        "environment's return range, as in the report)",
    )
    seeds.add_argument("--alpha", type=float, default=0.05, help="significance level (default 0.05)")
    seeds.add_argument("--power", type=float, default=0.8, help="wanted power (default 0.8)")

    check = sub.add_parser("check", help="validate an experiment and print how many trials it declares")
    check.add_argument("experiment", help="the experiment YAML file")

    report = sub.add_parser("report", help="write figures and tables of a stored experiment")
    report.add_argument("folder", help="the experiment's results folder, e.g. results/warehouse-spills")
    report.add_argument("--out", default=None, help="where to write (default: FOLDER/report)")

    migrate = sub.add_parser("migrate", help="carry a results folder of the previous release over to this one")
    migrate.add_argument("folder", help="the results folder, e.g. results/warehouse-spills")

    listing = sub.add_parser(
        "list", help="list agent kinds with their parameters and tags, and environment sources with their keys"
    )
    listing.add_argument("what", nargs="?", choices=("agents", "environments"), default=None)
    return parser


def main(argv: list[str] | None = None) -> int:
    """Entry point; user errors print one line and exit 2, never a traceback."""
    args = _parser().parse_args(argv)
    try:
        if args.command == "run":
            return _run(args)
        if args.command == "check":
            return _check(args)
        if args.command == "report":
            with faults_as_store_errors(args.folder):
                return _report(Path(args.folder), args.out)
        if args.command == "rerun":
            with faults_as_store_errors(args.folder):
                return _rerun(args)
        if args.command == "seeds":
            with faults_as_store_errors(args.folder):
                return _seeds(args)
        if args.command == "show":
            return _show(args)
        if args.command == "compare":
            return _compare(args)
        if args.command == "migrate":
            with faults_as_store_errors(args.folder):
                return _migrate(Path(args.folder))
        return _list(args.what)
    except _USER_ERRORS as err:
        print(f"stepmeter: error: {' '.join(str(err).split())}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("stepmeter: stopped; finished trials are kept", file=sys.stderr)
        return 130
    except BrokenPipeError:
        return 1


def _migrate(folder: Path) -> int:
    from runner.store import DB_NAME, migrate_store

    previous, trials = migrate_store(folder)
    print(f"{folder / DB_NAME}: {trials} trials carried over from {previous.name} (kept as it was)")
    return 0


def _run(args: argparse.Namespace) -> int:
    if args.jobs is not None and args.jobs < 1:
        print(f"stepmeter: error: --jobs: expected a whole number >= 1, got {args.jobs}", file=sys.stderr)
        return 2
    if args.trial_timeout < 0:
        print(f"stepmeter: error: --trial-timeout: expected seconds >= 0, got {args.trial_timeout}", file=sys.stderr)
        return 2
    if not args.cluster_timeout > 0:
        print(f"stepmeter: error: --cluster-timeout: expected seconds > 0, got {args.cluster_timeout}", file=sys.stderr)
        return 2
    from runner.workers import default_jobs, start_workers, stop_workers

    if not args.cluster:  # workers import while this process reads, plans and opens the store
        start_workers(args.jobs or default_jobs())
    try:
        return _run_started(args)
    except BaseException:
        stop_workers()
        raise


def _run_started(args: argparse.Namespace) -> int:
    from runner.run import RunOptions, run_experiment

    options = RunOptions(
        jobs=args.jobs,
        trial_path=args.path,
        time_limit=args.trial_timeout,
        start_over=args.start_over,
        failed_only=args.failed_only,
        cluster=args.cluster,
        assume_yes=args.yes,
        cluster_timeout=args.cluster_timeout,
    )
    summary = run_experiment(
        args.experiment,
        results_root=args.results,
        options=options,
        command=" ".join(sys.argv),
        ask=_ask if sys.stdin.isatty() else None,
    )
    if summary.interrupted:
        again = "the command again without --start-over" if args.start_over else "the same command again"
        print(
            f"stopped: {count(summary.ran, 'trial')} finished in this run {'is' if summary.ran == 1 else 'are'} "
            f"stored in {summary.folder}; run {again} to keep them and finish the rest",
            file=sys.stderr,
        )
        return 130
    for line in summary.failed:
        print(f"failed: {line}", file=sys.stderr)
    if not args.no_report and summary.planned > len(summary.failed):
        print(f"writing the report of {summary.folder} ...", flush=True)
        with faults_as_store_errors(summary.folder):
            _report(summary.folder, None)
    if summary.failed:
        print(
            f"{count(len(summary.failed), 'trial')} failed; their errors are stored in {summary.folder}",
            file=sys.stderr,
        )
        return 1
    return 0


def _ask(question: str) -> bool:
    """A yes/no question on the terminal; anything but y or yes is no."""
    try:
        return input(f"{question} [y/N] ").strip().lower() in ("y", "yes")
    except EOFError:
        return False


def _rerun(args: argparse.Namespace) -> int:
    from runner.rerun import rerun_trials, select_trials

    if args.sample is not None and args.sample < 1:
        print(f"stepmeter: error: rerun --sample: expected a whole number >= 1, got {args.sample}", file=sys.stderr)
        return 2
    if args.trial_ids and (args.sample or args.all):
        print("stepmeter: error: rerun: give TRIAL_ID(s), or --sample K, or --all; not several", file=sys.stderr)
        return 2
    if not (args.trial_ids or args.sample or args.all):
        print("stepmeter: error: rerun: give TRIAL_ID(s), --sample K or --all", file=sys.stderr)
        return 2
    ids = select_trials(Path(args.folder), args.trial_ids, args.sample, args.all, args.seed)
    checks = rerun_trials(Path(args.folder), ids, trust_code=args.trust_code)
    for check in checks:
        verdict = "same rows bit for bit" if check.matched else f"DIFFERENT: {check.difference}"
        print(f"{check.trial_id}  {check.label}  ({check.trial_path} path): {verdict}")
        for line in check.provenance:
            print(f"    differs from the stored run: {line}")
    mismatched = sum(not c.matched for c in checks)
    print(f"{len(checks) - mismatched} of {len(checks)} re-run trials reproduced their stored rows")
    return 1 if mismatched else 0


def _compare(args: argparse.Namespace) -> int:
    from runner.compare_results import compare_folders

    output, note = compare_folders(args.folders, args.out)
    print(output.terminal_text)
    if note:
        print(note)
    print(f"comparison of {count(len(args.folders), 'results folder')} written to {Path(args.out).resolve()}")
    return 0


def _show(args: argparse.Namespace) -> int:
    from runner.show import show_trial

    shown = show_trial(Path(args.folder), args.trial_id, trust_code=args.trust_code)
    print(shown.text())
    return 0 if shown.difference is None else 1


def _seeds(args: argparse.Namespace) -> int:
    import pandas as pd

    from runner.analysis.curves import trial_scores
    from runner.analysis.frames import load_results, open_store
    from runner.analysis.power import ADVICE_SHARES, advice_table

    differences = args.difference
    if any(d <= 0 for d in differences or []) or not 0 < args.alpha < 1 or not 0 < args.power < 1:
        print("stepmeter: error: seeds: differences must be > 0, alpha and power in (0, 1)", file=sys.stderr)
        return 2
    with open_store(args.folder) as store:
        facts = store.facts()
    frame = load_results(args.folder, params=False)
    scores = trial_scores(frame)
    if scores.empty:
        print(f"stepmeter: error: {args.folder}: no stored trials to learn the spread of AUC from", file=sys.stderr)
        return 2
    asked = (
        "AUC differences in return units (" + ", ".join(f"{d:g}" for d in differences) + ")"
        if differences
        else "AUC differences of " + ", ".join(f"{s:.0%}" for s in ADVICE_SHARES) + " of each environment's "
        "return range (highest minus lowest stored evaluation return), as in the report's seeds advice"
    )
    print(
        f"seeds needed per agent to detect {asked}, by a two-sided two-sample t-test at alpha {args.alpha:g} and "
        f"power {args.power:g}, from this experiment's spread between seeds (a guide: few pilot seeds give "
        "uncertain spreads); each agent against the baseline and against the agent ranked just above it"
    )
    ranges = frame.groupby("env", sort=False)["eval_return"].agg(lambda r: r.max() - r.min())
    for env in facts["env_order"]:
        if env not in ranges.index:
            continue
        advice = advice_table(
            scores,
            env,
            float(ranges[env]),
            baseline=facts["baseline"],
            agent_order=facts["agent_order"],
            differences=differences,
            alpha=args.alpha,
            power=args.power,
        )
        if advice.empty:
            continue
        print(f"\n{env} (return range {ranges[env]:.4g})")
        for row in advice.itertuples():
            needed = "more than 10,000 (or an unknown number of)" if row.seeds_needed is pd.NA else row.seeds_needed
            print(
                f"  {row.agent_a} vs {row.agent_b} ({row.pair}): AUC difference {row.difference:.4g} "
                f"({row.share_of_range:.0%} of the range) needs {needed} seeds each "
                f"(pilot sds {row.sd_a:.3g} and {row.sd_b:.3g} over {row.n_a} and {row.n_b} seeds; "
                f"power now {row.power_now:.0%})"
            )
    return 0


def _check(args: argparse.Namespace) -> int:
    from runner.check_listing import check_listing
    from runner.config import load_experiment
    from runner.threshold_check import threshold_warnings

    experiment = load_experiment(args.experiment)
    size = experiment.size
    print(
        f"{experiment.file}: experiment {experiment.name!r} is valid: "
        f"{count(len(experiment.environments), 'environment')} x {count(len(experiment.agents), 'agent variant')} x "
        f"{count(len(experiment.seeds), 'seed')} = {count(size.trials, 'trial')} of "
        f"{count(experiment.real_steps, 'real step')}"
    )
    print(f"expected: {size.describe()}")
    if size.needs_confirmation():
        print("run will ask before starting an experiment this large (--yes answers for you)")
    for line in check_listing(experiment):
        print(line)
    print(f"baseline: {experiment.baseline or 'none'}; primary measure: {experiment.analysis.measure}")
    for line in threshold_warnings(experiment):
        print(line)
    return 0


def _report(folder: Path, out: str | None) -> int:
    from runner.experiment_report import report_experiment

    output, note = report_experiment(folder, out)
    print(output.terminal_text)
    print(note)
    where = output.files[0].parent if output.files else folder
    print(f"report written to {where}")
    return 0


def _list(what: str | None) -> int:
    from runner.agents import AGENTS, agent_class
    from runner.envs.dynamics import DYNAMICS
    from runner.envs.grid import CELL_MEANINGS
    from runner.envs.sources import COMMON_KEYS, SOURCES

    if what in (None, "agents"):
        print("agent kinds (use as `kind:`; parameters go under `params:`; a list of values tries each):")
        for kind in AGENTS.names():
            cls = agent_class(kind)
            print(f"\n  {kind}: {cls.summary}")
            print(f"    source: {cls.source}")
            print(f"    takes: {cls.tags.describe()}")
            for p in cls.schema:
                role = f" [{p.role}]" if p.role else ""
                print(f"    {p.name:<18} {p.type:<6} default {p.default!r:<12} {p.expected()}; {p.meaning}{role}")
        print(
            "\n  package.module:Class: your own agent in any framework, run step by step (see runner/agents/own.py "
            "and the README's example)"
        )
    if what in (None, "environments"):
        print("\nenvironment sources (one per environment entry):")
        for source in SOURCES.values():
            print(f"\n  {source.name}: {source.summary}")
            print(f"    gives: {source.gives}")
            for key, meaning in source.keys:
                print(f"    {key:<18} {meaning}")
            for p in source.schema:
                print(f"    {p.name:<18} {p.type:<6} default {p.default!r:<12} {p.expected()}; {p.meaning}")
        print("\nkeys of every environment entry:")
        for key, meaning in COMMON_KEYS:
            print(f"  {key:<18} {meaning}")
        print("\ngrid map cells:")
        for cell, meaning in CELL_MEANINGS.items():
            print(f"  {cell}  {meaning}")
        print("\ngymnasium ids with compiled dynamics (box observations; the tabular kinds need `bins:`):")
        for spec in DYNAMICS.values():
            actions = (
                f"{spec.action_size} discrete actions"
                if spec.action_kind == "discrete"
                else f"box action in [{spec.action_low:g}, {spec.action_high:g}]"
            )
            print(f"  {spec.env_id:<38} {spec.obs_size} numbers, {actions}; {spec.summary}")
        print(
            "\nbuilt-in game: entry runner.envs.takeaway:TakeAwayGame with options heaps, opponent (random or "
            "optimal), illegal_reward, start (heaps or random); agents that search game rules (negamax_search) need it"
        )
    return 0
