"""Qualitative results of Sutton & Barto (2018), chapter 8, reproduced through the trial machinery.

Examples 8.2 and 8.3 (changing environments, Dyna-Q and Dyna-Q+) and Example 8.4 (prioritized sweeping against
Dyna-Q on mazes of growing resolution). The maze layouts are from the book's figures as recalled (from memory);
the checks are the qualitative claims, not the figures' exact numbers.
"""

from collections import deque

import numpy as np
import pandas as pd
import pytest

from runner.agents.dyna_q import DynaQ
from runner.agents.dyna_q_plus import DynaQPlus
from runner.agents.prioritized_sweeping import PrioritizedSweeping
from runner.agents.q_learning import QLearning
from runner.analysis.adaptation import recovery_summary, recovery_times
from runner.analysis.curves import trial_scores
from runner.analysis.measures import with_earning_rate
from runner.envs.grid import GridWorld
from runner.trial import run_trial
from runner.trial_spec import TrialSpec

# Blocking maze (Example 8.2, Figure 8.4): the wall's gap moves from the right end to the left end.
GAP_RIGHT = "........G\n.........\n.........\n########.\n.........\n...S....."
GAP_LEFT = "........G\n.........\n.........\n.########\n.........\n...S....."
# Shortcut maze (Example 8.3, Figure 8.5): a second gap opens on the right; the path shrinks from 16 to 10 steps.
SHORTCUT = "........G\n.........\n.........\n.#######.\n.........\n...S....."
SEEDS = range(10)


def _spec(agent, first, changes, steps, seed, step_reward=0.0, goal_reward=1.0, every=None, cap=100):
    env = {
        "source": "grid",
        "map": first,
        "slip": 0.0,
        "step_reward": step_reward,
        "goal_reward": goal_reward,
        "hazard_penalty": -1.0,
        "hazard_ends": True,
        "step_limit": None,
    }
    if changes:
        env["changes"] = changes
    return TrialSpec.build(
        env,
        agent.kind,
        agent.get_params(),
        seed,
        steps,
        every=every or steps,
        episodes=1,
        step_cap=cap,
        training_window=5,
    ).as_dict()


def _goals_between(result, low, high):
    """Goals reached (episodes finished) with their last step in (low, high]: cumulative reward gained there."""
    ends = np.cumsum(result.episode_lengths)
    return int(np.sum((ends > low) & (ends <= high)))


@pytest.mark.slow
@pytest.mark.parametrize(
    "agent", [DynaQ(planning_steps=10), DynaQPlus(planning_steps=10, kappa=1e-3)], ids=["dyna_q", "dyna_q_plus"]
)
def test_blocking_change_flattens_then_recovers_cumulative_reward(agent):
    before, right_after, late = [], [], []
    for seed in SEEDS:
        result = run_trial(_spec(agent, GAP_RIGHT, [{"at": 1000, "map": GAP_LEFT}], 3000, seed))
        assert result.trial_path == "compiled"
        before.append(_goals_between(result, 500, 1000))
        right_after.append(_goals_between(result, 1000, 1300))
        late.append(_goals_between(result, 2500, 3000))
    print(
        f"{agent.kind}: goals per window before {np.mean(before)}, just after {np.mean(right_after)}, "
        f"late {np.mean(late)}"
    )
    # The curve flattens: far fewer goals per step right after the block than before it ...
    assert np.mean(right_after) / 300 < 0.25 * np.mean(before) / 500
    # ... and recovers once the new way round is learned.
    assert np.mean(late) >= 3 and np.mean(late) / 500 > 4 * np.mean(right_after) / 300


@pytest.mark.slow
def test_after_a_shortcut_opens_dyna_q_plus_takes_it_and_dyna_q_mostly_does_not():
    def settles_on_shortcut(agent, seed):
        result = run_trial(_spec(agent, GAP_LEFT, [{"at": 3000, "map": SHORTCUT}], 6000, seed))
        ends = np.cumsum(result.episode_lengths)
        return np.median(result.episode_lengths[ends > 5000]) < 14  # 10 steps by the shortcut, 16 the long way

    plus = [settles_on_shortcut(DynaQPlus(planning_steps=50, kappa=1e-3), seed) for seed in SEEDS]
    plain = [settles_on_shortcut(DynaQ(planning_steps=50), seed) for seed in SEEDS]
    print(f"shortcut taken: Dyna-Q+ {sum(plus)}/10, Dyna-Q {sum(plain)}/10")
    assert sum(plus) >= 8
    assert sum(plain) <= 2


def _scaled_maze(k):
    """The Dyna maze of Example 8.1 with every cell blown up to k x k cells."""
    base = [".......#G", "..#....#.", "S.#....#.", "..#......", ".....#...", "........."]
    rows = [list("".join(("." if ch in "SG" else ch) * k for ch in line)) for line in base for _ in range(k)]
    rows[2 * k][0] = "S"
    rows[0][9 * k - 1] = "G"
    return "\n".join("".join(r) for r in rows)


def _shortest(text):
    env = GridWorld(text)
    start = int(np.flatnonzero(env.initial_state_distrib)[0])
    dist, queue = {start: 0}, deque([start])
    while queue:
        s = queue.popleft()
        for a in range(4):
            for _, nxt, _, ended in env.P[s][a]:
                if nxt not in dist:
                    dist[nxt] = dist[s] + 1
                    if ended:
                        return dist[nxt]
                    queue.append(nxt)
    raise AssertionError("no path")


@pytest.mark.slow
def test_prioritized_sweeping_needs_fewer_updates_and_the_gap_widens_with_size():
    # Example 8.4 counts updates until the policy is optimal. A cost of -1 per step (goal 0) makes optimality
    # visible in the greedy return: it equals -(shortest path - 1) exactly when the greedy path is shortest.
    gaps = []
    for k in (1, 2, 3):
        maze = _scaled_maze(k)
        length = _shortest(maze)
        medians = {}
        for agent in (DynaQ(planning_steps=5, alpha=0.5), PrioritizedSweeping(planning_steps=5, alpha=0.5)):
            updates = []
            for seed in range(5):
                spec = _spec(agent, maze, None, 4000 * k * k, seed, -1.0, 0.0, every=50, cap=length + 1)
                rows = run_trial(spec).rows
                optimal = np.flatnonzero(rows["eval_return"] == -(length - 1))
                assert optimal.size, (agent.kind, k, seed)
                i = optimal[0]
                updates.append(rows["planning_updates"][i] + rows["real_updates"][i])
            medians[agent.kind] = float(np.median(updates))
        print(f"scale {k} (shortest {length}): updates to optimal {medians}")
        assert medians["prioritized_sweeping"] < medians["dyna_q"]
        gaps.append(medians["dyna_q"] - medians["prioritized_sweeping"])
    assert gaps[0] < gaps[1] < gaps[2]


def test_both_paths_apply_the_change_at_the_same_step():
    agent = DynaQ(planning_steps=5)
    spec = _spec(agent, GAP_RIGHT, [{"at": 1000, "map": GAP_LEFT}], 2000, 0, every=250)
    for path in ("compiled", "gymnasium"):
        rows = run_trial(spec, path).rows
        np.testing.assert_array_equal(rows["env_phase"], [0, 0, 0, 0, 0, 1, 1, 1, 1])


def _frame(agent, label, seeds, cap):
    """Metric rows of the blocking maze (gap moves at 4,000 of 8,000 real steps) as a tidy frame."""
    parts = []
    for seed in seeds:
        spec = _spec(agent, GAP_RIGHT, [{"at": 4000, "map": GAP_LEFT}], 8000, seed, every=200, cap=cap)
        rows = pd.DataFrame(run_trial(spec).rows)
        parts.append(rows.assign(env="maze", agent=label, kind=agent.kind, trial_id=f"{label}-{seed}", seed=seed))
    frame = pd.concat(parts, ignore_index=True)
    return frame.assign(point=frame.groupby("trial_id").cumcount())


@pytest.mark.slow
def test_dyna_q_plus_is_last_on_greedy_return_but_first_to_earn_again_after_the_block():
    # The finding of issue 9: with goal-only rewards and a long evaluation cap, greedy evaluation ranks Dyna-Q+
    # last (it acts greedily on bonus-inflated values), while on reward earned while learning (the measure of
    # Sutton & Barto 2018, Examples 8.2 and 8.3) it recovers first after the block.
    agents = {
        "Q-learning": QLearning(),
        "Dyna-Q": DynaQ(planning_steps=10),
        "Dyna-Q+": DynaQPlus(planning_steps=10, kappa=1e-3),
    }
    frame = with_earning_rate(
        pd.concat([_frame(agent, label, range(12), 1000) for label, agent in agents.items()], ignore_index=True)
    )
    auc = trial_scores(frame).groupby("agent")["auc"].mean()
    summary = recovery_summary(
        recovery_times(frame, {"maze": [4000]}, {"maze": 0.03}, column="earning_rate")
    ).set_index("agent")
    ends = frame[frame["real_steps"].isin([4000, 8000])].pivot_table(
        index=["agent", "trial_id"], columns="real_steps", values="reward_earned"
    )
    after = (ends[8000] - ends[4000]).groupby("agent").mean()  # goal reward 1, no other: goals after the block
    print(f"greedy AUC {auc.round(3).to_dict()}; goals after the block {after.round(1).to_dict()}")
    print(summary[["reached", "median_steps", "median_low", "median_high"]])
    assert auc.idxmin() == "Dyna-Q+"
    assert summary["reached"].idxmax() == "Dyna-Q+" and summary.loc["Dyna-Q+", "reached"] == 12
    assert summary.loc["Dyna-Q+", "median_steps"] < summary.loc["Dyna-Q", "median_steps"] or np.isnan(
        summary.loc["Dyna-Q", "median_steps"]
    )
    assert after.idxmax() == "Dyna-Q+"
