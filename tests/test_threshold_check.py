"""Best possible return and earning rate on the true table, and `stepmeter check` warning about thresholds."""

import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from scipy.sparse import csr_matrix
from scipy.sparse.csgraph import shortest_path

from runner.envs.grid import GridWorld
from runner.envs.table import table_from_env
from runner.planning.horizon import best_earning_rate, best_return
from runner.planning.value_iteration import solve_dense_mdp

_REPO = Path(__file__).resolve().parents[1]
# The Dyna maze of Sutton & Barto (2018), Example 8.1 (layout from memory).
_MAZE = ".......#G\n..#....#.\nS.#....#.\n..#......\n.....#...\n........."


def _distance(env: GridWorld) -> int:
    """Steps from the start to the goal, from scipy's shortest paths over the deterministic moves."""
    n = env.observation_space.n
    rows, cols = [], []
    for s in range(n):
        for a in range(4):
            for _, nxt, _, _ in env.P[s][a]:
                if nxt != s:
                    rows.append(s)
                    cols.append(nxt)
    graph = csr_matrix((np.ones(len(rows)), (rows, cols)), shape=(n, n))
    start = int(np.flatnonzero(env.initial_state_distrib)[0])
    goal = "".join(env.spec_.rows).index("G")
    # reference: scipy.sparse.csgraph.shortest_path (unweighted breadth-first distances)
    return int(shortest_path(graph, unweighted=True, indices=start)[goal])


@pytest.mark.parametrize(("step_reward", "goal_reward"), [(0.0, 1.0), (-0.01, 1.0), (-1.0, 0.0)])
def test_best_return_and_rate_on_a_deterministic_maze_follow_the_shortest_path(step_reward, goal_reward):
    env = GridWorld(_MAZE, step_reward=step_reward, goal_reward=goal_reward)
    table = table_from_env(env)
    d = _distance(env)
    assert d == 14  # Sutton & Barto (2018), Example 8.1: the shortest path takes 14 steps (from memory)
    episode = goal_reward + step_reward * (d - 1)
    assert best_return(table, 100) == pytest.approx(episode)
    assert best_return(table, d) == pytest.approx(episode)
    # one step short of the goal: only step rewards (every move, into a wall or not, earns the step reward)
    assert best_return(table, d - 1) == pytest.approx(step_reward * (d - 1))
    if episode > 0:
        assert best_earning_rate(table) == pytest.approx(episode / d, rel=1e-3)


def test_best_return_on_a_slippery_floor_matches_value_iteration_with_a_long_cap():
    env = GridWorld("S.~~.\n.#~#.\n..~.G", slip=0.3, step_reward=-0.05, goal_reward=1.0)
    table = table_from_env(env)
    n = env.observation_space.n
    transitions, rewards = np.zeros((n, 4, n)), np.zeros((n, 4))
    for s in range(n):
        for a in range(4):
            for p, nxt, r, done in env.P[s][a]:
                rewards[s, a] += p * r
                if not done:
                    transitions[s, a, nxt] += p
    values, _, _ = solve_dense_mdp(transitions, rewards, gamma=1.0)
    start = int(np.flatnonzero(env.initial_state_distrib)[0])
    assert best_return(table, 2000) == pytest.approx(values[start], abs=1e-8)
    assert best_return(table, 6) < best_return(table, 2000)  # the shortest way takes 6 steps, and may slip


def _stepmeter(*args: str, cwd: Path) -> subprocess.CompletedProcess:
    env = dict(os.environ)
    env["PYTHONPATH"] = os.pathsep.join(p for p in (str(_REPO), env.get("PYTHONPATH", "")) if p)
    return subprocess.run(
        [sys.executable, "-m", "runner", *args], cwd=cwd, env=env, capture_output=True, text=True, timeout=120
    )


_CHECKED = """\
experiment: out-of-reach
seeds: 2
real_steps: 2000
evaluation: {every: 500, step_cap: 20}
analysis: {measure: earning_rate}
environments:
  - label: corridor
    grid:
      map: "S...G"
      step_reward: -0.1
      changes:
        - at: 1000
          map: "S#..G"
    threshold: 0.8
    earning_threshold: 0.15
agents:
  - {label: q, kind: q_learning}
"""


def test_check_warns_about_thresholds_above_the_best_possible(tmp_path):
    (tmp_path / "reach.yaml").write_text(_CHECKED, encoding="utf-8")
    result = _stepmeter("check", "reach.yaml", cwd=tmp_path)
    assert result.returncode == 0, result.stderr
    warnings = [line for line in result.stdout.splitlines() if "warning:" in line]
    # phase 1: 4 steps to the goal, return 1 - 0.3 = 0.7 < 0.8, rate 0.7 / 4 = 0.175 >= 0.15
    # phase 2: the goal cannot be reached, so the best is 20 steps of -0.1 and a rate of -0.1 per step
    assert warnings[0] == (
        "reach.yaml:14: environments[0].threshold: warning: 0.8 is above the best possible expected return in "
        "phase 1 (before the change at 1,000 real steps), 0.7 within the evaluation cap of 20 steps (solved on "
        "the true table): no agent can reach it"
    )
    assert warnings[1].startswith("reach.yaml:14: environments[0].threshold: warning: 0.8 is above the best ")
    assert "in phase 2 (after the change at 1,000 real steps), -2 within" in warnings[1]
    assert warnings[2].startswith("reach.yaml:15: environments[0].earning_threshold: warning: 0.15 is above the")
    assert "phase 2" in warnings[2] and "-0.1 (solved on the true table, episodes restarting)" in warnings[2]
    assert len(warnings) == 3


def test_best_earning_rate_ignores_a_walled_off_region_the_start_cannot_reach():
    # the goal lies behind a wall: from the start no reward can be earned at all, whatever the far side offers
    env = GridWorld("S.#.G\n..#..", step_reward=0.0, goal_reward=1.0)
    assert best_earning_rate(table_from_env(env)) == pytest.approx(0.0, abs=1e-9)
    assert best_return(table_from_env(env), 50) == 0.0
