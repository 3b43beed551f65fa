"""Neural Dyna against the Q-network alone on CartPole-v1: real steps to the registered threshold over paired seeds,
with the efficiency ratio and its interval printed (`runner.analysis.efficiency`)."""

from __future__ import annotations

import gymnasium as gym
import numpy as np
import pandas as pd
import pytest

pytest.importorskip("jax")

from runner.analysis.efficiency import efficiency_ratios
from runner.trial import run_trial
from runner.trial_spec import TrialSpec

BUDGET = 30_000
"""Real steps per trial."""
EVERY = 1_000
SEEDS = range(5)
PLANNING = {"planning_steps": 4}
"""The planning budget: 4 planning updates (minibatch steps on simulated transitions) per real update; every other
parameter at its default (so one real update per real step, rollouts of one model step)."""


def _steps_to_threshold(kind: str, params: dict, seed: int, threshold: float) -> tuple[float, bool]:
    env = {"source": "gym", "id": "CartPole-v1", "options": {}, "step_limit": None}
    spec = TrialSpec.build(
        env, kind, params, seed, BUDGET, every=EVERY, episodes=10, step_cap=500, training_window=10
    ).as_dict()
    rows = run_trial(spec).rows
    hits = np.nonzero(rows["eval_return"] >= threshold)[0]
    return (float(rows["real_steps"][hits[0]]), True) if hits.size else (float(BUDGET), False)


@pytest.mark.slow
def test_neural_dyna_against_the_q_network_on_cartpole():
    """Threshold: gymnasium's registry, `gymnasium.spec("CartPole-v1").reward_threshold` (475), reached when the
    mean return of 10 greedy evaluation episodes, every 1,000 real steps, is at or above it. The ratio is the
    Q-network's Kaplan-Meier median of real steps to the threshold over neural Dyna's (above 1: Dyna needs fewer),
    with a 95% paired percentile bootstrap interval over the seeds. The test asserts that every trial ran and the
    comparison was computed; the figures are printed, not asserted (see the README for what they showed)."""
    threshold = gym.spec("CartPole-v1").reward_threshold
    assert threshold == 475.0
    records = []
    for seed in SEEDS:
        for label, kind, params in (("q_network", "q_network", {}), ("neural_dyna", "neural_dyna", PLANNING)):
            steps, reached = _steps_to_threshold(kind, params, seed, threshold)
            records.append({"env": "CartPole-v1", "agent": label, "seed": seed, "steps": steps, "reached": reached})
    trials = pd.DataFrame.from_records(records)
    table = efficiency_ratios(trials, "q_network", n_resamples=2000, seed=0, resolution={"CartPole-v1": EVERY})
    print(trials.to_string(index=False))
    print(table[["ratio", "low", "high", "agent_median", "baseline_median", "note", "bound"]].to_string(index=False))
    assert len(trials) == 2 * len(SEEDS) and len(table) == 1
    assert table["paired_seeds"].iloc[0] == len(SEEDS)
