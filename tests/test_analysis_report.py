"""Tests for summary tables, figures and the written report folder."""

import base64
import re

import numpy as np
import pandas as pd
import pytest

from runner.analysis.curves import trial_scores
from runner.analysis.plots import PALETTE, plot_curves, safe_name
from runner.analysis.report import ExperimentFacts, write_report
from runner.analysis.tables import (
    SUMMARY_COLUMNS,
    format_interval,
    ordered_labels,
    summary_table,
    to_markdown,
    to_terminal,
)

_PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"
_AGENTS = (
    ("q-learning", "q_learning", 0.5),
    ("dyna-q (planning_steps=5)", "dyna_q", 2.0),
    ("dyna-q (planning_steps=50)", "dyna_q", 6.0),
)
_ENVS = ("FrozenLake-v1 4x4", "CliffWalking-v1")
_POINTS = 11
_BUDGET = 2000


def _frame(seed: int = 0) -> pd.DataFrame:
    """Two envs, three agents learning at clearly different rates, five paired seeds, eleven points."""
    rng = np.random.default_rng(seed)
    steps = np.linspace(0, _BUDGET, _POINTS).astype(int)
    rows = []
    for env in _ENVS:
        for agent, kind, rate in _AGENTS:
            planning = int(agent.split("=")[1].rstrip(")")) if "=" in agent else 0
            for trial_seed in range(5):
                returns = 1.0 - np.exp(-rate * steps / _BUDGET) + rng.normal(scale=0.02, size=_POINTS)
                for point in range(_POINTS):
                    rows.append(
                        {
                            "env": env,
                            "agent": agent,
                            "kind": kind,
                            "trial_id": f"{safe_name(env)}-{kind}-{planning}-{trial_seed}",
                            "seed": trial_seed,
                            "point": point,
                            "real_steps": int(steps[point]),
                            "episodes": 3 * point,
                            "eval_return": float(returns[point]),
                            "train_return": float("nan") if point == 0 else float(returns[point]) - 0.05,
                            "real_updates": int(steps[point]),
                            "planning_updates": int(steps[point]) * planning,
                            "model_updates": int(steps[point]) if planning else 0,
                            "wall_seconds": 0.002 * point * (1 + planning),
                        }
                    )
    return pd.DataFrame(rows)


def _facts(**overrides) -> ExperimentFacts:
    values = {
        "name": "synthetic experiment",
        "budget": _BUDGET,
        "baseline": "q-learning",
        "thresholds": {"FrozenLake-v1 4x4": 0.7, "CliffWalking-v1": None},
        "env_order": list(_ENVS),
        "agent_order": [agent for agent, _, _ in _AGENTS],
        "n_resamples": 500,
    }
    values.update(overrides)
    return ExperimentFacts(**values)


def test_write_report_writes_every_file(tmp_path):
    frame = _frame()
    out_dir = tmp_path / "report"
    output = write_report(frame, _facts(), out_dir)

    names = {path.name for path in output.files}
    expected = {"summary.csv", "summary.md", "trial_scores.csv", "curves.csv", "report.html"}
    expected |= {
        f"{name}.csv"
        for name in (
            "steps_to_threshold",
            "threshold_summary",
            "efficiency",
            "comparisons",
            "seeds_advice",
            "frontier",
            "break_even",
            "flagged_seeds",
        )
    }
    figures = {env: ["curves", "curves_seeds", "budget"] for env in _ENVS}
    figures["FrozenLake-v1 4x4"] += ["threshold", "frontier"]  # the only env with a threshold
    for env, stems in figures.items():
        expected |= {f"{stem}_{safe_name(env)}.{ext}" for stem in stems for ext in ("png", "svg")}
    assert names == expected
    assert len(output.files) == len(expected)
    for path in output.files:
        assert path.parent == out_dir
        assert path.stat().st_size > 0
    assert sorted(p.name for p in out_dir.iterdir()) == sorted(expected)
    for env in _ENVS:
        assert (out_dir / f"curves_{safe_name(env)}.png").read_bytes().startswith(_PNG_SIGNATURE)
        assert (out_dir / f"curves_{safe_name(env)}.svg").read_text(encoding="utf-8").lstrip().startswith("<?xml")

    summary = pd.read_csv(out_dir / "summary.csv")
    assert list(summary.columns) == [*SUMMARY_COLUMNS, "interval"]
    assert (summary["interval"] == "95% bootstrap-t interval over seeds").all()
    assert len(summary) == len(_ENVS) * len(_AGENTS)
    assert list(summary["env"]) == [env for env in _ENVS for _ in _AGENTS]
    assert list(summary["agent"]) == [agent for _ in _ENVS for agent, _, _ in _AGENTS]
    assert (summary["seeds"] == 5).all()
    assert (summary["auc_low"] <= summary["auc_mean"]).all()
    assert (summary["auc_mean"] <= summary["auc_high"]).all()

    scores = pd.read_csv(out_dir / "trial_scores.csv")
    assert len(scores) == len(_ENVS) * len(_AGENTS) * 5
    curves = pd.read_csv(out_dir / "curves.csv")
    assert len(curves) == len(_ENVS) * len(_AGENTS) * _POINTS

    markdown = (out_dir / "summary.md").read_text(encoding="utf-8")
    for agent, _, _ in _AGENTS:
        assert agent in markdown
    for env in _ENVS:
        assert f"## {env}" in markdown
    assert "Baseline agent: `q-learning`" in markdown
    assert "time-averaged greedy evaluation return" in markdown
    assert "95% bootstrap-t interval over seeds" in markdown
    assert "## Methods" in markdown and "Kaplan & Meier (1958)" in markdown and "Holm (1979)" in markdown

    for agent, _, _ in _AGENTS:
        assert agent in output.terminal_text
    assert not list(out_dir.glob("*.tmp"))


def test_better_synthetic_agent_gets_higher_auc(tmp_path):
    write_report(_frame(), _facts(), tmp_path)
    summary = pd.read_csv(tmp_path / "summary.csv").set_index(["env", "agent"])
    for env in _ENVS:
        aucs = [summary.loc[(env, agent), "auc_mean"] for agent, _, _ in _AGENTS]
        assert aucs[0] < aucs[1] < aucs[2]
        assert summary.loc[(env, "q-learning"), "planning_per_real"] == 0.0
        assert summary.loc[(env, "dyna-q (planning_steps=50)"), "planning_per_real"] == pytest.approx(50.0)


def test_unlisted_envs_and_agents_are_appended_after_declared_ones(tmp_path):
    facts = _facts(env_order=["CliffWalking-v1"], agent_order=["dyna-q (planning_steps=50)"])
    write_report(_frame(), facts, tmp_path)
    summary = pd.read_csv(tmp_path / "summary.csv")
    assert list(pd.unique(summary["env"])) == ["CliffWalking-v1", "FrozenLake-v1 4x4"]
    assert list(summary["agent"][:3]) == [
        "dyna-q (planning_steps=50)",
        "dyna-q (planning_steps=5)",
        "q-learning",
    ]


def test_empty_frame_is_rejected(tmp_path):
    with pytest.raises(ValueError, match="no stored metric rows to report"):
        write_report(_frame().iloc[0:0], _facts(), tmp_path)


@pytest.mark.slow
def test_report_is_reproducible(tmp_path):
    write_report(_frame(), _facts(), tmp_path / "a")
    write_report(_frame(), _facts(), tmp_path / "b")
    names = ["summary.csv", "trial_scores.csv", "curves.csv", "summary.md", "steps_to_threshold.csv"]
    names += ["threshold_summary.csv", "efficiency.csv", "comparisons.csv", "seeds_advice.csv", "frontier.csv"]
    names.append("report.html")
    for name in names:
        assert (tmp_path / "a" / name).read_text() == (tmp_path / "b" / name).read_text()


def test_ordered_labels():
    assert ordered_labels(["c", "a", "b", "a"], ["b", "z", "c"]) == ["b", "c", "a"]


def test_format_interval_style():
    assert format_interval(0.5123, 0.4712, 0.5498) == "0.512 [0.47, 0.55]"
    assert format_interval(-153.27, -160.4, -146.0) == "-153 [-160, -146]"
    assert format_interval(float("nan"), 0.0, 1.0) == "n/a [0.0, 1.0]"


def test_markdown_pipe_table_layout():
    table = summary_table(trial_scores(_frame()), agent_order=[a for a, _, _ in _AGENTS], n_resamples=200)
    table.loc[0, "agent"] = "odd | label"
    lines = to_markdown(table).strip().split("\n")
    assert len(lines) == 2 + len(table)
    assert lines[0].startswith("| environment | agent | kind | seeds | AUC mean [low, high] |")
    column_counts = {line.count(" | ") for line in lines}
    assert column_counts == {len(lines[0].split(" | ")) - 1}
    assert "odd \\| label" in lines[2]
    assert "---:" in lines[1]


def test_terminal_table_has_one_aligned_block_per_env():
    table = summary_table(trial_scores(_frame()), agent_order=[a for a, _, _ in _AGENTS], n_resamples=200)
    text = to_terminal(table)
    blocks = text.strip().split("\n\n")
    assert [block.split("\n")[0] for block in blocks] == [f"Environment: {env}" for env in sorted(_ENVS)]
    for block in blocks:
        lines = block.split("\n")
        assert "planning updates per real step" in lines[1]
        assert len(lines) == 3 + len(_AGENTS)
        assert len({len(line) for line in lines[2:]}) == 1


def test_plot_curves_returns_png_and_svg(tmp_path):
    from runner.analysis.curves import curve_bands

    bands = curve_bands(_frame(), n_resamples=100)
    paths = plot_curves(
        bands,
        "CliffWalking-v1",
        agent_order=[],
        threshold=-13.0,
        out_dir=tmp_path,
        title="cliff",
    )
    stem = f"curves_{safe_name('CliffWalking-v1')}"
    assert [path.name for path in paths] == [f"{stem}.png", f"{stem}.svg"]
    svg = paths[1].read_text(encoding="utf-8")
    assert "real environment steps" in svg
    assert "mean greedy evaluation return" in svg
    with pytest.raises(ValueError):
        plot_curves(bands, "missing", agent_order=[], threshold=None, out_dir=tmp_path, title="x")


def test_palette_is_distinct_hex_colours():
    assert len(set(PALETTE)) == len(PALETTE) >= 6
    assert all(len(colour) == 7 and colour.startswith("#") for colour in PALETTE)


def test_safe_name_keeps_plain_names_and_hashes_the_rest():
    assert safe_name("maze") == "maze"
    assert safe_name("frozen-lake_v1.4x4") == "frozen-lake_v1.4x4"
    assert re.fullmatch(r"FrozenLake-v1_4x4-[0-9a-f]{10}", safe_name("FrozenLake-v1 4x4"))
    assert re.fullmatch(r"env-[0-9a-f]{10}", safe_name("../.."))
    assert safe_name("maze-0123456789") != "maze-0123456789"  # a plain name cannot pose as a hashed one


@pytest.mark.parametrize(
    "labels",
    [
        ("floor A", "floor_A", "floor-A", "Floor_a", "floor a"),
        ("\u5730\u9762", "\u5e8a", "\u043f\u043e\u043b", "\u03b4\u03ac\u03c0\u03b5\u03b4\u03bf"),
        ("x" * 5000, "x" * 4999 + "y", "../" * 2000),
    ],
    ids=["spaces-and-case", "other-scripts", "very-long"],
)
def test_safe_names_are_unique_even_ignoring_case_and_bounded(labels):
    names = [safe_name(label) for label in labels]
    assert len({name.lower() for name in names}) == len(labels)
    assert all(0 < len(name) <= 59 and re.fullmatch(r"[A-Za-z0-9._-]+", name) for name in names)


def test_environments_whose_labels_clean_alike_keep_their_own_figures(tmp_path):
    long_label = "floor " + "A" * 5000
    renamed = {"FrozenLake-v1 4x4": "floor A", "CliffWalking-v1": "floor_A"}
    frame = _frame().replace({"env": renamed})
    extra = frame[frame["env"] == "floor A"].assign(env=long_label, trial_id=lambda f: f["trial_id"] + "-long")
    frame = pd.concat([frame, extra], ignore_index=True)
    envs = ["floor A", "floor_A", long_label]
    facts = _facts(env_order=envs, thresholds={"floor A": 0.7, "floor_A": None, long_label: 0.7})
    output = write_report(frame, facts, tmp_path)
    curves = [tmp_path / f"curves_{safe_name(env)}.png" for env in envs]
    assert len({path.name for path in curves}) == 3
    assert all(path in output.files and path.is_file() for path in curves)
    images = [path.read_bytes() for path in curves]
    assert len(set(images)) == 3  # each file holds its own environment's figure (the titles differ)
    html = (tmp_path / "report.html").read_text(encoding="utf-8")
    positions = [html.index(base64.b64encode(image).decode("ascii")) for image in images]
    assert positions == sorted(positions)  # in the order of the environments' sections
