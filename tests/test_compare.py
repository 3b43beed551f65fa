"""`stepmeter compare` draws several results folders together when environments and protocols match, and says in
one line why not when they do not."""

import pandas as pd
import pytest

from runner.cli import main
from runner.compare_results import compare_folders
from runner.errors import StoreError
from runner.run import RunOptions, run_experiment

EXPERIMENT = """\
experiment: {name}
seeds: 2
real_steps: {steps}
evaluation: {{every: 100, episodes: {episodes}}}
environments:
  - label: {label}
    grid:
      map: |
        S..
        .{cell}G
    step_limit: 20
    threshold: {threshold}
agents:
{agents}
baseline: {baseline}
"""
_Q = "  - {label: q, kind: q_learning}"
_DYNA = "  - {label: dyna, kind: dyna_q, params: {planning_steps: 5}}"
_PS = "  - {label: sweep, kind: prioritized_sweeping}"


def _store(root, name, *, steps=300, episodes=1, label="bay", cell=".", threshold=0.5, agents=(_Q, _DYNA)):
    path = root / f"{name}.yaml"
    text = EXPERIMENT.format(
        name=name,
        steps=steps,
        episodes=episodes,
        label=label,
        cell=cell,
        threshold=threshold,
        agents="\n".join(agents),
        baseline=agents[0].split("label: ")[1].split(",")[0],
    )
    path.write_text(text)
    run_experiment(path, results_root=root / "results", options=RunOptions(jobs=1))
    return root / "results" / name


@pytest.fixture(scope="module")
def stores(tmp_path_factory):
    root = tmp_path_factory.mktemp("compare")
    return {
        "first": _store(root, "crane-a"),
        "second": _store(root, "crane-b", label="loading bay", agents=(_PS, _DYNA)),
        "longer": _store(root, "crane-c", steps=400),
        "walled": _store(root, "crane-d", cell="#"),
        "episodes": _store(root, "crane-e", episodes=2),
        "stricter": _store(root, "crane-f", threshold=0.8),
        "root": root,
    }


def test_matching_folders_share_one_report(stores, tmp_path):
    output, note = compare_folders([stores["first"], stores["second"]], tmp_path / "out")
    summary = pd.read_csv(tmp_path / "out" / "summary.csv")
    assert set(summary["env"]) == {"bay"}  # the second folder's "loading bay" is the same environment
    # The dyna trials of crane-b are the very trials of crane-a (same spec, same ids): kept once.
    assert list(summary["agent"]) == ["crane-a: q", "crane-a: dyna", "crane-b: sweep"]
    assert (
        note == "2 trials stored in more than one folder (the same spec) are shown once, under the first folder's label"
    )
    assert (tmp_path / "out" / "curves_bay.png").exists() and (tmp_path / "out" / "report.html").exists()
    assert "crane-a vs crane-b" in output.terminal_text


@pytest.mark.parametrize(
    ("other", "reason"),
    [
        ("longer", "real steps 300 against 400"),
        ("walled", "their environments differ (bay of the first has no match)"),
        ("episodes", 'evaluation of bay {"episodes": 1, "every": 100, "step_cap": 20} against {"episodes": 2,'),
        ("stricter", "threshold of bay 0.5 against 0.8"),
    ],
)
def test_folders_that_differ_are_refused_with_the_reason(stores, tmp_path, other, reason):
    with pytest.raises(StoreError, match="cannot compare") as caught:
        compare_folders([stores["first"], stores[other]], tmp_path / "out")
    assert reason in str(caught.value)
    assert not (tmp_path / "out").exists()


def test_the_command_prints_one_line_and_exits_2_when_protocols_differ(stores, tmp_path, capsys):
    assert main(["compare", str(stores["first"]), str(stores["longer"]), "--out", str(tmp_path / "out")]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "real steps 300 against 400" in err[0]
    assert main(["compare", str(stores["first"])]) == 2
    assert "at least two results folders" in capsys.readouterr().err
