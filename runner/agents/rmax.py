"""R-max: a count model in which pairs tried fewer than m times are assumed to pay the largest reward forever.

Acting greedily on that optimistic model drives the agent to try every pair m times, then exploit; the model is
solved again by value iteration whenever a pair becomes known.
"""

import numpy as np

from runner.agents.certainty_equivalence import (
    CertaintyEquivalence,
    certainty_equivalence_act,
    certainty_equivalence_model_error,
    certainty_equivalence_observe,
    count_model_arrays,
    count_model_prediction,
)
from runner.params import Param

__all__ = ["RMax"]


class RMax(CertaintyEquivalence):
    """R-max on the tabular count model shared with certainty-equivalence."""

    kind = "rmax"
    summary = "count model valuing pairs tried under m times at r_max / (1 - gamma); re-plans as pairs become known"
    source = "Brafman & Tennenholtz (2002), R-max"
    schema = (
        Param("gamma", "float", 0.95, "discount factor", low=0.0, high=1.0, high_open=True),
        Param("known_after", "int", 5, "tries after which a (state, action) pair counts as known (m)", low=1),
        Param("r_max", "float", 1.0, "the largest reward the environment can pay"),
        Param("epsilon", "float", 0.0, "probability of a uniform random action when acting", low=0.0, high=1.0),
        Param(
            "tolerance", "float", 1e-4, "stop sweeping when no state value moves more than this", low=0.0, low_open=True
        ),
        Param("max_sweeps", "int", 200, "cap on value-iteration sweeps per re-plan", low=1),
        Param("max_successors", "int", 32, "distinct next states remembered per (state, action)", low=1),
    )

    def optimistic_value(self) -> float:
        """Value of an unknown pair: r_max paid forever, r_max / (1 - gamma)."""
        return self._params["r_max"] / (1.0 - self._params["gamma"])

    def make_arrays(self, n_states, n_actions):
        return count_model_arrays(n_states, n_actions, self._params["max_successors"], self.optimistic_value())

    def make_hyper(self):
        p = self._params
        # replan_every 0 tells the shared kernel to re-plan exactly when a pair reaches known_after tries.
        return [
            p["gamma"],
            p["epsilon"],
            p["tolerance"],
            float(p["max_sweeps"]),
            0.0,
            0.0,
            self.optimistic_value(),
            float(p["known_after"]),
        ]

    def replans_made(self, real_steps: int) -> int:
        """Value iteration runs once per pair that became known."""
        visits = self.arrays_[5]
        return int(np.count_nonzero(visits >= self._params["known_after"]))

    act_kernel = staticmethod(certainty_equivalence_act)
    observe_kernel = staticmethod(certainty_equivalence_observe)
    model_error_kernel = staticmethod(certainty_equivalence_model_error)
    predict_kernel = staticmethod(count_model_prediction)
