"""Write a study's report folder: curve figures, summary and per-trial CSVs, Markdown and terminal text."""

from __future__ import annotations

import os
import threading
from dataclasses import dataclass
from pathlib import Path

import pandas as pd

from runner.analysis.curves import curve_bands, trial_scores
from runner.analysis.plots import plot_curves
from runner.analysis.tables import ordered_labels, summary_table, to_markdown, to_terminal

__all__ = ["REQUIRED_COLUMNS", "ReportOutput", "StudyFacts", "write_report"]

REQUIRED_COLUMNS = (
    "env",
    "agent",
    "kind",
    "trial_id",
    "seed",
    "point",
    "real_steps",
    "eval_return",
    "real_updates",
    "planning_updates",
    "wall_seconds",
)


@dataclass(frozen=True)
class StudyFacts:
    """What the report needs to know about a study beyond its metric rows."""

    name: str
    budget: int
    baseline: str | None
    thresholds: dict[str, float | None]
    env_order: list[str]
    agent_order: list[str]
    confidence: float = 0.95
    n_resamples: int = 2000
    seed: int = 0


@dataclass(frozen=True)
class ReportOutput:
    """Files written by `write_report`, in writing order, and the summary text meant for the terminal."""

    files: list[Path]
    terminal_text: str


def _write_text_atomic(path: Path, text: str) -> Path:
    """Write text under a temporary name in the same folder, then rename, so readers never see half a file."""
    temp_path = path.with_name(f".{path.name}.{os.getpid()}.{threading.get_ident()}.tmp")
    try:
        with temp_path.open("w", encoding="utf-8", newline="") as stream:
            stream.write(text)
        os.replace(temp_path, path)
    except BaseException:
        temp_path.unlink(missing_ok=True)
        raise
    return path


def _sort_by_order(frame: pd.DataFrame, envs: list[str], agents: list[str], last: str) -> pd.DataFrame:
    """Sort rows by the report's environment and agent order, then by the `last` column."""
    env_rank = frame["env"].map({env: rank for rank, env in enumerate(envs)})
    agent_rank = frame["agent"].map({agent: rank for rank, agent in enumerate(agents)})
    keyed = frame.assign(_env_rank=env_rank, _agent_rank=agent_rank)
    keyed = keyed.sort_values(["_env_rank", "_agent_rank", last], kind="stable")
    return keyed.drop(columns=["_env_rank", "_agent_rank"]).reset_index(drop=True)


def _markdown(table: pd.DataFrame, facts: StudyFacts, envs: list[str]) -> str:
    """Compose the Markdown report: study facts, the AUC definition, then one table per environment."""
    baseline = f"`{facts.baseline}`" if facts.baseline else "none declared"
    lines = [
        f"# {facts.name}",
        "",
        f"Real-step budget per trial: {facts.budget}.",
        "",
        f"Baseline agent: {baseline}.",
        "",
        "AUC is the time-averaged greedy evaluation return over the real-step budget; intervals are "
        f"{facts.confidence:.0%} percentile bootstrap intervals over seeds ({facts.n_resamples} resamples).",
    ]
    for env in envs:
        lines += ["", f"## {env}", ""]
        threshold = facts.thresholds.get(env)
        if threshold is not None:
            lines += [f"Return threshold: {threshold:g}.", ""]
        lines.append(to_markdown(table[table["env"] == env].drop(columns=["env"])).rstrip("\n"))
    return "\n".join(lines) + "\n"


def write_report(frame: pd.DataFrame, facts: StudyFacts, out_dir: Path) -> ReportOutput:
    """Write figures, `summary.csv`, `summary.md`, `trial_scores.csv` and `curves.csv` into `out_dir`.

    Every file is replaced atomically. Environments and agents missing from the declared orders are
    appended after the declared ones.
    """
    if frame.empty:
        raise ValueError("no stored metric rows to report")
    missing = [column for column in REQUIRED_COLUMNS if column not in frame.columns]
    if missing:
        raise ValueError(f"results frame lacks columns: {', '.join(missing)}")
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    envs = ordered_labels(frame["env"], facts.env_order)
    agents = ordered_labels(frame["agent"], facts.agent_order)
    bands = curve_bands(frame, confidence=facts.confidence, n_resamples=facts.n_resamples, seed=facts.seed)
    scores = trial_scores(frame)
    table = summary_table(
        scores,
        agent_order=agents,
        env_order=envs,
        confidence=facts.confidence,
        n_resamples=facts.n_resamples,
        seed=facts.seed,
    )
    files: list[Path] = []
    for env in envs:
        files += plot_curves(
            bands,
            env,
            agent_order=agents,
            threshold=facts.thresholds.get(env),
            out_dir=out_dir,
            title=f"{facts.name}: {env}",
        )
    files.append(_write_text_atomic(out_dir / "summary.csv", table.to_csv(index=False)))
    files.append(_write_text_atomic(out_dir / "summary.md", _markdown(table, facts, envs)))
    ordered_scores = _sort_by_order(scores, envs, agents, "seed")
    files.append(_write_text_atomic(out_dir / "trial_scores.csv", ordered_scores.to_csv(index=False)))
    ordered_bands = _sort_by_order(bands, envs, agents, "point")
    files.append(_write_text_atomic(out_dir / "curves.csv", ordered_bands.to_csv(index=False)))
    header = f"{facts.name} (budget {facts.budget} real steps, baseline: {facts.baseline or 'none declared'})"
    terminal_text = f"{header}\n\n{to_terminal(table)}"
    return ReportOutput(files=files, terminal_text=terminal_text)
