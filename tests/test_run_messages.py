"""What `run` tells the user while it works: the compiling note only while numba compiles, time left only once
trials have finished."""

import io
import os
import subprocess
import sys

import pytest

from runner.progress import Progress

EXPERIMENT = """\
experiment: mezzanine
seeds: 1
real_steps: 100
evaluation: {every: 50, episodes: 1}
environments:
  - label: mezzanine
    grid: {map: "S.G"}
    step_limit: 10
agents:
  - {label: q, kind: q_learning}
"""

NOTE = "compiling (first run only; later runs load the compiled code from numba's cache)"


def test_time_left_appears_only_once_a_trial_has_finished():
    stream = io.StringIO()
    progress = Progress(3, stream=stream)
    assert "left" not in progress.line()
    progress.advance()
    assert "left ~" in stream.getvalue().splitlines()[-1]


@pytest.mark.slow
def test_the_compiling_note_shows_on_a_cold_cache_only(tmp_path):
    (tmp_path / "mezzanine.yaml").write_text(EXPERIMENT)
    env = {**os.environ, "NUMBA_CACHE_DIR": str(tmp_path / "numba-cache")}
    outputs = []
    for results in ("first", "second"):  # two results folders: both runs have a trial to run
        command = ["run", "mezzanine.yaml", "--jobs", "1", "--no-report", "--results", results]
        done = subprocess.run(
            [sys.executable, "-m", "runner", *command],
            cwd=tmp_path,
            env=env,
            capture_output=True,
            text=True,
            timeout=900,
        )
        assert done.returncode == 0, done.stderr
        outputs.append(done.stdout)
    assert NOTE in outputs[0]
    assert NOTE not in outputs[1]  # the cache is warm: nothing compiles, nothing is said
