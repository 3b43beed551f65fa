"""MPC with a learned ensemble swings up and holds Pendulum-v1 within a few thousand real steps."""

from __future__ import annotations

import numpy as np
import pytest

pytest.importorskip("jax")

from runner.trial import run_trial
from runner.trial_spec import TrialSpec

BUDGET = 3_000
"""Real steps per trial (15 episodes of 200 steps): model-based control is commonly expected to solve Pendulum
within a few thousand real steps (common practice)."""
TARGET = -200.0
"""A mean evaluation return of -200 or more: the pendulum swung up and held (common practice level; gymnasium
registers no reward threshold for Pendulum-v1)."""
SEEDS = (0, 1, 2)
PARAMS = {
    "horizon": 15,
    "candidates": 200,
    "iterations": 4,
    "elites": 20,
    "particles": 0,
    "termination": "none",
    "members": 3,
    "hidden_layers": 2,
    "hidden_units": 64,
    "model_epochs": 10,
    "learning_starts": 400,
    "model_every": 200,
    "buffer_size": 4096,
}


@pytest.mark.slow
def test_mpc_with_a_learned_ensemble_reaches_minus_200_on_pendulum():
    """A seed reaches the target when the mean return of 3 greedy evaluation episodes, every 500 real steps, is at
    or above it. In our run (2026-12-03, 601 s wall for the three on a busy 2-core machine) seeds 0, 1 and 2 reached it
    at 2,500, 1,000 and 1,500 real steps."""
    env = {"source": "gym", "id": "Pendulum-v1", "options": {}, "step_limit": None}
    reached = []
    for seed in SEEDS:
        spec = TrialSpec.build(env, "mpc", PARAMS, seed, BUDGET, every=500, episodes=3, step_cap=200, training_window=5)
        rows = run_trial(spec.as_dict()).rows
        hits = np.nonzero(rows["eval_return"] >= TARGET)[0]
        reached.append(int(rows["real_steps"][hits[0]]) if hits.size else None)
        print(f"seed {seed}: evaluation returns {np.round(rows['eval_return'], 1).tolist()}")
    print(f"first real step at or above {TARGET:g}, seeds {list(SEEDS)}: {reached}")
    assert sum(step is not None for step in reached) > len(SEEDS) / 2, reached
