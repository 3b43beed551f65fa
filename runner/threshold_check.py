"""Warnings for thresholds no agent can reach, found by solving the true table (`stepmeter check`).

A greedy-return threshold above the best expected return within the evaluation step cap, or an earning
threshold above the best long-run reward per real step, can never be met: every trial would be censored and
the report would compare nothing. Only table-backed environments are judged (grid maps, gymnasium's toy-text
tables, the take-away game); a changing map is judged phase by phase, since a threshold out of reach after a
change means no agent can be seen to adapt.
"""

from __future__ import annotations

from runner.config import EnvironmentDecl, Experiment
from runner.envs.sources import build_env
from runner.envs.table import TransitionTable, change_steps, phase_tables, why_not_table_backed
from runner.planning.horizon import best_earning_rate, best_return
from runner.yaml_source import format_path, read_yaml

__all__ = ["threshold_warnings"]

# A threshold counts as above the best only beyond this margin (the best is computed in floating point).
_MARGIN = 1e-9


def _tables(env: EnvironmentDecl) -> tuple[tuple[TransitionTable, ...], tuple[int, ...]]:
    """The true table of every phase of a table-backed environment, and its change steps; () when not one."""
    built = build_env(env.spec)
    try:
        if why_not_table_backed(built) is not None:
            return (), ()
        return phase_tables(built), change_steps(built)
    finally:
        built.close()


def _phase_text(phase: int, changes: tuple[int, ...]) -> str:
    """Which phase a best value belongs to, for changing maps only."""
    if not changes:
        return ""
    if phase == 0:
        return f" in phase 1 (before the change at {changes[0]:,} real steps)"
    return f" in phase {phase + 1} (after the change at {changes[phase - 1]:,} real steps)"


def threshold_warnings(experiment: Experiment) -> list[str]:
    """One line per threshold above the best possible value, as "file:line: key path: warning: ...", and one
    note per environment whose thresholds cannot be checked (not table-backed).

    Greedy-return thresholds are compared with `best_return` within the environment's evaluation step cap;
    earning thresholds with `best_earning_rate`.
    """
    src = read_yaml(experiment.file)
    lines = []
    for i, env in enumerate(experiment.environments):
        if env.threshold is None and env.earning_threshold is None:
            continue
        tables, changes = _tables(env)
        if not tables:
            declared = [k for k in ("threshold", "earning_threshold") if k in src.data["environments"][i]]
            path = ("environments", i, declared[0]) if declared else ("environments", i)
            lines.append(
                f"{src.file}:{src.line(path)}: {format_path(path)}: note: not checked against the best possible "
                f"value: {env.label!r} is not table-backed, so no true table can be solved; make sure it can be "
                "reached (e.g. from a hand-made policy or a pilot run)"
            )
        for phase, table in enumerate(tables):
            where = _phase_text(phase, changes)
            if env.threshold is not None:
                best = best_return(table, env.step_cap)
                if env.threshold > best + _MARGIN:
                    path = ("environments", i, "threshold")
                    lines.append(
                        f"{src.file}:{src.line(path)}: {format_path(path)}: warning: {env.threshold:g} is above the "
                        f"best possible expected return{where}, {best:.4g} within the evaluation cap of "
                        f"{env.step_cap} steps (solved on the true table): no agent can reach it"
                    )
            if env.earning_threshold is not None:
                best = best_earning_rate(table)
                if env.earning_threshold > best + _MARGIN:
                    path = ("environments", i, "earning_threshold")
                    lines.append(
                        f"{src.file}:{src.line(path)}: {format_path(path)}: warning: {env.earning_threshold:g} is "
                        f"above the best possible reward per real step{where}, {best:.4g} (solved on the true "
                        "table, episodes restarting): no agent can earn it"
                    )
    return lines
