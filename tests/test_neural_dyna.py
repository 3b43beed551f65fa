"""Dyna with a learned neural model (`neural_dyna`): `planning_steps: 0` is the Q-network bit for bit on both paths;
the model and termination predictor learn a known system; simulated rollouts start at real states and stop at
predicted ends; the weighted planning loss; the counters' accounting; compiled rows reproduced with model errors."""

from __future__ import annotations

import numpy as np
import pytest

jax = pytest.importorskip("jax")
import jax.numpy as jnp  # noqa: E402

from runner.agents import AGENTS, agent_class, make_agent  # noqa: E402
from runner.metrics import HONESTY_COLUMNS, METRIC_COLUMNS, TIMING_COLUMNS  # noqa: E402
from runner.neural.dyna import NeuralDynaCore  # noqa: E402
from runner.params import budget_params  # noqa: E402
from runner.trial import run_trial  # noqa: E402
from runner.trial_spec import TrialSpec  # noqa: E402

Q_TINY = {
    "hidden_layers": 1,
    "hidden_units": 16,
    "batch_size": 16,
    "buffer_size": 2000,
    "learning_starts": 50,
    "epsilon_steps": 500,
}
MODEL_TINY = {
    "ensemble_size": 2,
    "model_layers": 1,
    "model_units": 16,
    "model_every": 100,
    "model_steps": 5,
    "rollout_length": 3,
}
CARTPOLE = {"source": "gym", "id": "CartPole-v1", "options": {}, "step_limit": None}
COMPARED = [c for c in METRIC_COLUMNS if c not in TIMING_COLUMNS]


def _spec(kind: str, params: dict, seed: int, steps: int = 1000, every: int = 500) -> dict:
    return TrialSpec.build(
        CARTPOLE, kind, params, seed, steps, every=every, episodes=3, step_cap=200, training_window=5
    ).as_dict()


def _same_rows(a, b) -> bool:
    return all(np.array_equal(a.rows[c], b.rows[c], equal_nan=True) for c in COMPARED) and np.array_equal(
        a.episode_returns, b.episode_returns
    )


def test_registered_with_planning_steps_as_its_only_budget():
    assert "neural_dyna" in AGENTS.names()
    cls = agent_class("neural_dyna")
    assert budget_params(cls.schema) == ("planning_steps",)
    assert cls.tags.learned_model == "function" and cls.tags.engine == "jax"
    q_names = {p.name for p in agent_class("q_network").schema}
    assert q_names < {p.name for p in cls.schema}


@pytest.mark.parametrize(("path", "steps", "every"), [("compiled", 1000, 500), ("gymnasium", 300, 100)])
def test_no_planning_is_the_q_network_bit_for_bit(path, steps, every):
    """With `planning_steps: 0` no model is trained and every row and training episode equals the `q_network`
    kind's of the same seed and Q-network parameters."""
    dyna = run_trial(_spec("neural_dyna", {**Q_TINY, **MODEL_TINY, "planning_steps": 0}, 3, steps, every), path)
    q = run_trial(_spec("q_network", Q_TINY, 3, steps, every), path)
    assert dyna.trial_path == q.trial_path == path
    assert _same_rows(dyna, q)
    assert dyna.rows["real_updates"][-1] > 0
    assert np.all(dyna.rows["planning_updates"] == 0) and np.all(dyna.rows["model_updates"] == 0)
    assert np.all(np.isnan(dyna.rows["model_error_1"])) and np.all(np.isnan(dyna.rows["model_spread_1"]))


@pytest.fixture(scope="module")
def compiled_runs():
    params = {**Q_TINY, **MODEL_TINY, "planning_steps": 2}
    return params, run_trial(_spec("neural_dyna", params, 4)), run_trial(_spec("neural_dyna", params, 4))


def test_compiled_rows_repeat_and_count_what_the_schedule_says(compiled_runs):
    params, first, again = compiled_runs
    assert first.trial_path == "compiled"
    assert _same_rows(first, again)
    rows = first.rows
    core = NeuralDynaCore.from_params(make_agent("neural_dyna", params).get_params(), 4, 2)
    steps = [int(s) for s in rows["real_steps"]]
    assert steps == [0, 500, 1000]
    assert list(rows["real_updates"]) == [core.q.updates_after(s) for s in steps] == [0, 451, 951]
    assert list(rows["planning_updates"]) == [core.planning_updates_after(s) for s in steps] == [0, 802, 1802]
    assert list(rows["model_updates"]) == [5 * core.model_rounds_after(s) for s in steps] == [0, 25, 50]
    assert np.array_equal(rows["reward_earned"], rows["real_steps"])


def test_compiled_rows_report_the_models_held_out_errors(compiled_runs):
    """The errors, spread and coverage are finite at every point, and the trained model's one-step error is below
    its untrained one."""
    _, first, _ = compiled_runs
    for column in ("model_error_1", "model_error_5", "model_error_20", "model_reward_error", *HONESTY_COLUMNS):
        assert np.all(np.isfinite(first.rows[column])), column
    assert np.all((first.rows["model_coverage_1"] >= 0) & (first.rows["model_coverage_1"] <= 1))
    assert first.rows["model_error_1"][-1] < first.rows["model_error_1"][0]


def test_schedule_counts_match_a_brute_force_count():
    for learning_starts, model_every, update_every, planning in ((50, 100, 1, 2), (120, 100, 3, 4), (1, 7, 2, 1)):
        core = NeuralDynaCore.from_params(
            {"learning_starts": learning_starts, "update_every": update_every},
            3,
            2,
        )
        core = NeuralDynaCore(core.q, planning_steps=planning, model_every=model_every)
        for steps in (0, 49, 100, 250, 777):
            rounds = [t for t in range(1, steps + 1) if t >= learning_starts and t % model_every == 0]
            planned = [t for t in range(1, steps + 1) if rounds and t >= rounds[0] and t % update_every == 0]
            assert core.model_rounds_after(steps) == len(rounds)
            assert core.planning_updates_after(steps) == planning * len(planned)


def _known_system_state(core: NeuralDynaCore, n: int, seed: int):
    """A buffer of n transitions of s' = s + 0.2 (2a - 1) e_0, reward s_1, terminated when s'_0 > 0.8."""
    rng = np.random.default_rng(seed)
    obs = rng.uniform(-1.0, 1.0, size=(n, 2)).astype(np.float32)
    actions = rng.integers(2, size=n).astype(np.int32)
    next_obs = obs.copy()
    next_obs[:, 0] += 0.2 * (2 * actions - 1)
    state = core.init(jax.random.key(seed))
    buf = state.q.buffer._replace(
        obs=state.q.buffer.obs.at[:n].set(obs),
        actions=state.q.buffer.actions.at[:n].set(actions),
        rewards=state.q.buffer.rewards.at[:n].set(obs[:, 1]),
        next_obs=state.q.buffer.next_obs.at[:n].set(next_obs),
        terminated=state.q.buffer.terminated.at[:n].set(next_obs[:, 0] > 0.8),
        size=jnp.int32(n),
    )
    return state._replace(q=state.q._replace(buffer=buf, steps=jnp.int32(n)))


@pytest.fixture(scope="module")
def trained():
    """A small model trained for 40 rounds on the known system (float64 mode, as trials run)."""
    with jax.enable_x64(True):
        q = NeuralDynaCore.from_params({**Q_TINY, "batch_size": 32, "buffer_size": 600}, 2, 2).q
        core = NeuralDynaCore(q, ensemble_size=2, model_units=32, model_steps=50, rollout_length=4)
        state = _known_system_state(core, 600, seed=0)
        for _ in range(40):
            state = core.train_model(state)
        return core, state


def test_model_and_termination_predictor_learn_a_known_system(trained):
    core, state = trained
    with jax.enable_x64(True):
        grid = np.array([[x, y] for x in (-0.5, 0.0, 0.4) for y in (-0.5, 0.5)], np.float32)
        for action in (0, 1):
            pred = core.predict(state, grid, np.full(len(grid), action, np.int32))
            expected = grid + np.array([0.2 * (2 * action - 1), 0.0], np.float32)
            np.testing.assert_allclose(np.asarray(pred.next_state_mean), expected, atol=0.05)
            np.testing.assert_allclose(np.asarray(pred.reward_mean), grid[:, 1], atol=0.05)
        ends = np.asarray(core.done_probability(state, np.array([[0.95, 0.0], [0.0, 0.0], [-0.9, 0.5]], np.float32)))
        assert ends[0] > 0.8 and ends[1] < 0.2 and ends[2] < 0.2
    assert int(core.counters(state)[2]) == 40 * 50


def test_the_gaussian_process_model_learns_the_known_system_in_the_loop():
    """`model: gp`: the GP of `runner.neural.gp` refitted inside the compiled training round on the most recent
    `gp_points` transitions of the buffer predicts the known system, and its rollouts draw from its predictive."""
    with jax.enable_x64(True):
        q = NeuralDynaCore.from_params({**Q_TINY, "buffer_size": 600}, 2, 2).q
        core = NeuralDynaCore(q, model="gp", gp_points=64, model_steps=30, model_units=8)
        state = core.train_model(_known_system_state(core, 600, seed=1))
        grid = np.array([[x, y] for x in (-0.5, 0.0, 0.4) for y in (-0.5, 0.5)], np.float32)
        for action in (0, 1):
            pred = core.predict(state, grid, np.full(len(grid), action, np.int32))
            expected = grid + np.array([0.2 * (2 * action - 1), 0.0], np.float32)
            np.testing.assert_allclose(np.asarray(pred.next_state_mean), expected, atol=0.05)
            np.testing.assert_allclose(np.asarray(pred.reward_mean), grid[:, 1], atol=0.05)
        obs, actions, rewards, next_obs, _, _ = jax.jit(core.simulate)(state, jax.random.key(2))
        pred = core.predict(state, obs, actions)
    state_z = (np.asarray(next_obs) - np.asarray(pred.next_state_mean)) / np.sqrt(np.asarray(pred.next_state_var))
    reward_z = (np.asarray(rewards) - np.asarray(pred.reward_mean)) / np.sqrt(np.asarray(pred.reward_var))
    assert np.all(np.abs(state_z) < 5) and np.all(np.abs(reward_z) < 5)  # draws from the GP's own predictive
    assert int(core.counters(state)[2]) == 30


def test_rollouts_start_at_real_states_and_stop_at_predicted_ends(trained):
    core, state = trained
    with jax.enable_x64(True):
        obs, actions, rewards, next_obs, ended, weight = jax.jit(core.simulate)(state, jax.random.key(5))
    h, runs = core.rollout_length, -(-core.q.batch_size // core.rollout_length)
    assert obs.shape == (core.q.batch_size, 2) and set(np.asarray(actions).tolist()) <= {0, 1}
    np.testing.assert_allclose(np.asarray(rewards), np.asarray(obs[:, 1]), atol=0.1)  # the system's reward is s_1
    stored = {tuple(row) for row in np.asarray(state.q.buffer.obs[:600]).tolist()}
    assert all(tuple(row) in stored for row in np.asarray(obs[:runs]).tolist())
    assert np.all(np.asarray(weight[:runs]) == 1.0)
    by_run = np.full((h, runs), np.nan)
    by_run.reshape(-1)[: core.q.batch_size] = np.asarray(weight)
    alive = np.ones(runs, bool)
    ended = np.asarray(ended)
    for t in range(h):
        seen = ~np.isnan(by_run[t])
        assert np.array_equal(by_run[t][seen], alive[seen].astype(float))
        alive &= ~np.pad(ended, (0, h * runs - ended.size)).reshape(h, runs)[t]
    np.testing.assert_array_equal(np.asarray(obs[runs:]), np.asarray(next_obs[: core.q.batch_size - runs]))


def test_planning_loss_is_the_q_networks_loss_on_the_rows_that_count(trained):
    core, state = trained
    rng = np.random.default_rng(1)
    batch = (
        rng.normal(size=(8, 2)).astype(np.float32),
        rng.integers(2, size=8).astype(np.int32),
        rng.normal(size=8).astype(np.float32),
        rng.normal(size=(8, 2)).astype(np.float32),
        rng.random(8) < 0.3,
    )
    weight = np.array([1, 1, 1, 0, 1, 0, 0, 1], np.float32)
    keep = weight > 0
    online, target = state.q.online, state.q.target
    planning_loss, q_loss = jax.jit(core._planning_loss), jax.jit(core.q._loss)
    weighted = float(planning_loss(online, target, (*batch, weight)))
    assert weighted == pytest.approx(float(q_loss(online, target, tuple(b[keep] for b in batch))), rel=1e-6)
    full = float(planning_loss(online, target, (*batch, np.ones(8, np.float32))))
    assert full == pytest.approx(float(q_loss(online, target, batch)), rel=1e-6)
