"""What `stepmeter check` lists under each environment: agent variants, long lists of variants summarised.

An experiment of 1,000 values of one parameter lists as one line per agent entry, not 1,000 lines.
"""

from __future__ import annotations

from itertools import groupby

from runner.config import AgentVariant, Experiment
from runner.trial import environment_path

__all__ = ["MAX_AGENT_LINES", "check_listing"]

MAX_AGENT_LINES = 30
"""Most agent lines under one environment; entries past it are counted on one line."""
_LISTED_VARIANTS = 6
"""An entry with more variants than this is summarised on one line."""
_SHOWN_VALUES = 3


def _values(values: list[object]) -> str:
    distinct = list(dict.fromkeys(values))
    if len(distinct) <= 2 * _SHOWN_VALUES:
        return ", ".join(map(str, distinct))
    head, tail = distinct[:_SHOWN_VALUES], distinct[-_SHOWN_VALUES:]
    return f"{', '.join(map(str, head))}, ... {', '.join(map(str, tail))} ({len(distinct)} values)"


def _entry_lines(variants: list[AgentVariant], seeds: int, width: int) -> list[str]:
    if len(variants) <= _LISTED_VARIANTS:
        return [f"    {v.label:<{width}}  {seeds} trials" for v in variants]
    varied = {name: [v.varied[name] for v in variants] for name in variants[0].varied}
    spread = "; ".join(f"{name} = {_values(values)}" for name, values in varied.items())
    return [f"    {variants[0].entry_label}: {len(variants)} variants ({spread}), {seeds} trials each"]


def check_listing(experiment: Experiment) -> list[str]:
    """Lines for `check`: each environment, then its agent variants, long entries summarised."""
    seeds = len(experiment.seeds)
    entries = [list(group) for _, group in groupby(experiment.agents, key=lambda a: a.entry_label)]
    agent_lines: list[str] = []
    shown = 0
    for variants in entries:
        width = min(48, max(len(v.label) for v in variants))
        lines = _entry_lines(variants, seeds, width)
        if len(agent_lines) + len(lines) > MAX_AGENT_LINES:
            break
        agent_lines += lines
        shown += len(variants)
    if shown < len(experiment.agents):
        rest = len(experiment.agents) - shown
        agent_lines.append(f"    ... and {rest} more agent variants, {seeds} trials each")
    out = []
    for env in experiment.environments:
        threshold = "none" if env.threshold is None else f"{env.threshold:g}"
        earning = "" if env.earning_threshold is None else f"; earning threshold {env.earning_threshold:g}"
        out.append(f"  {env.label}  (threshold {threshold}{earning}; evaluation episodes cut at {env.step_cap} steps)")
        if env.tags is not None:
            out.append(f"    gives {env.tags.describe()}; {environment_path(env.spec)}")
        out += agent_lines
        out += _override_lines(entries, env.label)
    return out


def _override_lines(entries: list[list[AgentVariant]], env_label: str) -> list[str]:
    """One line per agent entry that runs with other parameters on this environment (`by_environment`)."""
    lines = []
    for variants in entries:
        first = variants[0]
        here = first.params_on(env_label)
        changed = {k: v for k, v in here.items() if first.params.get(k) != v}
        if changed:
            values = ", ".join(f"{k}={v}" for k, v in changed.items())
            lines.append(f"    {first.entry_label} runs here with {values}")
    return lines
