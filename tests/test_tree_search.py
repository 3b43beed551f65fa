"""Tree-search agents (UCT and PUCT): the contract, the Example 8.1 maze, a bandit, accounting and the model.

The kinds are reached through their entry points; where the contract's trial check looks a kind up by name, the
registry entry is added for the test only (monkeypatch), so the package registry is not edited here.
"""

import textwrap

import numpy as np
import pytest

from runner.agents import AGENTS
from runner.agents.tree_search import PUCTSearch, UCTSearch
from runner.checks import check_agent
from runner.config import load_experiment
from runner.envs.grid import GridWorld
from runner.envs.table import _closed_cdfs, table_from_env
from runner.errors import EnvironmentSourceError
from runner.planning.tree import UNVISITED_OPTIMISTIC, model_step, table_arrays
from runner.streams import new_stream
from runner.trial import run_trial
from runner.trial_spec import TrialSpec

ENTRY = {
    "uct_search": "runner.agents.tree_search:UCTSearch",
    "puct_search": "runner.agents.tree_search:PUCTSearch",
}

MAZE = """\
.......#G
..#....#.
S.#....#.
..#......
.....#...
.........
"""
"""Sutton & Barto (2018), Example 8.1: 6 x 9 maze, start S, goal G (reward 1), walls #."""
START = 2 * 9 + 0
SHORTEST = 14  # Sutton & Barto (2018), Example 8.1: the shortest path from S to G takes 14 steps

ORACLE_MAZE = {
    "model": "oracle",
    "backup": "bellman",
    "exploration": 5.0,
    "depth": 80,
    "simulations": 1000,
}
"""Enough search for the oracle to find a shortest path from the start at every step (measured: 100 of 100
evaluation walks from S with different streams took 14 steps). The Bellman back-up passes the one sparse reward
back to the root; see the module docstring of runner/planning/tree.py."""


@pytest.fixture(autouse=True)
def _registered(monkeypatch):
    for name, entry in ENTRY.items():
        monkeypatch.setitem(AGENTS.entries, name, entry)


def _maze_env_spec() -> dict:
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


def _spec(kind: str, params: dict, seed: int, real_steps: int, every: int, step_cap: int) -> dict:
    return TrialSpec.build(
        _maze_env_spec(),
        kind,
        params,
        seed,
        real_steps,
        every=every,
        episodes=1,
        step_cap=step_cap,
        training_window=10,
    ).as_dict()


def _maze_agent(cls, **params):
    env = GridWorld(MAZE)
    agent = cls(**params)
    agent.setup(env.observation_space.n, env.action_space.n, 0, table=table_from_env(env).as_tuple())
    return agent, env


def _greedy_path_length(agent, env, stream, cap: int = 40) -> int | None:
    """Moves the agent's evaluation policy takes from S to a terminal cell of the (deterministic) maze."""
    state = START
    for moves in range(1, cap + 1):
        _, state, _, terminated = env.P[state][agent.greedy(state, stream)][0]
        if terminated:
            return moves
    return None


# --- the contract --------------------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("entry", "params"),
    [
        (ENTRY["uct_search"], {"simulations": 16, "depth": 10}),
        (ENTRY["puct_search"], {"simulations": 16, "depth": 10}),
        (ENTRY["uct_search"], {"simulations": 64, "depth": 10, "backup": "bellman", "rollout": "greedy"}),
        (ENTRY["puct_search"], {"simulations": 64, "depth": 10, "backup": "bellman", "feedback": "root"}),
    ],
    ids=["uct", "puct", "uct-bellman-greedy", "puct-bellman-feedback"],
)
def test_contract(entry, params):
    check_agent(entry, params)


# --- the maze of Sutton & Barto (2018), Example 8.1 -----------------------------------------------------


def test_oracle_uct_walks_a_shortest_path_through_the_maze():
    # Sutton & Barto (2018), Example 8.1: the shortest path from S to G takes 14 steps.
    agent, env = _maze_agent(UCTSearch, **ORACLE_MAZE)
    lengths = [_greedy_path_length(agent, env, new_stream(seed)) for seed in range(10)]
    assert lengths == [SHORTEST] * 10
    assert agent.counters() == {"real_updates": 0, "planning_updates": 0, "model_updates": 0}
    # With Monte Carlo averaging instead, the one sparse reward is averaged with many earlier zero returns, and
    # the same budget does not yet give a shortest path every time (never a shorter one: it does not exist).
    mean_agent, _ = _maze_agent(UCTSearch, **{**ORACLE_MAZE, "backup": "mean"})
    mean_lengths = [_greedy_path_length(mean_agent, env, new_stream(seed)) for seed in range(10)]
    assert all(n is None or n >= SHORTEST for n in mean_lengths)
    assert mean_lengths.count(SHORTEST) < 10


@pytest.mark.parametrize("path", ["compiled", "gymnasium"])
def test_oracle_uct_reaches_the_goal_within_14_steps_in_a_trial(path):
    # Sutton & Barto (2018), Example 8.1: 14 steps is the shortest path, so an evaluation episode cut at 14 steps
    # returns the goal reward 1 only if it walks a shortest path.
    params = UCTSearch(**ORACLE_MAZE).get_params()
    result = run_trial(_spec("uct_search", params, seed=1, real_steps=20, every=10, step_cap=SHORTEST), path)
    np.testing.assert_array_equal(result.rows["eval_return"], [1.0, 1.0, 1.0])
    np.testing.assert_array_equal(result.rows["planning_updates"], [0, 10_000, 20_000])
    np.testing.assert_array_equal(result.rows["model_updates"], [0, 0, 0])
    np.testing.assert_array_equal(result.rows["model_tv_error"], [0.0, 0.0, 0.0])


def _learning_curves(params: dict, seeds: range) -> np.ndarray:
    """Greedy evaluation returns every 100 of 2000 real steps on the maze (rows: seeds), with accounting checks."""
    curves = []
    for seed in seeds:
        rows = run_trial(_spec("uct_search", params, seed, real_steps=2000, every=100, step_cap=100)).rows
        np.testing.assert_array_equal(rows["model_updates"], rows["real_steps"])
        np.testing.assert_array_equal(rows["planning_updates"], params["simulations"] * rows["real_steps"])
        assert rows["model_tv_error"][-1] == 0.0  # a deterministic maze: every tried pair is known exactly
        curves.append(rows["eval_return"])
    return np.array(curves)


def test_learned_uct_improves_its_evaluation_return_over_a_trial():
    # Sutton & Barto (2018), Example 8.1 maze, reward 1 at G. At step 0 the learned model is empty, and up to
    # step 200 the greedy episode (cut at 100 steps) does not reach G; in the second half of the trial it mostly
    # does (measured: 0.775 over these 4 seeds).
    # Default parameters: depth 20 and uniform rollouts, so from S the goal is often beyond what a search sees.
    curves = _learning_curves(UCTSearch().get_params(), range(4))
    assert (curves[:, :3] == 0.0).all()
    assert curves[:, 11:].mean() >= 0.7


def test_learned_uct_with_greedy_rollouts_settles_on_reaching_the_goal():
    # Same maze; rollouts greedy on the agent's own Q (learned from real steps) carry the search toward G.
    curves = _learning_curves(UCTSearch(rollout="greedy").get_params(), range(4))
    assert (curves[:, :3] == 0.0).all()
    assert (curves[:, 11:] == 1.0).all()


def test_both_trial_paths_run_the_same_kernels():
    # The maze is deterministic with one start, so the environment's stream cannot matter: both paths must give
    # the same metric rows (wall clock aside) and episodes.
    params = PUCTSearch(simulations=50).get_params()
    spec = _spec("puct_search", params, seed=3, real_steps=600, every=200, step_cap=60)
    compiled, gym = run_trial(spec, "compiled"), run_trial(spec, "gymnasium")
    for column in ("eval_return", "real_updates", "planning_updates", "model_updates", "model_tv_error"):
        np.testing.assert_array_equal(compiled.rows[column], gym.rows[column], err_msg=column)
    np.testing.assert_array_equal(compiled.episode_lengths, gym.episode_lengths)
    assert compiled.episode_lengths.size > 3


# --- a one-step bandit ----------------------------------------------------------------------------------


def _bandit_table(p_better: float = 0.6, p_worse: float = 0.4) -> tuple:
    """One state, two actions that both end the episode with reward 1 with probability p (else 0)."""
    probs = np.array([p_better, 1 - p_better, p_worse, 1 - p_worse])
    offsets = np.array([0, 2, 4])
    return (
        np.array([1.0]),
        offsets,
        _closed_cdfs(probs, offsets),
        np.zeros(4, dtype=np.int64),
        np.array([1.0, 0.0, 1.0, 0.0]),
        np.ones(4, dtype=np.bool_),
        0,
    )


def test_uct_visit_share_of_the_better_arm_approaches_one():
    # Auer, Cesa-Bianchi & Fischer (2002), UCB1; Sutton & Barto (2018), section 2.7: an upper-confidence rule
    # pulls a worse arm only O(log N) times, so its share of N pulls goes to 0.
    shares = []
    for simulations in (100, 1_000, 10_000, 100_000):
        agent = UCTSearch(model="oracle", simulations=simulations)
        agent.setup(1, 2, 0, table=_bandit_table())
        runs = []
        for seed in range(5):
            visits, values = agent.search_root(0, new_stream(seed))
            assert visits.sum() == simulations  # one root visit per simulation in a one-step task
            runs.append(visits[0] / simulations)
        shares.append(np.mean(runs))
    assert shares == sorted(shares)
    assert shares[-2] > 0.95 and shares[-1] > 0.99
    assert values[0] == pytest.approx(0.6, abs=0.01)  # the mean return of the better arm


# --- small hand-made models ----------------------------------------------------------------------------


def _terminal_reward_agent(cls, **params):
    """Learned model of two states: from state 0 action 2 ends the episode with reward 1; every other action
    (and everything in state 1) moves to state 1 with reward 0."""
    agent = cls(**params)
    agent.setup(2, 4, 0)
    for _ in range(3):
        for a in range(4):
            if a == 2:
                agent.observe(0, 2, 1.0, 0, True)
            else:
                agent.observe(0, a, 0.0, 1, False)
            agent.observe(1, a, 0.0, 1, False)
    return agent


@pytest.mark.parametrize("cls", [UCTSearch, PUCTSearch])
@pytest.mark.parametrize("backup", ["mean", "bellman"])
def test_search_picks_the_action_the_model_says_ends_with_reward_1(cls, backup):
    agent = _terminal_reward_agent(cls, simulations=200, backup=backup)
    stream = new_stream(0)
    assert {agent.greedy(0, stream) for _ in range(20)} == {2}
    _, values = agent.last_root()
    assert values[2] == pytest.approx(1.0)
    assert np.nanmax(np.delete(values, 2)) == pytest.approx(0.0)


def test_evaluation_search_changes_no_learned_value_and_no_counter():
    agent = _terminal_reward_agent(UCTSearch, feedback="root")
    agent.act(0)
    agent.observe(0, 2, 1.0, 0, True)
    learned = [a.copy() for a in agent.arrays_[:6]]  # Q and the count model
    counters = agent.counters_.copy()
    stream = new_stream(5)
    for state in (0, 1, 0):
        agent.greedy(state, stream)
        agent.search_root(state, stream)
    for before, after in zip(learned, agent.arrays_[:6], strict=True):
        np.testing.assert_array_equal(before, after)
    np.testing.assert_array_equal(counters, agent.counters_)


def test_root_feedback_moves_q_toward_the_search_values():
    alpha = 0.5
    agent = _terminal_reward_agent(UCTSearch, feedback="root", alpha=alpha, epsilon=0.0)
    before = agent.arrays_[0][0].copy()
    assert agent.act(0) == 2
    _, values = agent.last_root()
    expected = np.where(np.isnan(values), before, before + alpha * (np.nan_to_num(values) - before))
    np.testing.assert_allclose(agent.arrays_[0][0], expected)
    plain = _terminal_reward_agent(UCTSearch, feedback="none", alpha=alpha, epsilon=0.0)
    q_before = plain.arrays_[0].copy()
    plain.act(0)
    np.testing.assert_array_equal(plain.arrays_[0], q_before)


def test_puct_follows_its_prior_when_the_model_gives_no_reward():
    # Every action is a zero-reward self-loop and the depth limit is one step, so every simulation returns the
    # same value (gamma times the leaf value); PUCT's prior softmax(Q / temperature) then decides the visits.
    agent = PUCTSearch(simulations=100, depth=1)
    agent.setup(1, 3, 0)
    for a in range(3):
        agent.observe(0, a, 0.0, 0, False)
    agent.arrays_[0][0] = [0.0, 2.0, 0.0]
    visits, _ = agent.search_root(0, new_stream(1))
    assert np.argmax(visits) == 1 and visits[1] > 2 * max(visits[0], visits[2])


def test_unvisited_pairs_are_optimistic_or_self_loops():
    # Learned model that has only tried action 0 (reward 0, back to the same state).
    for unvisited, expected in (("optimistic", 3.0), ("self_loop", 0.0)):
        agent = UCTSearch(simulations=50, unvisited=unvisited, optimistic_value=3.0, backup="bellman")
        agent.setup(1, 2, 0)
        agent.observe(0, 0, 0.0, 0, False)
        _, values = agent.search_root(0, new_stream(2))
        assert values[1] == pytest.approx(expected)


# --- accounting, the learned model's error, the oracle -------------------------------------------------


def test_counters_add_up_for_learned_and_oracle_models():
    for model in ("learned", "oracle"):
        agent, env = _maze_agent(UCTSearch, model=model, simulations=7)
        state, _ = env.reset(seed=0)
        for _ in range(40):
            action = agent.act(int(state))
            nxt, reward, terminated, _, _ = env.step(action)
            agent.observe(int(state), action, float(reward), int(nxt), bool(terminated))
            state = env.reset()[0] if terminated else nxt
        assert agent.counter_problems(40) == []
        c = agent.counters()
        assert c["planning_updates"] == 7 * 40 and c["real_updates"] == 40
        assert c["model_updates"] == (40 if model == "learned" else 0)
        assert agent.counter_problems(41) != []


def _stay_or_end_table() -> tuple:
    """One state, one action: with probability 0.7 stay (reward 1), with 0.3 the episode ends (reward 0)."""
    probs = np.array([0.7, 0.3])
    offsets = np.array([0, 2])
    return (
        np.array([1.0]),
        offsets,
        _closed_cdfs(probs, offsets),
        np.array([0, 0]),
        np.array([1.0, 0.0]),
        np.array([False, True]),
        0,
    )


def test_learned_model_draws_outcomes_in_proportion_to_counts():
    # 7 stays with reward 1 and 3 episode ends with reward 0: draws end the episode with frequency 0.3 (binomial
    # standard deviation 0.0032 for 20,000 draws; 5 of them allowed) and carry each outcome's own mean reward.
    agent = UCTSearch()
    agent.setup(1, 1, 0)
    for _ in range(7):
        agent.observe(0, 0, 1.0, 0, False)
    for _ in range(3):
        agent.observe(0, 0, 0.0, 0, True)
    model, table = agent.arrays_[1:6], table_arrays(None)
    stream = new_stream(4)
    draws = [model_step(model, table, 0, 0, UNVISITED_OPTIMISTIC, stream) for _ in range(20_000)]
    ended = np.array([d[2] for d in draws])
    assert ended.mean() == pytest.approx(0.3, abs=0.016)
    assert {(d[0], d[1], d[3]) for d in draws} == {(0, 1.0, False), (0, 0.0, False)}
    assert all(d[1] == 0.0 for d in draws if d[2]) and all(d[1] == 1.0 for d in draws if not d[2])


def test_learned_model_error_is_exact_on_a_hand_made_table():
    table = _stay_or_end_table()
    agent = UCTSearch()
    agent.setup(1, 1, 0)
    assert np.isnan(agent.model_error(table)).all()
    for _ in range(7):
        agent.observe(0, 0, 1.0, 0, False)
    for _ in range(3):
        agent.observe(0, 0, 0.0, 0, True)
    assert agent.model_error(table) == pytest.approx((0.0, 0.0), abs=1e-12)
    for _ in range(4):
        agent.observe(0, 0, 0.0, 0, True)  # now 7 stays and 7 ends: 0.5 / 0.5 against 0.7 / 0.3
    assert agent.model_error(table) == pytest.approx((0.2, 0.2))
    oracle = UCTSearch(model="oracle")
    oracle.setup(1, 1, 0, table=table)
    assert oracle.model_error(table) == (0.0, 0.0)


@pytest.mark.parametrize("cls", [UCTSearch, PUCTSearch])
def test_oracle_without_a_table_is_a_clear_error(cls):
    with pytest.raises(EnvironmentSourceError, match="plans on the true transition table"):
        cls(model="oracle").setup(5, 4, 0)


def test_label_note_marks_the_oracle(tmp_path):
    assert UCTSearch(model="oracle").label_note() == "oracle: true model"
    assert PUCTSearch(model="oracle").label_note() == "oracle: true model"
    assert UCTSearch().label_note() == "" and not UCTSearch().uses_table()
    experiment = tmp_path / "experiment.yaml"
    experiment.write_text(
        textwrap.dedent(
            """\
            experiment: tree
            seeds: 1
            real_steps: 100
            evaluation: {every: 50, episodes: 1}
            environments:
              - label: corridor
                grid: {map: "S...G"}
                step_limit: 20
            agents:
              - {label: uct, kind: "runner.agents.tree_search:UCTSearch", params: {model: [learned, oracle]}}
            """
        )
    )
    labels = sorted(v.label for v in load_experiment(experiment).agents)
    assert labels == ["uct (model=learned)", "uct (model=oracle) [oracle: true model]"]
