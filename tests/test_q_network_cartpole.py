"""The Q-network with its default parameters reaches CartPole-v1's registered reward threshold in most seeds."""

from __future__ import annotations

import gymnasium as gym
import numpy as np
import pytest

pytest.importorskip("jax")

from runner.trial import run_trial
from runner.trial_spec import TrialSpec

BUDGET = 50_000
"""Real steps per trial: tens of thousands, where a replay-based Q-network is commonly expected to balance
CartPole (common practice)."""
SEEDS = range(5)


@pytest.mark.slow
def test_default_q_network_reaches_the_registered_threshold_in_most_seeds():
    """Threshold: gymnasium's registry, `gymnasium.spec("CartPole-v1").reward_threshold` (475). A seed reaches it
    when the mean return of 10 greedy evaluation episodes, every 2,500 real steps, is at or above it (the tool's
    definition with `consecutive: 1`). In our run (2026-12-03) seeds 0, 1 and 4 reached it, at 37,500, 45,000 and
    37,500 real steps; seeds 2 and 3 did not within the budget."""
    threshold = gym.spec("CartPole-v1").reward_threshold
    assert threshold == 475.0
    env = {"source": "gym", "id": "CartPole-v1", "options": {}, "step_limit": None}
    reached = []
    for seed in SEEDS:
        spec = TrialSpec.build(
            env, "q_network", {}, seed, BUDGET, every=2_500, episodes=10, step_cap=500, training_window=10
        ).as_dict()
        rows = run_trial(spec).rows
        hits = np.nonzero(rows["eval_return"] >= threshold)[0]
        reached.append(int(rows["real_steps"][hits[0]]) if hits.size else None)
    print(f"first real step at or above {threshold:g}, seeds {list(SEEDS)}: {reached}")
    assert sum(step is not None for step in reached) > len(SEEDS) / 2, reached
