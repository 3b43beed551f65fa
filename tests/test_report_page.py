"""Tests for the extended report: threshold, efficiency, comparisons, advice, compute figures and the HTML page."""

from __future__ import annotations

import re
import shutil
import subprocess
from itertools import combinations, pairwise
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from markupsafe import escape

from runner.analysis.efficiency import efficiency_sentences
from runner.analysis.page import CAUTION, ExperimentRecords
from runner.analysis.plots import safe_name
from runner.analysis.report import ADVICE_SHARES, ExperimentFacts, budget_families, pareto_front, write_report

_BUDGET = 2000
_POINTS = 21
_SEEDS = 6
_ENVS = ("grid A", "grid B & co")
_THRESHOLDS = {"grid A": 0.7, "grid B & co": None}
# label, kind, learning rate, planning updates per real step, has a learned model
_AGENTS = (
    ("Q-learning", "q_learning", 1.5, 0, False),
    ("Dyna-Q (planning_steps=0)", "dyna_q", 1.5, 0, True),
    ("Dyna-Q (planning_steps=5)", "dyna_q", 2.5, 5, True),
    ("Dyna-Q (planning_steps=50)", "dyna_q", 6.0, 50, True),
    ("certainty-equivalence", "certainty_equivalence", 8.0, 400, True),
)
_LABELS = [agent for agent, *_ in _AGENTS]
_PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"
_CHROMIUM_FLAGS = (
    "--headless",
    "--no-sandbox",
    "--disable-gpu",
    "--disable-quic",
    "--no-first-run",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
)


def _frame(seed: int = 1) -> pd.DataFrame:
    """Two envs, five variants (a planning_steps family with 0, 5 and 50), six seeds, 21 points, model errors.

    Each seed draws its own learning speed, so the slow agents reach the 0.7 threshold on some seeds only and
    the others stay censored at the budget.
    """
    rng = np.random.default_rng(seed)
    steps = np.linspace(0, _BUDGET, _POINTS).astype(int)
    rows = []
    for env in _ENVS:
        for agent, kind, rate, planning, has_model in _AGENTS:
            for trial_seed in range(_SEEDS):
                speed = rate * rng.uniform(0.6, 1.4)
                returns = 1.0 - np.exp(-speed * steps / _BUDGET) + rng.normal(scale=0.02, size=_POINTS)
                error = 0.6 * np.exp(-steps / 400.0) + rng.uniform(0, 0.02, size=_POINTS)
                for point in range(_POINTS):
                    rows.append(
                        {
                            "env": env,
                            "agent": agent,
                            "kind": kind,
                            "trial_id": f"{safe_name(env)}-{safe_name(agent)}-{trial_seed}",
                            "seed": trial_seed,
                            "point": point,
                            "real_steps": int(steps[point]),
                            "episodes": 2 * point,
                            "eval_return": float(returns[point]),
                            "train_return": float(returns[point]) - 0.05,
                            "real_updates": int(steps[point]),
                            "planning_updates": int(steps[point]) * planning,
                            "model_updates": int(steps[point]) if has_model else 0,
                            "model_tv_error": float(error[point]) if has_model and point > 0 else float("nan"),
                            "model_reward_error": float("nan"),
                            "wall_seconds": 1e-5 * steps[point] * (1 + planning) + 0.001 * rng.uniform(),
                            "cpu_seconds": 0.9e-5 * steps[point] * (1 + planning),
                        }
                    )
    return pd.DataFrame(rows)


def _facts(**overrides: object) -> ExperimentFacts:
    values: dict[str, object] = {
        "name": "page experiment",
        "budget": _BUDGET,
        "baseline": "Q-learning",
        "thresholds": dict(_THRESHOLDS),
        "env_order": list(_ENVS),
        "agent_order": list(_LABELS),
        "n_resamples": 300,
        "description": "Synthetic <b>experiment</b> & friends, to check the page escapes text.",
        "costs": {"unit": "minutes", "real_step": 0.01, "cpu_second": 0.02},
    }
    values.update(overrides)
    return ExperimentFacts(**values)  # type: ignore[arg-type]


def _records() -> ExperimentRecords:
    """One run, one failure, one missing and one undeclared trial, as the store would give them."""
    experiment_text = "experiment: page experiment\nseeds: 6\n# <not a tag>\n"
    runs = pd.DataFrame(
        [
            {
                "run_id": 1,
                "started": "2026-01-02T03:04:05+00:00",
                "finished": "2026-01-02T03:09:05+00:00",
                "outcome": "failures",
                "command": "stepmeter run page.yaml --jobs 2",
                "experiment_file": "/experiments/page.yaml",
                "experiment_text": experiment_text,
                "experiment_hash": "ab" * 32,
                "versions": '{"numpy": "2.0.0", "stepmeter": "0.1.0"}',
                "platform": "Linux-x86_64",
                "jobs": 2,
            }
        ]
    )
    failures = pd.DataFrame(
        [
            {
                "env": "grid A",
                "agent": "Q-learning",
                "seed": 9,
                "trial_id": "f00d",
                "run_id": 1,
                "error_type": "TrialTimeout",
                "message": "the trial ran past its limit of 5 wall seconds",
                "at": "2026-01-02T03:08:00+00:00",
                "stored_later": False,
            }
        ]
    )
    missing = pd.DataFrame([{"env": "grid A", "agent": "Q-learning", "seed": 9, "trial_id": "f00d"}])
    undeclared = pd.DataFrame([{"env": "old grid", "agent": "SARSA", "seed": 0, "trial_id": "beef"}])
    return ExperimentRecords(runs=runs, failures=failures, missing=missing, undeclared=undeclared)


@pytest.fixture(scope="module")
def report(tmp_path_factory: pytest.TempPathFactory):
    """The report of the synthetic experiment, written once for the tests that only read it."""
    out_dir = tmp_path_factory.mktemp("report")
    output = write_report(_frame(), _facts(), out_dir, _records())
    return out_dir, output


def _expected_files() -> set[str]:
    names = {"summary.csv", "summary.md", "trial_scores.csv", "curves.csv", "report.html"}
    names |= {
        "steps_to_threshold.csv",
        "threshold_summary.csv",
        "efficiency.csv",
        "comparisons.csv",
        "seeds_advice.csv",
        "frontier.csv",
        "break_even.csv",
        "costs.csv",
        "flagged_seeds.csv",
    }
    stems = {"grid A": ["curves", "curves_seeds", "threshold", "model_error", "budget", "frontier", "costs"]}
    stems["grid B & co"] = ["curves", "curves_seeds", "model_error", "budget"]  # no threshold: no KM or frontier figure
    for env, env_stems in stems.items():
        names |= {f"{stem}_{safe_name(env)}.{ext}" for stem in env_stems for ext in ("png", "svg")}
    return names


def test_every_new_output_is_written(report):
    out_dir, output = report
    names = [path.name for path in output.files]
    assert sorted(names) == sorted(_expected_files())
    assert sorted(p.name for p in out_dir.iterdir()) == sorted(_expected_files())
    for path in output.files:
        assert path.stat().st_size > 0
        if path.suffix == ".png":
            assert path.read_bytes().startswith(_PNG_SIGNATURE)
    assert not list(out_dir.glob("*.tmp"))


def test_censored_trials_stay_in_the_threshold_tables(report):
    out_dir, _ = report
    crossings = pd.read_csv(out_dir / "steps_to_threshold.csv")
    assert len(crossings) == len(_AGENTS) * _SEEDS  # only grid A has a threshold; no trial is dropped
    assert set(crossings["env"]) == {"grid A"}
    censored = crossings[~crossings["reached"]]
    assert len(censored) > 0
    assert (censored["steps"] == _BUDGET).all()
    summary = pd.read_csv(out_dir / "threshold_summary.csv").set_index("agent")
    assert list(summary.index) == _LABELS
    counts = crossings.groupby("agent")["reached"].agg(["size", "sum"])
    for agent in _LABELS:
        assert summary.loc[agent, "trials"] == counts.loc[agent, "size"] == _SEEDS
        assert summary.loc[agent, "reached"] == counts.loc[agent, "sum"]
    fast = summary.loc["certainty-equivalence"]
    assert fast["median_low"] <= fast["median_steps"] <= fast["median_high"]
    assert fast["median_steps"] < summary.loc["Dyna-Q (planning_steps=5)", "median_steps"]


def test_efficiency_headline_and_terminal_text(report):
    out_dir, output = report
    ratios = pd.read_csv(out_dir / "efficiency.csv")
    assert list(ratios["agent"]) == _LABELS[1:]
    assert (ratios["baseline"] == "Q-learning").all()
    by_agent = ratios.set_index("agent")
    assert by_agent.loc["Dyna-Q (planning_steps=50)", "ratio"] > 1.5
    # With a costs block the headline opens with the decision, then the real-step ratios, then break-even prices.
    decision, *rest = output.headline
    assert decision.startswith("On grid A, at 0.01 minutes per real step and 0.02 minutes per CPU-second, ")
    assert "reaches the threshold at the lowest total cost" in decision
    assert rest[: len(ratios)] == efficiency_sentences(
        ratios.astype({"includes_one": "boolean"}), {"grid A": "a return of 0.7"}
    )
    break_even = pd.read_csv(out_dir / "break_even.csv")
    assert len(rest) == len(ratios) + int((break_even["rival"] == "Q-learning").sum())
    assert output.terminal_text.startswith(output.headline[0])
    assert "page experiment (budget 2,000 real steps" in output.terminal_text
    markdown = (out_dir / "summary.md").read_text(encoding="utf-8")
    assert "## Headline" in markdown
    assert output.headline[0] in markdown
    for title in ("Real steps to threshold", "Real steps against the baseline", "Are the differences real?"):
        assert f"### {title}" in markdown
    assert "## Seeds advice" in markdown


def test_comparisons_cover_every_pair_of_every_env(report):
    out_dir, _ = report
    table = pd.read_csv(out_dir / "comparisons.csv")
    pairs = list(combinations(_LABELS, 2))
    assert len(table) == len(_ENVS) * len(pairs)
    assert list(zip(table["agent_a"][: len(pairs)], table["agent_b"][: len(pairs)], strict=True)) == pairs
    assert (table["p_holm"] >= table["p_value"] - 1e-12).all()
    assert table["probability_of_improvement"].between(0, 1).all()
    assert (table["poi_low"] <= table["probability_of_improvement"]).all()
    assert (table["probability_of_improvement"] <= table["poi_high"]).all()
    slow_fast = table[(table["agent_a"] == "Q-learning") & (table["agent_b"] == "certainty-equivalence")]
    assert (slow_fast["probability_of_improvement"] < 0.1).all()


def test_seeds_advice_uses_shares_of_the_return_range(report):
    out_dir, _ = report
    advice = pd.read_csv(out_dir / "seeds_advice.csv")
    baseline = advice[advice["pair"] == "against the baseline"]
    assert len(baseline) == len(_ENVS) * (len(_AGENTS) - 1) * len(ADVICE_SHARES)
    assert (baseline["agent_b"] == "Q-learning").all()
    # Close contenders: each agent against the one ranked just above it by mean AUC, unless that is the baseline.
    scores = pd.read_csv(out_dir / "trial_scores.csv")
    for env, rows in advice[advice["pair"] == "against the next better"].groupby("env"):
        ranked = scores[scores["env"] == env].groupby("agent")["auc"].mean().sort_values(ascending=False).index
        pairs = {(worse, better) for better, worse in pairwise(ranked) if "Q-learning" not in (better, worse)}
        assert set(zip(rows["agent_a"], rows["agent_b"], strict=True)) == pairs
    assert np.allclose(sorted(set(advice["share_of_range"].round(12))), ADVICE_SHARES)
    frame = _frame()
    for env, rows in advice.groupby("env"):
        span = frame.loc[frame["env"] == env, "eval_return"].agg(np.ptp)
        assert np.allclose(rows["difference"], rows["share_of_range"] * span)
        assert np.allclose(rows["return_range"], span)
    # A larger difference never needs more seeds.
    for _, rows in advice.groupby(["env", "agent_a", "agent_b"]):
        needed = rows.sort_values("difference")["seeds_needed"].to_numpy()
        assert (np.diff(needed) <= 0).all()


def test_frontier_compares_cpu_time_intervals(report):
    out_dir, _ = report
    frontier = pd.read_csv(out_dir / "frontier.csv")
    assert list(frontier["agent"]) == _LABELS
    rows = frontier.set_index("agent")
    assert rows.loc["Q-learning", "updates_per_real"] == pytest.approx(1.0)
    assert rows.loc["Dyna-Q (planning_steps=50)", "updates_per_real"] == pytest.approx(52.0)
    assert rows.loc["Dyna-Q (planning_steps=50)", "planning_per_real"] == pytest.approx(50.0)
    # the synthetic CPU time is 0.9e-5 s x (1 + planning) per real step, the same on every seed
    assert rows.loc["Dyna-Q (planning_steps=50)", "cpu_us_per_real"] == pytest.approx(9.0 * 51)
    assert rows.loc["Q-learning", "cpu_us_low"] == pytest.approx(9.0)
    reached = frontier.dropna(subset=["median_steps"])
    for env, in_env in reached.groupby("env"):
        for _, row in in_env.iterrows():
            # ahead: an interval wholly below; behind: wholly above (a median at the first point spans 0 to it)
            cpu_ahead = in_env["cpu_us_high"] < row["cpu_us_low"]
            cpu_behind = in_env["cpu_us_low"] > row["cpu_us_high"]
            steps_ahead = in_env["median_high"].fillna(np.inf) < row["median_low"]
            steps_behind = in_env["median_low"] > row["median_high"]
            beaten = ((cpu_ahead & ~steps_behind) | (steps_ahead & ~cpu_behind)).any()
            assert bool(row["on_frontier"]) == (not beaten), (env, row["agent"])
    assert not frontier.loc[frontier["median_steps"].isna(), "on_frontier"].any()
    # the cheapest variant: no other is ahead of it on CPU time, and none is clearly ahead on steps alone
    assert rows.loc["Q-learning", "on_frontier"]
    # certainty-equivalence needs the fewest steps, but its interval overlaps that of Dyna-Q (planning_steps=50),
    # which is clearly cheaper: so it is not marked
    assert not rows.loc["certainty-equivalence", "on_frontier"]
    html = (out_dir / "report.html").read_text(encoding="utf-8")
    assert "CPU µs per real step, median [low, high]" in html
    assert "no other clearly ahead" in html


def test_page_is_self_contained_and_escaped(report):
    out_dir, output = report
    html = (out_dir / "report.html").read_text(encoding="utf-8")
    pngs = [path for path in output.files if path.suffix == ".png"]
    assert html.count('src="data:image/png;base64,') == len(pngs)
    assert not re.search(r"""(src|href)=["']?(https?:|//)""", html)
    assert "<link" not in html
    assert "@import" not in html
    assert escape(CAUTION) in html
    assert "do not make a policy safe on a real system" in html
    assert "Synthetic &lt;b&gt;experiment&lt;/b&gt; &amp; friends" in html
    assert "<b>experiment</b>" not in html
    assert "grid B &amp; co" in html
    for sentence in output.headline:
        assert sentence.replace("&", "&amp;") in html
    # Records: failure, missing, undeclared trials and the run's provenance.
    for text in ("TrialTimeout", "the trial ran past its limit of 5 wall seconds", "old grid", "SARSA", "beef"):
        assert text in html
    assert "stepmeter run page.yaml --jobs 2" in html
    assert "numpy 2.0.0, stepmeter 0.1.0" in html
    assert "# &lt;not a tag&gt;" in html
    assert "<pre>" in html
    assert "data-figures-total" not in html  # set by the inline script only
    assert "figuresDecoded" in html


def test_budget_families_from_labels_and_params():
    kinds = {"Q": "q_learning", "D (planning_steps=0)": "dyna_q", "D (planning_steps=5)": "dyna_q"}
    agents = list(kinds)
    assert budget_families(agents, kinds, {}) == [
        ("planning_steps", "D", [(0.0, "D (planning_steps=0)"), (5.0, "D (planning_steps=5)")])
    ]
    two = {"D (alpha=0.1, planning_steps=1)": "dyna_q", "D (alpha=0.1, planning_steps=9)": "dyna_q"}
    two |= {"D (alpha=0.5, planning_steps=1)": "dyna_q", "D (alpha=0.5, planning_steps=9)": "dyna_q"}
    families = budget_families(list(two), two, {})
    assert [name for _, name, _ in families] == ["D (alpha=0.1)", "D (alpha=0.5)"]
    params = {
        "fast": {"alpha": 0.1, "planning_steps": 20},
        "slow": {"alpha": 0.1, "planning_steps": 2},
        "other": {"alpha": 0.3, "planning_steps": 2},
    }
    found = budget_families(["fast", "slow", "other"], dict.fromkeys(params, "dyna_q"), params)
    assert found == [("planning_steps", "fast", [(20.0, "fast"), (2.0, "slow")])]
    assert budget_families(["Q"], {"Q": "q_learning"}, {"Q": {"alpha": 0.1}}) == []


def test_budget_families_follow_the_declared_role_not_the_name():
    kinds = {"R (replays=1)": "replay_q_learning", "R (replays=8)": "replay_q_learning"}
    kinds |= {"U (simulations=10)": "uct_search", "U (simulations=100)": "uct_search"}
    found = budget_families(list(kinds), kinds, {})
    assert [(param, name) for param, name, _ in found] == [("replays", "R"), ("simulations", "U")]
    # a parameter named like a budget on a kind that does not declare it (or on an unregistered kind) is not one
    other = {"C (max_sweeps=5)": "certainty_equivalence", "C (max_sweeps=50)": "certainty_equivalence"}
    other |= {"M (planning_steps=1)": "mine.agents:Mine", "M (planning_steps=9)": "mine.agents:Mine"}
    assert budget_families(list(other), other, {}) == []


def test_pareto_front_marks_variants_no_other_beats():
    compute = np.array([1.0, 5.0, 50.0, 60.0, 7.0, np.nan, 2.0])
    steps = np.array([np.nan, 1400.0, 600.0, 700.0, 1400.0, 10.0, 1400.0])
    # 5.0 and 7.0 need as many steps as 2.0 with more compute; 60.0 is beaten by 50.0 on both axes.
    assert pareto_front(compute, steps).tolist() == [False, False, True, False, False, False, True]
    assert pareto_front(np.array([3.0, 3.0]), np.array([10.0, 10.0])).tolist() == [True, True]


def test_pareto_front_with_bounds_needs_intervals_that_separate():
    compute = np.array([10.0, 12.0, 100.0])
    steps = np.array([1000.0, 900.0, 400.0])
    cpu_bounds = (np.array([8.0, 11.0, 90.0]), np.array([12.0, 13.0, 110.0]))
    # the second variant's steps interval overlaps the first's: neither is clearly ahead of the other
    overlapping = (np.array([800.0, 700.0, 300.0]), np.array([1200.0, 1100.0, 500.0]))
    front = pareto_front(compute, steps, compute_bounds=cpu_bounds, steps_bounds=overlapping)
    assert front.tolist() == [True, True, True]
    # now the first is clearly ahead on CPU time (intervals 1-2 against 11-13) and not behind on steps
    cpu_apart = (np.array([1.0, 11.0, 90.0]), np.array([2.0, 13.0, 110.0]))
    front = pareto_front(compute, steps, compute_bounds=cpu_apart, steps_bounds=overlapping)
    assert front.tolist() == [True, False, True]
    # unknown bounds (NaN) never separate
    unknown = (np.full(3, np.nan), np.full(3, np.nan))
    assert pareto_front(compute, steps, compute_bounds=unknown, steps_bounds=unknown).all()


def test_old_style_facts_and_consecutive_points(tmp_path):
    frame = _frame()
    frame = frame[(frame["env"] == "grid A") & frame["agent"].isin(["Q-learning", "Dyna-Q (planning_steps=50)"])]
    frame = frame.assign(model_tv_error=np.nan)  # no learned model anywhere: no model error figure
    old = ExperimentFacts(
        name="old",
        budget=_BUDGET,
        baseline="Q-learning",
        thresholds=dict(_THRESHOLDS),
        env_order=list(_ENVS),
        agent_order=list(_LABELS),
        n_resamples=100,
    )
    assert old.consecutive == 1 and old.variant_params == {} and old.description == ""
    write_report(frame, old, tmp_path / "one")
    held = ExperimentFacts(**{**old.__dict__, "consecutive": 3})
    output = write_report(frame, held, tmp_path / "three")
    one = pd.read_csv(tmp_path / "one" / "steps_to_threshold.csv")
    three = pd.read_csv(tmp_path / "three" / "steps_to_threshold.csv")
    assert len(one) == len(three) == 2 * _SEEDS
    assert (three["steps"].to_numpy() >= one["steps"].to_numpy()).all()
    assert (three["reached"].to_numpy() <= one["reached"].to_numpy()).all()
    assert any("held for 3 evaluations in a row" in sentence for sentence in output.headline)
    assert "Caution." in (tmp_path / "one" / "report.html").read_text(encoding="utf-8")
    assert not list((tmp_path / "one").glob("model_error_*"))
    assert not list((tmp_path / "one").glob("budget_*"))  # a single planning_steps value makes no family
    assert (tmp_path / "one" / f"frontier_{safe_name('grid A')}.png").is_file()


def test_no_baseline_and_no_threshold_still_write_a_page(tmp_path):
    facts = _facts(baseline=None, thresholds=dict.fromkeys(_ENVS), n_resamples=100)
    frame = _frame()
    output = write_report(frame[frame["env"] == "grid A"], facts, tmp_path)
    assert output.headline == []
    assert pd.read_csv(tmp_path / "steps_to_threshold.csv").empty
    assert pd.read_csv(tmp_path / "efficiency.csv").empty
    html = (tmp_path / "report.html").read_text(encoding="utf-8")
    assert "the experiment declares no baseline agent" in html
    assert not list(tmp_path.glob("threshold_*.png")) and not list(tmp_path.glob("frontier_*.png"))
    advice = pd.read_csv(tmp_path / "seeds_advice.csv")
    against = advice[advice["pair"] == "against the baseline"]
    assert set(against["agent_b"]) == {_LABELS[0]}  # the first agent stands in for the missing baseline


def _chromium() -> str:
    """Path of the Chromium binary, failing (not skipping) the test when it is absent."""
    found = shutil.which("chromium") or ("/usr/bin/chromium" if Path("/usr/bin/chromium").exists() else None)
    if found is None:
        pytest.fail(
            "Chromium is not installed: the report-page test needs Debian's headless chromium "
            "(apt-get install -y chromium); CI installs it in .ci/run"
        )
    return found


def _run_chromium(binary: str, profile: Path, *args: str) -> subprocess.CompletedProcess[str]:
    command = [binary, *_CHROMIUM_FLAGS, f"--user-data-dir={profile}", *args]
    return subprocess.run(command, capture_output=True, text=True, timeout=180, check=False)


@pytest.mark.slow
def test_page_renders_in_headless_chromium(report, tmp_path):
    binary = _chromium()
    out_dir, _ = report
    url = (out_dir / "report.html").resolve().as_uri()
    dumped = _run_chromium(binary, tmp_path / "profile-dom", "--dump-dom", "--virtual-time-budget=5000", url)
    assert dumped.returncode == 0, dumped.stderr[-2000:]
    body = re.search(r"<body([^>]*)>", dumped.stdout)
    assert body is not None, dumped.stdout[:2000]
    attributes = dict(re.findall(r'data-([a-z-]+)="(\d+)"', body.group(1)))
    total, decoded, tables = (int(attributes.get(key, -1)) for key in ("figures-total", "figures-decoded", "tables"))
    assert total == len(list(out_dir.glob("*.png"))) > 0
    assert decoded == total
    assert tables > 0
    assert "do not make a policy safe on a real system" in dumped.stdout

    screenshot = tmp_path / "report.png"
    size = "--window-size=1280,4000"
    shot = _run_chromium(binary, tmp_path / "profile-shot", f"--screenshot={screenshot}", size, url)
    assert shot.returncode == 0, shot.stderr[-2000:]
    assert screenshot.is_file()
    assert screenshot.read_bytes().startswith(_PNG_SIGNATURE)
    assert screenshot.stat().st_size > 10_000
    print(f"report screenshot: {screenshot}")


@pytest.mark.slow
def test_report_of_a_stored_experiment_carries_its_records(tmp_path):
    from experiment_texts import EXAMPLE_EXPERIMENT

    from runner.experiment_report import report_experiment
    from runner.run import RunOptions, run_experiment

    text = EXAMPLE_EXPERIMENT.replace("    step_limit: 200\n", "    step_limit: 200\n    threshold: 0.5\n", 1)
    (tmp_path / "smoke.yaml").write_text(text, encoding="utf-8")
    run_experiment(tmp_path / "smoke.yaml", results_root=tmp_path / "results", options=RunOptions(jobs=1), command="t")
    output, note = report_experiment(tmp_path / "results" / "smoke")
    out_dir = tmp_path / "results" / "smoke" / "report"
    assert "of 20 declared trials have stored results" in note
    assert (out_dir / "budget_maze.png").is_file()  # the dyna planning_steps family, read from stored specs
    assert (out_dir / "model_error_maze.png").is_file()
    assert (out_dir / "threshold_maze.png").is_file()
    html = (out_dir / "report.html").read_text(encoding="utf-8")
    assert "experiment: smoke" in html  # the experiment file text from the run's provenance
    assert "planning_steps: [0, 5, 50]" in html
    assert "complete" in html
    ratios = pd.read_csv(out_dir / "efficiency.csv")
    break_even = pd.read_csv(out_dir / "break_even.csv")
    assert len(ratios) >= 4 and (break_even["rival"] == "q").sum() == len(ratios)
    assert len(output.headline) == 2 * len(ratios)  # no costs block: ratios, then break-even prices
    # On the maze: dyna x 3 and ce against q, each with a ratio and a break-even price.
    assert sum(sentence.startswith("On maze,") for sentence in output.headline) == 8


def test_frontier_reads_a_median_at_the_first_point_as_a_bound():
    from runner.analysis.page import frontier_view

    rows = pd.DataFrame(
        {
            "env": "aisle",
            "agent": ["coarse", "measured"],
            "kind": "dyna_q",
            "updates_per_real": [6.0, 1.0],
            "planning_per_real": [5.0, 0.0],
            "cpu_us_per_real": [40.0, np.nan],
            "cpu_us_low": [35.0, np.nan],
            "cpu_us_high": [45.0, np.nan],
            "reached_share": [1.0, 1.0],
            "median_steps": [1000.0, 3000.0],
            "median_low": [np.nan, 2000.0],
            "median_high": [np.nan, 4000.0],
            "first_point": [1000.0, 1000.0],
            "on_frontier": [True, False],
        }
    )
    view = frontier_view(rows)
    cells = dict(zip(view.frame()["agent"], view.frame()["median real steps [low, high]"], strict=True))
    assert cells == {"coarse": "at or before 1,000", "measured": "3,000 [2,000, 4,000]"}
    assert view.frame()["CPU µs per real step, median [low, high]"].tolist()[1] == "n/a"
