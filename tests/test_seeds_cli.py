"""`stepmeter seeds`: seeds advice from a stored pilot experiment, agreeing with the power module it prints."""

import re

from runner.analysis.curves import trial_scores
from runner.analysis.frames import load_results
from runner.analysis.power import seeds_needed
from runner.cli import main
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
