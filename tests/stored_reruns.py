"""One check shared by the neural kinds' tests: an experiment stored once on the compiled path and once on the
step-by-step path, then `stepmeter rerun --all` reproducing both trials bit for bit."""

from pathlib import Path

from runner.cli import main
from runner.run import RunOptions, run_experiment


def assert_reruns_on_both_paths(tmp_path: Path, capsys, text: str, name: str) -> None:
    """Store seed 0 of the one-seed experiment `text` (named `name`) on the compiled path and seed 1 on the
    gymnasium path, then check that `rerun --all` says both reproduce their stored rows on their own paths."""
    path = tmp_path / f"{name}.yaml"
    path.write_text(text)
    results = tmp_path / "results"
    run_experiment(path, results_root=results, options=RunOptions(jobs=1))
    path.write_text(text.replace("seeds: 1", "seeds: 2"))
    run_experiment(path, results_root=results, options=RunOptions(jobs=1, trial_path="gymnasium"))
    capsys.readouterr()
    assert main(["rerun", str(results / name), "--all"]) == 0
    out = capsys.readouterr().out.splitlines()
    assert out[-1] == "2 of 2 re-run trials reproduced their stored rows"
    assert sorted(line.rsplit("(", 1)[1] for line in out[:-1]) == [
        "compiled path): same rows bit for bit",
        "gymnasium path): same rows bit for bit",
    ]
