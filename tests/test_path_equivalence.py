"""The compiled trial path and the gymnasium path are the same experiment.

Per (state, action), outcomes sampled by the compiled table match gymnasium's own `step`; across seeds, the
per-trial AUC of both paths comes from one distribution.
"""

from collections import Counter

import gymnasium as gym
import numpy as np
import pytest
from scipy import stats

from runner.agents.dyna_q import DynaQ
from runner.agents.q_learning import QLearning
from runner.analysis.curves import normalized_auc
from runner.compiled_trial import sample_outcome, sample_start
from runner.envs.sources import build_env
from runner.envs.table import table_from_env, why_not_table_backed
from runner.errors import EnvironmentSourceError
from runner.streams import new_stream
from runner.trial import run_trial
from runner.trial_spec import TrialSpec

SLIPPERY_GRID = {
    "source": "grid",
    "map": "S.~.\n.#~X\n~~.G",
    "slip": 0.4,
    "step_reward": -0.1,
    "goal_reward": 1.0,
    "hazard_penalty": -1.0,
    "hazard_ends": True,
    "step_limit": 40,
}
ENVIRONMENTS = {
    "FrozenLake-v1": {"source": "gym", "id": "FrozenLake-v1", "options": {}, "step_limit": None},
    "FrozenLake8x8-v1": {"source": "gym", "id": "FrozenLake8x8-v1", "options": {}, "step_limit": None},
    "CliffWalkingSlippery-v1": {"source": "gym", "id": "CliffWalkingSlippery-v1", "options": {}, "step_limit": 100},
    "slippery-grid": SLIPPERY_GRID,
}
DRAWS = 6000


def _stochastic_pairs(env: gym.Env, how_many: int) -> list[tuple[int, int]]:
    table = env.unwrapped.P
    pairs = [
        (s, a)
        for s in sorted(table)
        for a in sorted(table[s])
        if len({(o[1], o[2], o[3]) for o in table[s][a] if o[0] > 0}) > 1
    ]
    rng = np.random.default_rng(0)
    return [pairs[i] for i in sorted(rng.choice(len(pairs), size=min(how_many, len(pairs)), replace=False))]


@pytest.mark.parametrize("name", list(ENVIRONMENTS))
def test_compiled_outcomes_match_gymnasium_step(name):
    env = build_env(ENVIRONMENTS[name])
    env.reset(seed=123)
    table = table_from_env(env)
    stream = new_stream(99)
    pairs = _stochastic_pairs(env, 5)
    assert len(pairs) >= 3
    p_values = []
    for s, a in pairs:
        theirs = Counter()
        for _ in range(DRAWS):
            env.unwrapped.s = s
            s2, r, terminated, _, _ = env.unwrapped.step(a)
            theirs[(int(s2), float(r), bool(terminated))] += 1
        ours = Counter()
        for _ in range(DRAWS):
            j = sample_outcome(table.offsets, table.cdf, s * table.n_actions + a, stream)
            ours[(int(table.next_state[j]), float(table.reward[j]), bool(table.terminated[j]))] += 1
        outcomes = sorted(set(theirs) | set(ours))
        counts = np.array([[theirs[o] for o in outcomes], [ours[o] for o in outcomes]])
        # reference: scipy.stats.chi2_contingency (homogeneity of the two samples' outcome frequencies)
        p_values.append(stats.chi2_contingency(counts).pvalue)
    # Bonferroni over the pairs tested in this environment.
    assert min(p_values) > 0.01 / len(pairs), p_values


def test_compiled_start_states_match_gymnasium_reset():
    env = build_env(ENVIRONMENTS["slippery-grid"] | {"map": "S.S.\n.#~X\n~~SG"})
    table = table_from_env(env)
    stream = new_stream(5)
    ours = Counter(int(sample_start(table.start_cdf, stream)) for _ in range(3000))
    theirs = Counter(int(env.reset(seed=i)[0]) for i in range(3000))
    assert set(ours) == set(theirs) == {0, 2, 10}
    outcomes = sorted(ours)
    # reference: scipy.stats.chi2_contingency
    counts = np.array([[ours[o] for o in outcomes], [theirs[o] for o in outcomes]])
    assert stats.chi2_contingency(counts).pvalue > 0.001


def _aucs(spec_env, agent, seeds, path):
    out = []
    for seed in seeds:
        spec = TrialSpec.build(
            spec_env,
            agent.kind,
            agent.get_params(),
            seed,
            3000,
            every=300,
            episodes=10,
            step_cap=100,
            training_window=10,
        ).as_dict()
        result = run_trial(spec, path)
        assert result.trial_path == path
        out.append(normalized_auc(result.rows["real_steps"], result.rows["eval_return"]))
    return np.array(out)


@pytest.mark.slow
@pytest.mark.parametrize("agent", [QLearning(), DynaQ(planning_steps=10)], ids=["q_learning", "dyna_q"])
def test_auc_distributions_of_both_paths_agree(agent):
    seeds = range(40)
    env = ENVIRONMENTS["FrozenLake-v1"]
    compiled = _aucs(env, agent, seeds, "compiled")
    stepped = _aucs(env, agent, seeds, "gymnasium")
    # reference: scipy.stats.ks_2samp (two-sample Kolmogorov-Smirnov test)
    result = stats.ks_2samp(compiled, stepped)
    print(
        f"{agent.kind}: mean AUC compiled {compiled.mean():.4f}, gymnasium {stepped.mean():.4f}, "
        f"KS p {result.pvalue:.3f}"
    )
    assert result.pvalue > 0.01
    assert not np.array_equal(compiled, stepped)  # different environment streams, same distribution


def test_steps_outside_the_table_are_refused():
    fickle = {"source": "gym", "id": "Taxi-v4", "options": {"fickle_passenger": True}, "step_limit": None}
    env = build_env(fickle)
    assert "fickle_passenger" in why_not_table_backed(env)
    spec = TrialSpec.build(
        fickle,
        "q_learning",
        QLearning().get_params(),
        0,
        20,
        every=10,
        episodes=1,
        step_cap=5,
        training_window=2,
    ).as_dict()
    with pytest.raises(EnvironmentSourceError, match="fickle_passenger"):
        run_trial(spec, "compiled")
    assert run_trial(spec).trial_path == "gymnasium"
    plain_taxi = build_env({"source": "gym", "id": "Taxi-v4", "options": {}, "step_limit": None})
    assert why_not_table_backed(plain_taxi) is None


def test_unknown_table_classes_and_extra_wrappers_are_refused():
    grid = build_env(SLIPPERY_GRID)
    assert why_not_table_backed(grid) is None
    assert "wrapper" in why_not_table_backed(gym.wrappers.TransformReward(grid, lambda r: 2 * r))

    class OwnTable(gym.Env):
        observation_space = gym.spaces.Discrete(2)
        action_space = gym.spaces.Discrete(2)

        def __init__(self):
            self.P = {s: {a: [(1.0, 1, 0.0, True)] for a in range(2)} for s in range(2)}

    assert "not a known table-stepped" in why_not_table_backed(OwnTable())


def test_time_limit_is_taken_from_the_environment():
    assert (
        table_from_env(build_env(ENVIRONMENTS["FrozenLake-v1"])).step_limit
        == gym.spec("FrozenLake-v1").max_episode_steps
    )
    assert table_from_env(build_env(SLIPPERY_GRID)).step_limit == 40


class OwnQLearning(QLearning):
    """A user's agent kind, reached through its 'module:Class' entry point."""


def test_a_users_agent_kind_runs_on_the_compiled_path():
    def spec(kind):
        return TrialSpec.build(
            SLIPPERY_GRID,
            kind,
            QLearning().get_params(),
            4,
            500,
            every=100,
            episodes=3,
            step_cap=40,
            training_window=5,
        ).as_dict()

    own = run_trial(spec(f"{__name__}:OwnQLearning"), "compiled")
    builtin = run_trial(spec("q_learning"), "compiled")
    assert own.trial_path == "compiled"
    for column in ("eval_return", "episodes", "real_updates"):
        assert np.array_equal(own.rows[column], builtin.rows[column])
