"""Soft actor-critic swings Pendulum-v1 up and holds it within a small budget in most seeds."""

from __future__ import annotations

import numpy as np
import pytest

pytest.importorskip("jax")

from runner.trial import run_trial
from runner.trial_spec import TrialSpec

BUDGET = 10_000
"""Real steps per trial (50 episodes of 200 steps); SAC is commonly expected to hold the pendulum up within about
10,000 to 20,000 steps (common practice)."""
LEVEL = -250.0
"""A mean greedy return of about -200 over 10 episodes is the level commonly taken as swung up and held (common
practice; Pendulum-v1 registers no reward threshold); -250 leaves room for unlucky start states."""
SEEDS = range(5)
PARAMS = {"hidden_units": 64}
"""The kind's defaults (the paper's, from memory) with 2 x 64 units instead of 2 x 256, for speed."""


@pytest.mark.slow
def test_soft_actor_critic_holds_the_pendulum_up_in_most_seeds():
    """The final evaluation (10 greedy episodes after 10,000 real steps) at or above LEVEL in at least 4 of 5
    seeds. In our runs (2026-12-03, this setting) seeds 0-5 ended at -169, -159, -160, -180, -147 and -104, having
    reached -208 to -115 already at 7,500 real steps; each trial took about 5 CPU seconds after compiling."""
    env = {"source": "gym", "id": "Pendulum-v1", "options": {}, "step_limit": None}
    finals = []
    for seed in SEEDS:
        spec = TrialSpec.build(
            env, "soft_actor_critic", PARAMS, seed, BUDGET, every=2_500, episodes=10, step_cap=200, training_window=10
        ).as_dict()
        finals.append(float(run_trial(spec).rows["eval_return"][-1]))
    print(f"final greedy returns after {BUDGET} real steps, seeds {list(SEEDS)}: {np.round(finals).tolist()}")
    assert sum(value >= LEVEL for value in finals) >= 4, finals
