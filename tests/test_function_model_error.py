"""Model error of any learned model: one-step and open-loop errors on held-out real transitions, normalised by
the spread of each observation dimension; stored in their own metric columns (older stores gain them empty)."""

from pathlib import Path
from typing import ClassVar

import gymnasium as gym
import numpy as np
import pytest

from runner.agents import make_agent
from runner.checks import ContractError, agent_checks
from runner.envs.line import LineWalk
from runner.metrics import METRIC_COLUMNS
from runner.models.held_out import collect_held_out, model_errors
from runner.models.held_out_bins import held_out_arrays
from runner.models.held_out_function import function_model_errors
from runner.params import Param
from runner.plan import PlannedTrial
from runner.seeding import held_out_sequence
from runner.store import Store
from runner.tags import AgentTags
from runner.trial import run_trial
from runner.trial_spec import TrialSpec

_STEP = 0.25


class LineModel:
    """Walks east; its model of the line walk is exact (`offset` 0) or biased by `offset`."""

    schema = (Param("offset", "float", 0.0, "bias of the predicted position"),)
    tags = AgentTags(observations=("box",), learned_model="function", compiled=False)
    seen: ClassVar[list] = []

    def __init__(self, **params):
        self.offset = params["offset"]

    def setup(self, observation_space, action_space, rng):
        self.updates = 0

    def act(self, obs):
        return 1

    def greedy_action(self, obs):
        return 1

    def observe(self, obs, action, reward, next_obs, terminated, truncated):
        self.updates += 1

    def counters(self):
        return {"real_updates": self.updates}

    def predict(self, obs, action):
        x = min(1.0, max(0.0, float(obs[0]) + (_STEP if int(action) == 1 else -_STEP)))
        return np.array([x + self.offset]), 1.0 if x >= 1.0 - 1e-9 else 0.0


def _held(seed=0):
    return collect_held_out(LineWalk(noise=0.0), held_out_sequence(seed), sequences=30, length=20)


def test_an_exact_model_has_no_error_and_a_biased_one_its_bias_over_the_spread():
    held = _held()
    assert model_errors(LineModel(offset=0.0).predict, held) == (0.0, 0.0, 0.0, 0.0)
    one, reward, five, twenty = model_errors(LineModel(offset=0.1).predict, held)
    assert one == pytest.approx(0.1 / held.spread[0])  # off by 0.1 on every transition
    assert reward == 0.0  # its rewards are exact
    assert twenty >= five > one  # its own predictions compound the bias in open loop (until the line's ends clip)


def test_errors_equal_a_vectorised_computation_for_a_model_that_predicts_no_change():
    """Reference: the same errors written directly with numpy over the held-out arrays (a model that predicts
    the observation it is given never moves, so its k-step rollout stays at the run's start)."""
    held = _held(3)
    one, reward, five, twenty = model_errors(lambda obs, action: (obs, 0.0), held)
    mask = np.arange(20)[None, :] < held.lengths[:, None]
    before = np.concatenate([held.starts[:, None, :], held.observations[:, :-1, :]], axis=1)
    diffs = (before - held.observations)[mask][:, 0] / held.spread[0]
    assert one == pytest.approx(np.sqrt(np.mean(diffs**2)))
    assert reward == pytest.approx(np.mean(held.rewards[mask]))
    for k, got in ((5, five), (20, twenty)):
        done = held.lengths >= k
        expected = (held.starts[done, 0] - held.observations[done, k - 1, 0]) / held.spread[0]
        assert got == pytest.approx(np.sqrt(np.mean(expected**2)))


def test_the_held_out_set_is_fixed_by_the_seed():
    a, b, c = _held(5), _held(5), _held(6)
    assert np.array_equal(a.observations, b.observations) and a.actions == b.actions
    assert a.actions != c.actions


def _spec(kind, params):
    env = {"source": "entry", "entry": "runner.envs.line:LineWalk", "options": {"noise": 0.0}, "step_limit": 20}
    return TrialSpec.build(env, kind, params, 0, 40, every=20, episodes=1, step_cap=20, training_window=1).as_dict()


def test_a_trial_records_the_errors_of_agents_that_predict():
    exact = run_trial(_spec("test_function_model_error:LineModel", {"offset": 0.0})).rows
    biased = run_trial(_spec("test_function_model_error:LineModel", {"offset": 0.2})).rows
    assert exact["model_error_1"].tolist() == [0.0, 0.0, 0.0]
    assert np.all(biased["model_error_1"] > 0) and np.all(biased["model_error_20"] > 0)
    assert np.isnan(exact["model_tv_error"]).all()


def test_a_model_free_own_agent_leaves_them_empty(monkeypatch):
    monkeypatch.syspath_prepend(str(Path(__file__).resolve().parent.parent / "examples"))
    rows = run_trial(_spec("linear_q:LinearQ", {})).rows
    assert np.isnan(rows["model_error_1"]).all() and np.isnan(rows["model_error_20"]).all()


def test_a_store_made_before_the_new_columns_gains_them_empty(tmp_path):
    with Store(tmp_path, create=True) as store:
        for column in METRIC_COLUMNS[METRIC_COLUMNS.index("model_error_1") :]:
            store.conn.execute(f"ALTER TABLE metrics DROP COLUMN {column}")
    with Store(tmp_path) as store:
        columns = [row[1] for row in store.conn.execute("PRAGMA table_info(metrics)")]
        assert columns[2:] == list(METRIC_COLUMNS)
        spec = _spec("test_function_model_error:LineModel", {"offset": 0.0})
        rows = run_trial(spec).rows
        run_id = store.begin_run(
            command="test",
            experiment_file="x.yaml",
            experiment_text="",
            experiment_hash="",
            versions={},
            platform="",
            jobs=1,
        )
        store.write_trial(
            PlannedTrial(TrialSpec.from_dict(spec).trial_id, spec, "line", "model", 0), run_id, rows, "gymnasium"
        )
        stored = store.conn.execute("SELECT model_error_1 FROM metrics").fetchall()
        assert [r[0] for r in stored] == [0.0, 0.0, 0.0]


class WrongShape(LineModel):
    """Predicts three numbers for a one-number observation."""

    def predict(self, obs, action):
        return np.zeros(3), 0.0


def test_the_contract_checks_what_function_models_predict():
    dict(agent_checks("test_function_model_error:LineModel", {"offset": 0.0}))["model_predicts"]()
    with pytest.raises(ContractError, match="predict gave"):
        dict(agent_checks("test_function_model_error:WrongShape", {"offset": 0.0}))["model_predicts"]()


_LINEAR_MODELS = {
    "linear_dyna": {"features": {"kind": "tiles", "tilings": 4, "tiles": 4, "hash_size": 0}},
    "linear_gaussian": {"features": {"kind": "fourier", "order": 2}},
}


def _mountain_car_spec(kind, params, steps=600):
    env = {"source": "gym", "id": "MountainCar-v0", "options": {}, "step_limit": None}
    return TrialSpec.build(env, kind, params, 2, steps, every=300, episodes=1, step_cap=50, training_window=2)


@pytest.mark.parametrize("kind", sorted(_LINEAR_MODELS))
def test_compiled_and_step_by_step_errors_agree_on_a_trained_linear_model(kind):
    """The same agent state and held-out set: `function_model_errors` in compiled code gives the numbers of
    `model_errors` over the agent's Python `predict` (same definition; only the order of summation differs)."""
    env = gym.make("MountainCar-v0")
    held = collect_held_out(env, held_out_sequence(7))
    agent = make_agent(kind, {**_LINEAR_MODELS[kind], "planning_steps": 0})
    agent.setup(2, 3, 0, bounds=(env.observation_space.low, env.observation_space.high))
    rng = np.random.default_rng(1)
    obs, _ = env.reset(seed=1)
    for _ in range(1500):
        action = int(rng.integers(3))
        nxt, reward, terminated, truncated, _ = env.step(action)
        agent.observe(obs.astype(np.float64), action, float(reward), nxt.astype(np.float64), terminated, truncated)
        obs = env.reset()[0] if terminated or truncated else nxt
    python = model_errors(agent.predict, held)
    compiled = function_model_errors(kind, agent.arrays_, held_out_arrays(held, 2))
    assert np.all(np.isfinite(python)) and python[0] > 0.0
    np.testing.assert_allclose(compiled, python, rtol=1e-9, atol=0)


@pytest.mark.parametrize("kind", sorted(_LINEAR_MODELS))
def test_both_trial_paths_measure_the_linear_models_on_the_same_held_out_set(kind):
    """Each path fills the columns at every point; before any learning both models are the same (zero), so the
    two paths' first errors are equal, which they are only if both judge on the same held-out transitions."""
    spec = _mountain_car_spec(kind, {**_LINEAR_MODELS[kind], "planning_steps": 1}).as_dict()
    compiled, stepped = run_trial(spec, "compiled"), run_trial(spec, "gymnasium")
    assert compiled.trial_path == "compiled" and stepped.trial_path == "gymnasium"
    for column in ("model_error_1", "model_error_5", "model_error_20", "model_reward_error"):
        assert np.all(np.isfinite(compiled.rows[column])) and np.all(np.isfinite(stepped.rows[column])), column
        assert compiled.rows[column][0] == pytest.approx(stepped.rows[column][0], rel=1e-12), column


def test_kinds_without_a_function_model_leave_the_columns_empty_on_the_compiled_path():
    rows = run_trial(_mountain_car_spec("linear_q_learning", _LINEAR_MODELS["linear_dyna"]).as_dict(), "compiled").rows
    for column in ("model_error_1", "model_error_5", "model_error_20", "model_reward_error"):
        assert np.isnan(rows[column]).all(), column
