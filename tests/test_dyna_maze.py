"""The Dyna maze of Sutton & Barto (2018), Example 8.1 / Figure 8.2, through the real trial loop.

6 x 9 grid, start at row 2 column 0, goal at row 0 column 8, walls at column 2 rows 1-3, column 5 row 4 and
column 7 rows 0-2 (0-based rows from the top); reward 1 on reaching the goal, 0 otherwise; alpha 0.1,
gamma 0.95, epsilon 0.1, Q initialised to 0 (all from the book's Example 8.1).
"""

from collections import deque

import numpy as np
import pytest

from runner.agents.dyna_q import DynaQ
from runner.agents.q_learning import QLearning
from runner.envs.grid import GridWorld
from runner.metrics import METRIC_COLUMNS, TIMING_COLUMNS
from runner.trial import run_trial
from runner.trial_spec import TrialSpec

MAZE = """\
.......#G
..#....#.
S.#....#.
..#......
.....#...
.........
"""
N_COLS = 9
SHORTEST = 14  # Sutton & Barto (2018), Example 8.1: the shortest path takes 14 steps
HYPER = {"alpha": 0.1, "gamma": 0.95, "epsilon": 0.1, "initial_q": 0.0}  # Sutton & Barto (2018), Example 8.1
SEEDS = range(10)
EPISODES = 50  # Figure 8.2 plots the first 50 episodes
BUDGET = 8000  # the slowest seed of n=0 needs about 6000 real steps for 50 episodes; checked below
# "Near the shortest length": 1.5 x 14 = 21 steps. Under epsilon-greedy behaviour (epsilon 0.1) even an
# optimal greedy policy takes about 16-17 steps on average here (random actions cost detours), so the bound
# must sit above that plateau with room for seed-to-seed noise in a 10-seed mean, yet far below the lengths
# of the exploring episodes (hundreds of steps).
NEAR_SHORTEST = 1.5 * SHORTEST


def _env_spec() -> dict:
    return {
        "source": "grid",
        "map": MAZE,
        "slip": 0.0,
        "step_reward": 0.0,
        "goal_reward": 1.0,
        "hazard_penalty": -1.0,
        "hazard_ends": True,
        "step_limit": None,
    }


def _spec(kind: str, params: dict, seed: int, real_steps: int, every: int) -> dict:
    return TrialSpec.build(
        _env_spec(),
        kind,
        params,
        seed,
        real_steps,
        every=every,
        episodes=1,
        step_cap=100,
        training_window=10,
    ).as_dict()


def test_maze_layout_matches_the_book():
    # Sutton & Barto (2018), Example 8.1 / Figure 8.2 (positions as given in the brief, 0-based from the top).
    rows = MAZE.splitlines()
    assert len(rows) == 6 and all(len(r) == N_COLS for r in rows)
    walls = {(r, c) for r, row in enumerate(rows) for c, ch in enumerate(row) if ch == "#"}
    assert walls == {(1, 2), (2, 2), (3, 2), (4, 5), (0, 7), (1, 7), (2, 7)}
    assert rows[2][0] == "S" and rows[0][8] == "G"


def test_shortest_path_over_the_env_table_is_14():
    """Breadth-first search over GridWorld(map).P (the env's own table), start to goal."""
    env = GridWorld(MAZE)
    start = 2 * N_COLS + 0
    goal = 0 * N_COLS + 8
    dist = {start: 0}
    queue = deque([start])
    while queue:
        s = queue.popleft()
        for a in range(4):
            for prob, nxt, _reward, terminated in env.P[s][a]:
                if prob > 0 and nxt not in dist:
                    dist[nxt] = dist[s] + 1
                    if not terminated:
                        queue.append(nxt)
    assert dist[goal] == SHORTEST  # Sutton & Barto (2018), Example 8.1
    # The goal is the only terminating cell reachable, and it pays the goal reward.
    assert all(t == (nxt == goal) for s in dist for a in range(4) for _, nxt, _, t in env.P[s][a] if s != goal)


def _episodes_to_settle(mean_lengths: np.ndarray, bound: float) -> int:
    """First episode index k such that every seed-averaged length from k on is <= bound (len if never)."""
    above = np.flatnonzero(mean_lengths > bound)
    return 0 if above.size == 0 else int(above[-1]) + 1


def test_episodes_to_settle_helper():
    assert _episodes_to_settle(np.array([30.0, 10.0, 25.0, 12.0, 11.0]), 21.0) == 3
    assert _episodes_to_settle(np.array([10.0, 11.0]), 21.0) == 0
    assert _episodes_to_settle(np.array([10.0, 30.0]), 21.0) == 2


@pytest.mark.slow
def test_more_planning_settles_in_fewer_episodes():
    # Qualitative claim of Sutton & Barto (2018), Figure 8.2: with n = 50 planning steps the agent reaches
    # near-optimal episodes within a few episodes, n = 5 takes somewhat longer, n = 0 (Q-learning) far longer.
    settle = {}
    for n in (0, 5, 50):
        params = DynaQ(planning_steps=n, **HYPER).get_params()
        lengths = []
        for seed in SEEDS:
            result = run_trial(_spec("dyna_q", params, seed, BUDGET, BUDGET))
            assert result.episode_lengths.size >= EPISODES, (n, seed, result.episode_lengths.size)
            # Deterministic maze: no episode can be shorter than the shortest path.
            assert result.episode_lengths.min() >= SHORTEST
            lengths.append(result.episode_lengths[:EPISODES])
        mean = np.mean(lengths, axis=0)
        settle[n] = _episodes_to_settle(mean, NEAR_SHORTEST)
        print(
            f"n={n:>2}: episodes until the 10-seed mean length stays <= {NEAR_SHORTEST:g}: {settle[n]}; "
            f"mean length of episode 1 = {mean[0]:.1f}, of episodes 41-50 = {mean[40:].mean():.1f}"
        )
    assert settle[50] < settle[5] < settle[0]
    assert settle[0] < EPISODES  # even Q-learning settles within the 50 episodes plotted in the book


def test_dyna_q_with_zero_planning_is_q_learning_bit_for_bit():
    # Sutton & Barto (2018), section 8.2: with n = 0 Dyna-Q reduces to one-step tabular Q-learning.
    steps, every = 4000, 500
    for seed in (0, 7):
        dyna = run_trial(_spec("dyna_q", DynaQ(planning_steps=0, **HYPER).get_params(), seed, steps, every))
        ql = run_trial(_spec("q_learning", QLearning(**HYPER).get_params(), seed, steps, every))
        np.testing.assert_array_equal(dyna.episode_lengths, ql.episode_lengths)
        np.testing.assert_array_equal(dyna.episode_returns, ql.episode_returns)
        assert dyna.episode_lengths.size > 3
        # Every metric column agrees exactly, except the clocks and the model columns: Dyna-Q still records
        # each real transition into its model (one model update per real step, a model error), Q-learning has none.
        model_columns = ("model_updates", "model_tv_error", "model_reward_error")
        for column in METRIC_COLUMNS:
            if column in TIMING_COLUMNS or column in model_columns:
                continue
            np.testing.assert_array_equal(dyna.rows[column], ql.rows[column], err_msg=column)
        np.testing.assert_array_equal(dyna.rows["model_updates"], dyna.rows["real_steps"])
        np.testing.assert_array_equal(ql.rows["model_updates"], np.zeros_like(ql.rows["real_steps"]))
        np.testing.assert_array_equal(dyna.rows["planning_updates"], 0.0)
        np.testing.assert_array_equal(dyna.rows["real_updates"], dyna.rows["real_steps"])
