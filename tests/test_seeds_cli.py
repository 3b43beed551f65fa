"""`stepmeter seeds`: seeds advice from a stored pilot experiment, agreeing with the power module it prints."""

import re

import pandas as pd

from runner.analysis.curves import trial_scores
from runner.analysis.frames import load_results
from runner.analysis.power import advice_pairs, seeds_needed
from runner.cli import main
from runner.experiment_report import report_experiment
from runner.run import RunOptions, run_experiment

PILOT = """\
experiment: pilot
seeds: 6
real_steps: 600
evaluation: {every: 100, episodes: 3}
environments:
  - label: aisle
    grid: {map: "S.~.\\n.#~G", slip: 0.3}
    step_limit: 30
agents:
  - {label: q, kind: q_learning}
  - {label: dyna, kind: dyna_q, params: {planning_steps: 10}}
baseline: q
"""


def test_seeds_advice_matches_the_power_calculation(tmp_path, capsys):
    path = tmp_path / "pilot.yaml"
    path.write_text(PILOT)
    run_experiment(path, results_root=tmp_path / "results", options=RunOptions(jobs=1))
    folder = tmp_path / "results" / "pilot"
    assert main(["seeds", str(folder), "--difference", "0.1"]) == 0
    out = capsys.readouterr().out
    line = next(text for text in out.splitlines() if "dyna vs q" in text)
    printed = int(re.search(r"needs (\d+) seeds each", line).group(1))
    scores = trial_scores(load_results(folder))
    sd = {agent: scores.loc[scores["agent"] == agent, "auc"].std(ddof=1) for agent in ("dyna", "q")}
    assert printed == seeds_needed(sd["dyna"], sd["q"], 0.1)


def test_seeds_rejects_bad_levels(tmp_path, capsys):
    path = tmp_path / "pilot.yaml"
    path.write_text(PILOT)
    run_experiment(path, results_root=tmp_path / "results", options=RunOptions(jobs=1))
    assert main(["seeds", str(tmp_path / "results" / "pilot"), "--power", "1.5"]) == 2
    assert "alpha and power in (0, 1)" in capsys.readouterr().err


def test_seeds_command_and_report_give_the_same_advice_in_the_same_units(tmp_path, capsys):
    path = tmp_path / "pilot.yaml"
    path.write_text(PILOT.replace("baseline: q", "  - {label: sweep, kind: prioritized_sweeping}\nbaseline: q"))
    run_experiment(path, results_root=tmp_path / "results", options=RunOptions(jobs=1))
    folder = tmp_path / "results" / "pilot"
    report_experiment(folder)
    assert main(["seeds", str(folder)]) == 0
    out = capsys.readouterr().out
    assert "5%, 10%, 20% of each environment's return range" in out
    report = pd.read_csv(folder / "report" / "seeds_advice.csv")
    assert set(report["pair"]) == {"against the baseline", "against the next better"}
    contenders = report[report["pair"] == "against the next better"]
    assert len(contenders) == 3  # the two best agents, besides each against q: one pair at three differences
    for row in report.itertuples():
        needed = "more than 10,000" if pd.isna(row.seeds_needed) else f"needs {int(row.seeds_needed)} seeds each"
        line = f"  {row.agent_a} vs {row.agent_b} ({row.pair}): AUC difference {row.difference:.4g} "
        assert any(text.startswith(line) and needed in text for text in out.splitlines()), line


def test_advice_pairs_add_close_contenders_once():
    means = pd.Series({"q": 0.2, "dyna": 0.7, "sweep": 0.65, "ce": 0.1})
    assert advice_pairs(means, "q") == [
        ("dyna", "q", "against the baseline"),
        ("sweep", "q", "against the baseline"),
        ("ce", "q", "against the baseline"),
        ("sweep", "dyna", "against the next better"),
    ]
