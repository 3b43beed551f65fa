"""MPC with a learned ensemble against soft actor-critic on Pendulum-v1: real steps to a return of -200 over paired
seeds, with the efficiency ratio and its interval from `runner.analysis.efficiency`."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

pytest.importorskip("jax")

from runner.analysis.efficiency import efficiency_ratios, efficiency_sentences
from runner.analysis.threshold import first_sustained_crossing
from runner.trial import run_trial
from runner.trial_spec import TrialSpec

ENV = {"source": "gym", "id": "Pendulum-v1", "options": {}, "step_limit": None}
TARGET = -200.0
"""A mean greedy return of -200 or more: the pendulum swung up and held (a level often used for Pendulum: common
practice; gymnasium registers no reward threshold for Pendulum-v1)."""
SEEDS = (0, 1, 2)
EVERY = 500
"""Real steps between evaluation points; a point's return is the mean of EPISODES greedy episodes of 200 steps."""
EPISODES = 3
MPC_BUDGET = 3_000
"""Real steps of an MPC trial (15 episodes): model-based control is commonly expected to solve Pendulum within a
few thousand real steps (common practice)."""
SAC_BUDGET = 12_000
"""Real steps of a soft actor-critic trial (60 episodes): `test_soft_actor_critic_pendulum.py` sees it near -200
by 7,500 to 10,000 steps."""
MPC_PARAMS = {
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
SAC_PARAMS = {"hidden_units": 64}
"""The kind's defaults (the paper's, from memory) with 2 x 64 units instead of 2 x 256, for speed."""


def _steps_to_target(kind: str, params: dict, seed: int, budget: int) -> tuple[float, bool, list[float]]:
    """Real steps to the first evaluation at or above TARGET (censored at the budget), and the returns seen."""
    spec = TrialSpec.build(
        ENV, kind, params, seed, budget, every=EVERY, episodes=EPISODES, step_cap=200, training_window=5
    )
    rows = run_trial(spec.as_dict()).rows
    steps, reached = first_sustained_crossing(rows["real_steps"], rows["eval_return"], TARGET)
    return steps, reached, np.round(rows["eval_return"]).tolist()


@pytest.mark.slow
def test_mpc_reaches_minus_200_on_pendulum_in_fewer_real_steps_than_soft_actor_critic():
    """Chua et al. (2018) report model-based control with an ensemble needing far fewer real steps than soft
    actor-critic on their tasks (from memory); this checks the direction on Pendulum-v1 at our settings.

    Per seed, real steps to the first evaluation point at or above TARGET; trials that never get there are censored
    at their budget. The ratio is soft actor-critic's Kaplan-Meier median over MPC's (above 1: MPC needs fewer), with
    a 95% paired percentile bootstrap interval over the seeds (`efficiency_ratios`). Asserted: MPC reaches the
    target in at least 2 of 3 seeds and the ratio's point estimate is above 1. With 3 seeds the interval is wide; it
    is printed, and when its lower bound is not above 1 the test still passes but says that no difference is shown.

    In our runs (2026-12-03, 1,070 s on a 2-core machine at a load average of 13-14, 412 s at 5-6; on quiet cores an
    estimated 240 s: the 213 s MPC's trials took as their own test, plus about 27 CPU s of soft actor-critic), MPC
    reached -200 at 2,500, 1,000 and 1,500 real steps (seeds 0, 1, 2: the same rows as its earlier test) and soft
    actor-critic at 6,000 in all three: ratio 4.0, 95% interval 2.4-6, so on these data MPC needed fewer real steps,
    the direction reported."""
    records, curves = [], {}
    for seed in SEEDS:
        for kind, params, budget in (
            ("mpc", MPC_PARAMS, MPC_BUDGET),
            ("soft_actor_critic", SAC_PARAMS, SAC_BUDGET),
        ):
            steps, reached, curves[kind, seed] = _steps_to_target(kind, params, seed, budget)
            records.append({"env": ENV["id"], "agent": kind, "seed": seed, "steps": steps, "reached": reached})
    trials = pd.DataFrame.from_records(records)
    table = efficiency_ratios(trials, "soft_actor_critic", n_resamples=2000, seed=0, resolution={ENV["id"]: EVERY})
    row = table.iloc[0]
    for (kind, seed), returns in curves.items():
        print(f"{kind}, seed {seed}: evaluation returns every {EVERY} real steps {returns}")
    print(trials.to_string(index=False))
    print(table[["ratio", "low", "high", "agent_median", "baseline_median", "note", "bound"]].to_string(index=False))
    print(efficiency_sentences(table, f"a return of {TARGET:g}")[0])
    if not row["low"] > 1.0:
        print("no difference shown: the interval's lower bound is not above 1 (or there is no interval)")
    assert int(trials.query("agent == 'mpc'")["reached"].sum()) >= 2, trials
    assert row["ratio"] > 1.0, table.to_dict("records")
