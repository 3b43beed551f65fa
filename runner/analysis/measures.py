"""The two measures an experiment can rank agents by: greedy evaluation return and the earning rate.

`greedy_return` is the mean return of greedy evaluation episodes on a separate copy of the environment (the
policy the agent would hand over if learning stopped now). `earning_rate` is reward earned while learning per
real step, over each evaluation interval:

    earning_rate[k] = (reward_earned[k] - reward_earned[k-1]) / (real_steps[k] - real_steps[k-1])

It is the slope of the cumulative-reward curves of Sutton & Barto (2018), Examples 8.2 and 8.3, and the quantity
exploration methods such as R-max and Dyna-Q+ trade for: what acting while learning actually earned, exploration
included. It is taken per real step rather than per episode because episodes differ in length between agents and
phases (an agent that wanders earns less per step, which a per-episode figure would hide), and because the mean
earning rate over a trial is exactly its total reward earned divided by its real steps. It is undefined (NaN) at
step 0.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from runner.analysis.bootstrap import keyed_rng, mean_and_interval

__all__ = [
    "EARNING_COLUMNS",
    "EARNING_RATE",
    "GREEDY_RETURN",
    "MEASURES",
    "Measure",
    "earning_summary",
    "measure",
    "with_earning_rate",
]

GREEDY_RETURN = "greedy_return"
EARNING_RATE = "earning_rate"
_TRIAL_KEYS = ["env", "agent", "kind", "trial_id", "seed"]
EARNING_COLUMNS = [
    "env",
    "agent",
    "seeds",
    *(f"{name}_{part}" for name in ("earned", "rate", "final_rate") for part in ("mean", "low", "high")),
]


@dataclass(frozen=True)
class Measure:
    """One measure: its name in experiment files, its column in the results frame, and its wording."""

    name: str
    column: str
    noun: str
    axis: str
    threshold_key: str

    def threshold_text(self, value: float) -> str:
        """Wording of a threshold on this measure, e.g. "a greedy return of 0.7"."""
        if self.name == EARNING_RATE:
            return f"an earning rate of {value:g} reward per real step"
        return f"a return of {value:g}"


MEASURES = {
    GREEDY_RETURN: Measure(
        GREEDY_RETURN, "eval_return", "greedy evaluation return", "mean greedy evaluation return", "threshold"
    ),
    EARNING_RATE: Measure(
        EARNING_RATE,
        EARNING_RATE,
        "reward earned while learning per real step",
        "reward earned per real step (while learning)",
        "earning_threshold",
    ),
}


def measure(name: str) -> Measure:
    """The measure called `name` (one of MEASURES)."""
    try:
        return MEASURES[name]
    except KeyError:
        raise ValueError(f"unknown measure {name!r}; expected one of {', '.join(MEASURES)}") from None


def with_earning_rate(frame: pd.DataFrame) -> pd.DataFrame:
    """The frame with an `earning_rate` column: reward earned per real step since the previous evaluation point.

    Rows are matched to their predecessor within the same trial by point; the first point of a trial, and a
    point whose real steps did not grow, get NaN. Needs the columns env, agent, kind, trial_id, seed, point,
    real_steps and reward_earned; the work is vectorised over all rows.
    """
    if frame.empty:
        return frame.assign(earning_rate=pd.Series(dtype=float))
    codes = frame.groupby(_TRIAL_KEYS, sort=False, observed=True).ngroup().to_numpy()
    order = np.lexsort((frame["point"].to_numpy(), codes))
    code = codes[order]
    steps = frame["real_steps"].to_numpy(dtype=float)[order]
    earned = frame["reward_earned"].to_numpy(dtype=float)[order]
    rate = np.full(code.size, np.nan)
    same = code[1:] == code[:-1]
    span = steps[1:] - steps[:-1]
    usable = same & (span > 0)
    with np.errstate(divide="ignore", invalid="ignore"):
        rate[1:] = np.where(usable, (earned[1:] - earned[:-1]) / span, np.nan)
    values = np.empty(code.size)
    values[order] = rate
    return frame.assign(earning_rate=values)


def earning_summary(
    frame: pd.DataFrame, *, confidence: float = 0.95, n_resamples: int = 2000, seed: int = 0
) -> pd.DataFrame:
    """Per (env, agent): reward earned while learning, with intervals over seeds.

    Columns: env, agent, seeds, then mean, low and high of `earned` (total reward of all real steps),
    `rate` (that total per real step: the trial's mean earning rate) and `final_rate` (the earning rate over
    the last evaluation interval). Needs the `earning_rate` column (`with_earning_rate`).
    """
    if frame.empty:
        return pd.DataFrame(columns=EARNING_COLUMNS)
    last = frame.loc[frame.groupby(["env", "agent", "trial_id"], sort=False, observed=True)["point"].idxmax()]
    steps = last["real_steps"].to_numpy(dtype=float)
    earned = last["reward_earned"].to_numpy(dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        per_trial = last[["env", "agent"]].assign(
            earned=earned,
            rate=np.where(steps > 0, earned / steps, np.nan),
            final_rate=last["earning_rate"].to_numpy(dtype=float),
        )
    rows = []
    for (env, agent), group in per_trial.groupby(["env", "agent"], sort=False):
        row: dict[str, object] = {"env": env, "agent": agent, "seeds": len(group)}
        for name in ("earned", "rate", "final_rate"):
            values = group[name].dropna().to_numpy(dtype=float)
            estimate = (np.nan,) * 3
            if values.size:
                rng = keyed_rng(seed, "earning", name, str(env), str(agent))
                estimate = mean_and_interval(values, confidence=confidence, n_resamples=n_resamples, rng=rng)
            row.update({f"{name}_{part}": float(v) for part, v in zip(("mean", "low", "high"), estimate, strict=True)})
        rows.append(row)
    return pd.DataFrame.from_records(rows, columns=EARNING_COLUMNS)
