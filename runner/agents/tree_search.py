"""Tree-search agents: Monte Carlo tree search from the current state at every real step, UCT or PUCT.

Each real step the agent searches from its state on a model (its learned count model, or with `model: oracle`
the environment's true table) and acts epsilon-greedily on the root: the greedy choice is the most-visited action.
From every real transition it makes a Q-learning update (its Q-table guides greedy rollouts, PUCT priors and PUCT
leaf values) and counts the transition into its model. Why: these kinds measure how many real steps
decision-time planning saves, beside the background planning of Dyna-Q and certainty-equivalence.

Accounting: `planning_updates` counts simulations done while acting (evaluation searches are not counted);
`model_updates` counts real transitions put into the learned model (none for the oracle). The act kernel cannot
reach the counters, so it leaves the number of simulations in a pending cell that the next observe adds.
"""

from __future__ import annotations

from typing import ClassVar

import numpy as np
from numba import njit

from runner.agents.base import TabularAgent
from runner.agents.certainty_equivalence import expected_bin_centre
from runner.agents.common import ALPHA, EPSILON, GAMMA
from runner.agents.kernels import q_learning_update
from runner.models.table_error import true_mean_reward, true_probability
from runner.params import PLANNING_BUDGET, Param
from runner.planning.tree import (
    BACKUP_BELLMAN,
    BACKUP_MEAN,
    ROLLOUT_GREEDY,
    ROLLOUT_UNIFORM,
    S_GAMMA,
    SELECT_PUCT,
    SELECT_UCT,
    SETTINGS_SIZE,
    TREE_SIZE,
    UNVISITED_OPTIMISTIC,
    UNVISITED_SELF_LOOP,
    count_model_update,
    most_visited,
    new_count_model,
    new_tree,
    root_feedback,
    root_statistics,
    run_search,
    table_arrays,
)
from runner.streams import below, uniform
from runner.tags import AgentTags

__all__ = ["PUCTSearch", "UCTSearch"]

# hyper: the search settings (runner.planning.tree.S_*), then these.
_EPSILON, _ALPHA, _FEEDBACK = SETTINGS_SIZE, SETTINGS_SIZE + 1, SETTINGS_SIZE + 2
_FEEDBACK_CODES = {"none": 0, "root": 1}
_ROLLOUT_CODES = {"uniform": ROLLOUT_UNIFORM, "greedy": ROLLOUT_GREEDY}
_UNVISITED_CODES = {"optimistic": UNVISITED_OPTIMISTIC, "self_loop": UNVISITED_SELF_LOOP}
_BACKUP_CODES = {"mean": BACKUP_MEAN, "bellman": BACKUP_BELLMAN}

# arrays: Q, the count model (5 arrays), the tree (TREE_SIZE arrays), the true table (5), pending simulations.
_Q = 0
_MODEL = 1
_TREE = _MODEL + 5
_TABLE = _TREE + TREE_SIZE
_PENDING = _TABLE + 5


@njit(cache=True)
def _parts(arrays):
    """The count model, tree and table sub-tuples of the flat arrays tuple."""
    return arrays[_MODEL:_TREE], arrays[_TREE:_TABLE], arrays[_TABLE:_PENDING]


@njit(cache=True)
def tree_search_act(arrays, hyper, state, stream):
    """Search from `state`, optionally pull the root's Q toward the search means, act epsilon-greedily."""
    model, tree, table = _parts(arrays)
    q = arrays[_Q]
    done = run_search(q, model, table, tree, hyper, state, stream)
    arrays[_PENDING][0] += done
    if np.int64(hyper[_FEEDBACK]) == 1:
        root_feedback(tree, q, state, hyper[_ALPHA])
    if uniform(stream) < hyper[_EPSILON]:
        return below(stream, q.shape[1])
    return most_visited(tree, 0, stream)


@njit(cache=True)
def tree_search_greedy(arrays, hyper, state, stream):
    """Evaluation: the same search, no epsilon, no feedback, no counting; the most-visited root action."""
    model, tree, table = _parts(arrays)
    run_search(arrays[_Q], model, table, tree, hyper, state, stream)
    return most_visited(tree, 0, stream)


@njit(cache=True)
def tree_search_observe(arrays, hyper, counters, state, action, reward, next_state, terminated, stream):
    """Q-learning update, count-model update (learned model only), and the pending simulations counted."""
    q_learning_update(arrays[_Q], state, action, reward, next_state, terminated, hyper[_ALPHA], hyper[S_GAMMA])
    counters[0] += 1
    if arrays[_TABLE].shape[0] == 0:
        model, _, _ = _parts(arrays)
        count_model_update(model, state, action, reward, next_state, terminated)
        counters[2] += 1
    counters[1] += arrays[_PENDING][0]
    arrays[_PENDING][0] = 0


@njit(cache=True)
def tree_search_model_error(arrays, table):
    """Mean total-variation distance and mean absolute reward error of the count model over visited pairs (NaN
    before any); 0 for the oracle, whose model is the true table."""
    if arrays[_TABLE].shape[0] > 0:
        return 0.0, 0.0
    model, _, _ = _parts(arrays)
    succ, count, reward_sum, n_succ, visits = model
    n_states, n_actions = visits.shape
    tv = 0.0
    reward_error = 0.0
    visited = 0
    for s in range(n_states):
        for a in range(n_actions):
            total = visits[s, a]
            if total == 0.0:
                continue
            pair = s * n_actions + a
            overlap = 0.0
            mean_reward = 0.0
            for j in range(n_succ[s, a]):
                overlap += min(count[s, a, j] / total, true_probability(table, pair, succ[s, a, j], n_states))
                mean_reward += reward_sum[s, a, j]
            tv += 1.0 - overlap
            reward_error += abs(mean_reward / total - true_mean_reward(table, pair))
            visited += 1
    if visited == 0:
        return np.nan, np.nan
    return tv / visited, reward_error / visited


@njit(cache=True)
def tree_search_prediction(arrays, state, action, grid, out):
    """Predicted next observation on bins (into `out`) and reward from the learned count model: the expected bin
    centre and the mean reward (see `runner.models.bin_prediction`). The oracle never runs on bins (it needs a
    true table), so it predicts nothing (NaN)."""
    if arrays[_TABLE].shape[0] > 0:
        out[:] = np.nan
        return np.nan
    model, _, _ = _parts(arrays)
    succ, count, reward_sum, n_succ, visits = model
    total_reward = 0.0
    for j in range(n_succ[state, action]):
        total_reward += reward_sum[state, action, j]
    return expected_bin_centre(succ, count, n_succ, visits, total_reward, state, action, grid, out)


_SHARED = (
    Param("simulations", "int", 100, "simulations per search (one search per real step)", low=1, role=PLANNING_BUDGET),
    Param("depth", "int", 20, "depth limit of a simulation, tree and rollout steps together", low=1),
    Param(
        "backup",
        "choice",
        "mean",
        "mean: average sampled returns; bellman: the model's one-step expectation over the tree's values",
        choices=tuple(_BACKUP_CODES),
    ),
    GAMMA,
    Param(
        "rollout",
        "choice",
        "uniform",
        "rollout policy from a new leaf: uniform random, or greedy on the agent's Q",
        choices=tuple(_ROLLOUT_CODES),
    ),
    Param(
        "model",
        "choice",
        "learned",
        "what the search samples: the learned count model, or the environment's true table (oracle)",
        choices=("learned", "oracle"),
    ),
    EPSILON,
    ALPHA,
    Param(
        "feedback",
        "choice",
        "none",
        "search statistics fed into Q: none, or root (move Q(root, .) toward the search means by alpha)",
        choices=tuple(_FEEDBACK_CODES),
    ),
    Param("node_capacity", "int", 1024, "most tree nodes per search (one node per state reached)", low=1, high=10**6),
    Param(
        "unvisited",
        "choice",
        "optimistic",
        "learned model, never-tried pair: worth optimistic_value, or a zero-reward self-loop",
        choices=tuple(_UNVISITED_CODES),
    ),
    Param("optimistic_value", "float", 1.0, "value of a never-tried pair when unvisited is optimistic"),
    Param("max_successors", "int", 32, "distinct next states the learned model keeps per (state, action)", low=1),
)


class _TreeSearch(TabularAgent):
    """What UCT and PUCT share: arrays, hyper layout, kernels, oracle handling and accounting."""

    tags = AgentTags(learned_model="table")

    selection: ClassVar[int] = SELECT_UCT

    def uses_table(self) -> bool:
        return self._params["model"] == "oracle"

    def label_note(self) -> str:
        return "oracle: true model" if self.uses_table() else ""

    def make_arrays(self, n_states: int, n_actions: int) -> tuple[np.ndarray, ...]:
        p = self._params
        oracle = self.uses_table()
        width = 1 if oracle else min(p["max_successors"], n_states + 1)
        return (
            np.zeros((n_states, n_actions), dtype=np.float64),
            *new_count_model(n_states, n_actions, width),
            *new_tree(p["node_capacity"], n_states, n_actions, p["depth"]),
            *table_arrays(self.table_ if oracle else None),
            np.zeros(1, dtype=np.int64),
        )

    def make_hyper(self) -> list[float]:
        p = self._params
        settings = [
            float(p["simulations"]),
            float(self.selection),
            p["exploration"],
            float(p["depth"]),
            p["gamma"],
            float(_ROLLOUT_CODES[p["rollout"]]),
            p.get("lambda", 1.0),
            p.get("temperature", 1.0),
            float(_UNVISITED_CODES[p["unvisited"]]),
            p["optimistic_value"],
            float(_BACKUP_CODES[p["backup"]]),
        ]
        return [*settings, p["epsilon"], p["alpha"], float(_FEEDBACK_CODES[p["feedback"]])]

    def search_root(self, state: int, stream: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Run the evaluation search from `state` and return the root's (visit counts, values) per action.

        Like `greedy`, it changes neither Q, the model nor the counters; an unvisited action's value is NaN.
        """
        self.greedy_kernel(self.arrays_, self.hyper_, int(state), stream)
        return self.last_root()

    def last_root(self) -> tuple[np.ndarray, np.ndarray]:
        """The root's (visit counts, values) per action of the most recent search (acting or evaluating)."""
        return root_statistics(self.arrays_[_TREE:_TABLE])

    def counter_problems(self, real_steps: int) -> list[str]:
        c = self.counters()
        problems = super().counter_problems(real_steps)
        if c["real_updates"] != real_steps:
            problems.append(f"real_updates {c['real_updates']} != real steps {real_steps}")
        expected = self._params["simulations"] * real_steps
        if c["planning_updates"] != expected:
            problems.append(f"planning_updates {c['planning_updates']} != simulations x real steps = {expected}")
        models = 0 if self.uses_table() else real_steps
        if c["model_updates"] != models:
            problems.append(f"model_updates {c['model_updates']} != {models} for model {self._params['model']!r}")
        return problems

    act_kernel = staticmethod(tree_search_act)
    observe_kernel = staticmethod(tree_search_observe)
    greedy_kernel = staticmethod(tree_search_greedy)
    model_error_kernel = staticmethod(tree_search_model_error)
    predict_kernel = staticmethod(tree_search_prediction)


def _exploration(default: float, meaning: str) -> Param:
    return Param("exploration", "float", default, meaning, low=0.0)


class UCTSearch(_TreeSearch):
    """Monte Carlo tree search with UCT selection and rollout leaf values, re-searched at every real step."""

    kind = "uct_search"
    summary = "Monte Carlo tree search (UCT, rollouts) from each state on a learned count model or the true table"
    source = "Kocsis & Szepesvari (2006); Sutton & Barto (2018), section 8.11; bellman back-up: Keller & Helmert (2013)"
    selection = SELECT_UCT
    schema = (_exploration(1.0, "UCT constant c in mean + c * sqrt(ln N / n)"), *_SHARED)


class PUCTSearch(_TreeSearch):
    """Monte Carlo tree search with prior-weighted (PUCT) selection and lambda-mixed leaf values."""

    kind = "puct_search"
    summary = "tree search with PUCT selection (softmax-of-Q priors) and leaf values mixing max Q and a rollout"
    source = "Rosin (2011); Silver et al. (2016, 2017); bellman back-up: Keller & Helmert (2013)"
    selection = SELECT_PUCT
    schema = (
        _exploration(1.0, "PUCT constant c in mean + c * prior * sqrt(N) / (1 + n)"),
        *_SHARED,
        Param(
            "temperature",
            "float",
            1.0,
            "temperature of the softmax of Q(s, .) that gives the priors",
            low=0.0,
            low_open=True,
        ),
        Param(
            "lambda", "float", 0.5, "leaf value weight on the rollout return (1 - lambda on max_a Q)", low=0.0, high=1.0
        ),
    )
