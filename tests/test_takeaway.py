"""The take-away game environment, the negamax planner and the negamax_search agent.

Outside source for the game's theory: C. L. Bouton, "Nim, a game with a complete mathematical theory", Annals of
Mathematics 3 (1901/02), 35-39: in normal-play Nim the player to move loses exactly when the XOR of the heap
sizes is 0. The sampling check uses scipy.stats.chisquare; the API check gymnasium.utils.env_checker.check_env.
"""

from __future__ import annotations

import itertools

import numpy as np
import pytest
from gymnasium.utils.env_checker import check_env
from scipy.stats import chisquare

import runner.envs.table as table_module
from runner.agents.self_play import NegamaxSearch
from runner.checks import check_agent, check_environment
from runner.envs.sources import build_env
from runner.envs.takeaway import TakeAwayGame, nim_sum
from runner.errors import EnvironmentSourceError
from runner.planning.negamax import solve_negamax
from runner.streams import new_stream
from runner.trial import _env_facts, resolve_path, run_trial
from runner.trial_spec import TrialSpec

KIND = "runner.agents.self_play:NegamaxSearch"
ENTRY = "runner.envs.takeaway:TakeAwayGame"


def game_spec(**options: object) -> dict:
    """An `entry` environment spec for the take-away game."""
    return {"source": "entry", "entry": ENTRY, "options": options, "step_limit": None}


def trial_spec(env: dict, seed: int = 3) -> dict:
    """A short trial of the search agent (default parameters), as `runner.plan` would make it."""
    return TrialSpec.build(
        env,
        KIND,
        {},
        seed,
        200,
        every=100,
        episodes=20,
        step_cap=30,
        training_window=10,
    ).as_dict()


def set_up_agent(env: TakeAwayGame, seed: int = 0, **params: object) -> NegamaxSearch:
    agent = NegamaxSearch(**params)
    agent.setup(env.n_positions, env.n_moves, seed, rules=env.game_rules())
    return agent


# ---------------------------------------------------------------------------------------------------------------
# the environment


@pytest.mark.parametrize(
    "options",
    [
        {"heaps": [3, 4, 5], "opponent": "random"},
        {"heaps": [3, 4, 5], "opponent": "optimal"},
        {"heaps": [2, 3], "opponent": "random", "start": "random", "illegal_reward": -0.5},
    ],
    ids=["random", "optimal", "random-start"],
)
def test_environment_contract(options):
    check_environment(game_spec(**options))


@pytest.mark.filterwarnings("ignore::UserWarning")
@pytest.mark.parametrize("opponent", ["random", "optimal"])
def test_gymnasium_env_checker_accepts_it(opponent):
    # gymnasium.utils.env_checker.check_env: gymnasium's own API conformance checks (warnings ignored: it cannot
    # test render modes of an environment built without gymnasium.make)
    check_env(TakeAwayGame(heaps=[2, 3, 4], opponent=opponent, start="random"))


def test_positions_encode_heap_sizes_one_to_one():
    env = TakeAwayGame(heaps=[3, 4, 5])
    assert env.observation_space.n == 4 * 5 * 6
    assert env.action_space.n == 3 * 5
    seen = set()
    for sizes in itertools.product(range(4), range(5), range(6)):
        position = env.position_of(sizes)
        assert env.heap_sizes(position) == sizes
        seen.add(position)
    assert seen == set(range(env.n_positions))
    assert env.position_of((0, 0, 0)) == 0 and env.is_terminal[0] and env.is_terminal.sum() == 1


def test_steps_follow_the_rules():
    env = TakeAwayGame(heaps=[3, 4, 5], opponent="optimal", illegal_reward=-0.25)
    state, info = env.reset(seed=0)
    assert env.heap_sizes(state) == (3, 4, 5) and info["player"] == 0
    # taking 4 from heap 0 (which holds 3) is illegal: same position, the penalty, and still the agent's turn
    state2, reward, terminated, truncated, info = env.step(0 * env.max_heap + 3)
    assert (state2, reward, terminated, truncated, info["player"]) == (state, -0.25, False, False, 0)
    # 3 ^ 4 ^ 5 = 2: taking 2 from heap 0 leaves 1, 4, 5 (XOR 0); the optimal reply cannot keep XOR 0
    state3, reward, terminated, _, info = env.step(0 * env.max_heap + 1)
    assert reward == 0.0 and not terminated and info["player"] == 0
    assert info["opponent_action"] >= 0 and nim_sum(env.heap_sizes(state3)) != 0
    # the agent takes the last object: +1, game over, the opponent would be to move
    env.s = env.position_of((0, 0, 2))
    state4, reward, terminated, _, info = env.step(2 * env.max_heap + 1)
    assert (state4, reward, terminated, info["player"]) == (0, 1.0, True, 1)
    # the opponent takes the last object: -1
    env.s = env.position_of((0, 0, 2))
    state5, reward, terminated, _, info = env.step(2 * env.max_heap + 0)
    assert (state5, reward, terminated, info["player"]) == (0, -1.0, True, 0)


def test_table_is_a_distribution_with_the_right_rewards():
    for opponent in ("random", "optimal"):
        env = TakeAwayGame(heaps=[2, 3, 4], opponent=opponent, illegal_reward=-0.5)
        for s in range(env.n_positions):
            for a in range(env.n_moves):
                outcomes = env.P[s][a]
                assert abs(sum(o[0] for o in outcomes) - 1.0) < 1e-12
                assert all(o[0] > 0 and 0 <= o[1] < env.n_positions for o in outcomes)
                if env.is_terminal[s]:
                    assert outcomes == [(1.0, s, 0.0, True)]
                elif env.next_position[s, a] < 0:
                    assert outcomes == [(1.0, s, -0.5, False)]
                else:
                    for _, nxt, reward, terminated in outcomes:
                        assert terminated == bool(env.is_terminal[nxt])
                        assert reward in ((1.0, -1.0) if terminated else (0.0,))
                        assert env.heap_sizes(nxt) != env.heap_sizes(s)


def test_optimal_opponent_answers_to_xor_zero():
    # Bouton (1901/02): from a position with non-zero XOR there is a move to XOR 0; the optimal opponent takes it
    env = TakeAwayGame(heaps=[3, 4, 5], opponent="optimal")
    for s in range(1, env.n_positions):
        for a in env.legal_moves(s):
            moved = int(env.next_position[s, a])
            if env.is_terminal[moved] or nim_sum(env.heap_sizes(moved)) == 0:
                continue
            ((prob, nxt, _, _),) = env.P[s][int(a)]
            assert prob == 1.0 and nim_sum(env.heap_sizes(nxt)) == 0


def test_random_start_is_uniform_over_non_empty_positions():
    env = TakeAwayGame(heaps=[1, 2], start="random")
    assert np.allclose(env.initial_state_distrib, [0.0] + [1 / 5] * 5)


@pytest.mark.parametrize(
    ("sizes", "heap", "count"),
    [((3, 4, 5), 0, 1), ((0, 1, 2), 1, 1), ((1, 1, 3), 2, 3), ((0, 1, 2), 0, 2), ((0, 0, 3), 2, 3)],
    ids=["eleven-replies", "reply-may-end", "two-replies", "illegal", "agent-wins"],
)
def test_table_matches_sampled_steps(sizes, heap, count):
    env = TakeAwayGame(heaps=[3, 4, 5], opponent="random")
    env.reset(seed=12345)
    state = env.position_of(sizes)
    action = heap * env.max_heap + count - 1
    outcomes = env.P[state][action]
    index = {(o[1], o[2], o[3]): i for i, o in enumerate(outcomes)}
    n = 3000
    observed = np.zeros(len(outcomes))
    for _ in range(n):
        env.s = state
        nxt, reward, terminated, _, _ = env.step(action)
        observed[index[(nxt, reward, terminated)]] += 1  # a KeyError here: an outcome the table does not have
    expected = n * np.array([o[0] for o in outcomes])
    if len(outcomes) == 1:
        assert observed[0] == n
    else:
        # scipy.stats.chisquare: goodness of fit of the sampled outcome counts to the table's probabilities
        assert chisquare(observed, expected).pvalue > 1e-3


# ---------------------------------------------------------------------------------------------------------------
# the planner


def test_exact_negamax_agrees_with_bouton_below_8():
    # Bouton (1901/02): the player to move loses exactly when the XOR of the heap sizes is 0
    env = TakeAwayGame(heaps=[7, 7, 7])
    next_position, is_terminal, terminal_value, sizes = env.game_rules()
    assert list(sizes) == [512, 21]
    value = solve_negamax(next_position, is_terminal, terminal_value)
    for s in range(env.n_positions):
        assert value[s] == (1.0 if nim_sum(env.heap_sizes(s)) != 0 else -1.0), env.heap_sizes(s)


def test_exact_negamax_refuses_a_cycle():
    next_position = np.array([[1], [0]], dtype=np.int64)
    with pytest.raises(ValueError, match="cycle"):
        solve_negamax(next_position, np.zeros(2, dtype=np.bool_), np.zeros(2))


def test_search_agent_plays_bouton_moves_below_8():
    env = TakeAwayGame(heaps=[7, 7, 7])
    agent = set_up_agent(env)
    stream = new_stream(2024)
    won = [s for s in range(1, env.n_positions) if nim_sum(env.heap_sizes(s)) != 0]
    lost = [s for s in range(1, env.n_positions) if nim_sum(env.heap_sizes(s)) == 0]
    to_xor_zero = sum(nim_sum(env.heap_sizes(env.next_position[s, agent.greedy(s, stream)])) == 0 for s in won)
    positive = sum(agent.search(s, stream)[1] > 0 for s in won)
    negative = sum(agent.search(s, stream)[1] < 0 for s in lost)
    share = to_xor_zero / len(won)
    print(
        f"\nBouton share at {agent.get_params()['simulations']} simulations: {to_xor_zero}/{len(won)} = {share:.3f} "
        f"moves to XOR 0; root value > 0 in {positive}/{len(won)} won, < 0 in {negative}/{len(lost)} lost positions"
    )
    # Bouton (1901/02): the winning moves are exactly those to XOR 0, and the mover wins iff the XOR is non-zero
    assert share >= 0.95
    assert positive >= 0.95 * len(won)
    assert negative >= 0.95 * len(lost)
    assert not agent.counters_.any(), "evaluation and search must not count updates"


# ---------------------------------------------------------------------------------------------------------------
# the agent


def test_setup_without_rules_names_the_need():
    with pytest.raises(EnvironmentSourceError, match="needs an environment that gives its game rules"):
        NegamaxSearch().setup(10, 4, 0)
    env = TakeAwayGame(heaps=[2, 3])
    with pytest.raises(EnvironmentSourceError, match="rules cover 12 positions x 6 moves"):
        NegamaxSearch().setup(13, 6, 0, rules=env.game_rules())


def drive(agent: NegamaxSearch, env: TakeAwayGame, steps: int, seed: int) -> list[int]:
    """Learn for `steps` real steps; return the actions taken."""
    state, _ = env.reset(seed=seed)
    actions = []
    for _ in range(steps):
        action = agent.act(int(state))
        actions.append(action)
        nxt, reward, terminated, truncated, _ = env.step(action)
        agent.observe(int(state), action, float(reward), int(nxt), bool(terminated))
        state = env.reset()[0] if terminated or truncated else nxt
    return actions


def test_agent_is_reproducible_and_counts_add_up():
    def run(seed: int) -> tuple[list[int], NegamaxSearch]:
        env = TakeAwayGame(heaps=[2, 3, 4])
        agent = set_up_agent(env, seed=seed, simulations=200, epsilon=0.2)
        return drive(agent, env, 300, seed), agent

    (a, agent_a), (b, agent_b), (c, _) = run(7), run(7), run(8)
    assert a == b and a != c
    assert all(np.array_equal(x, y) for x, y in zip(agent_a.arrays_, agent_b.arrays_, strict=True))
    assert agent_a.counter_problems(300) == []
    assert agent_a.counters() == {"real_updates": 300, "planning_updates": 300 * 200, "model_updates": 0}
    assert agent_a.get_params() == {"simulations": 200, "exploration": 1.4, "epsilon": 0.2, "alpha": 0.1, "gamma": 0.95}
    env = TakeAwayGame(heaps=[2, 3, 4])
    assert all(int(env.next_position[s, act]) >= 0 for s, act in zip(replay_states(env, a, 7), a, strict=True))


def replay_states(env: TakeAwayGame, actions: list[int], seed: int) -> list[int]:
    """The states at which `actions` were taken, replaying the same environment seed."""
    state, _ = env.reset(seed=seed)
    states = []
    for action in actions:
        states.append(int(state))
        nxt, _, terminated, _, _ = env.step(action)
        state = env.reset()[0] if terminated else nxt
    return states


def test_q_table_learns_from_real_steps_and_evaluation_changes_nothing():
    env = TakeAwayGame(heaps=[2, 3, 4])
    agent = set_up_agent(env, simulations=100, epsilon=0.3)
    drive(agent, env, 500, seed=1)
    q, counters = agent.arrays_[0].copy(), agent.counters_.copy()
    assert np.abs(q).max() > 0
    illegal = env.next_position < 0
    assert np.all(q[illegal] == 0.0), "the agent only ever takes legal moves"
    stream = new_stream(5)
    for s in range(env.n_positions):
        assert 0 <= agent.greedy(s, stream) < env.n_moves
    assert np.array_equal(agent.arrays_[0], q) and np.array_equal(agent.counters_, counters)


@pytest.mark.slow
def test_agent_contract():
    check_agent(KIND)


# ---------------------------------------------------------------------------------------------------------------
# trials


def test_trial_against_random_opponent_gymnasium_path():
    result = run_trial(trial_spec(game_spec(heaps=[3, 4, 5], opponent="random")), "gymnasium")
    assert result.trial_path == "gymnasium"
    assert result.rows["eval_return"][-1] > 0.8
    assert result.rows["planning_updates"][-1] == 1000 * result.rows["real_updates"][-1] == 1000 * 200


@pytest.fixture
def fresh_env_facts():
    """`run_trial` caches what it learns about an environment spec; start and end with an empty cache."""
    _env_facts.cache_clear()
    yield
    _env_facts.cache_clear()


@pytest.mark.slow
def test_trial_against_random_opponent_compiled_path(fresh_env_facts):
    spec = trial_spec(game_spec(heaps=[3, 4, 5], opponent="random"))
    env = build_env(spec["env"])
    assert table_module.why_not_table_backed(env) is None
    result = run_trial(spec, "compiled")
    assert result.trial_path == "compiled"
    assert result.rows["eval_return"][-1] > 0.8
    assert result.rows["planning_updates"][-1] == 1000 * 200


def test_compiled_path_is_allowed(fresh_env_facts):
    assert resolve_path(trial_spec(game_spec(heaps=[2, 3], opponent="random")), "compiled") == "compiled"
