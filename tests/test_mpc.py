"""Model-predictive control (`mpc`): the cross-entropy method against known optima, planning through a perfect
model (the true JAX dynamics) balancing CartPole-v1, the compiled and step-by-step trials (rows reproduced bit for
bit, counters, model errors) with the ensemble and the Gaussian process."""

from __future__ import annotations

from dataclasses import dataclass

import gymnasium as gym
import numpy as np
import pytest

jax = pytest.importorskip("jax")
import jax.numpy as jnp  # noqa: E402

from runner.agents import make_agent  # noqa: E402
from runner.envs.dynamics import cartpole as cartpole_ids  # noqa: E402
from runner.metrics import METRIC_COLUMNS, TIMING_COLUMNS  # noqa: E402
from runner.neural.dynamics import jax_dynamics  # noqa: E402
from runner.neural.model import ActionEncoding, Prediction  # noqa: E402
from runner.neural.mpc import MPCCore, PlanInputs  # noqa: E402
from runner.neural.trial import _chunk_plan  # noqa: E402
from runner.trial import resolve_path, run_trial  # noqa: E402
from runner.trial_spec import TrialSpec  # noqa: E402

TINY = {
    "horizon": 5,
    "candidates": 16,
    "iterations": 2,
    "elites": 4,
    "particles": 2,
    "members": 2,
    "hidden_layers": 1,
    "hidden_units": 16,
    "learning_starts": 100,
    "model_every": 100,
    "buffer_size": 256,
    "value_bootstrap": True,
}
CARTPOLE = {"source": "gym", "id": "CartPole-v1", "options": {}, "step_limit": None}
COMPARED = [c for c in METRIC_COLUMNS if c not in TIMING_COLUMNS]


def _spec(seed: int, params: dict | None = None, steps: int = 400, env: dict | None = None) -> dict:
    return TrialSpec.build(
        env or CARTPOLE,
        "mpc",
        {**TINY, **(params or {})},
        seed,
        steps,
        every=200,
        episodes=2,
        step_cap=50,
        training_window=5,
    ).as_dict()


@dataclass(frozen=True)
class _Quadratic(MPCCore):
    """A core whose candidates score -|sequence - target|^2 (a known quadratic cost) instead of a model return."""

    target: tuple[float, ...] = ()

    def _returns(self, inputs, obs, sequences, key):
        target = jnp.asarray(self.target, jnp.float32).reshape((self.horizon, -1))
        if self.discrete:
            return jnp.sum(sequences == target[:, 0].astype(jnp.int32), axis=1).astype(jnp.float32)
        return -jnp.sum((sequences - target) ** 2, axis=(1, 2))


def test_cem_on_a_quadratic_cost_reaches_the_analytic_optimum():
    """Box actions: the minimiser of sum (a_t - c_t)^2 over the box is c clipped to the bounds (analytic; the
    target's last value lies outside the bounds, so its optimum is the bound)."""
    target = (0.3, -0.7, 0.5, 1.8)
    core = _Quadratic(
        3, 0, (-1.0,), (1.0,), horizon=4, candidates=64, iterations=12, elites=8, smoothing=0.1, target=target
    )
    with jax.enable_x64(True):
        start = core._fresh_plan(jnp.float32)
        action, plan = core.plan_action(None, jnp.zeros(3), start, jax.random.key(0))
    np.testing.assert_allclose(np.asarray(plan)[:, 0], np.clip(target, -1.0, 1.0), atol=0.02)
    assert abs(float(action[0]) - 0.3) < 0.02


def test_categorical_cem_finds_the_target_sequence():
    """Discrete actions (de Boer et al. 2005, section 3): scoring matches with a target sequence, the elites'
    frequencies concentrate on it and the first action taken is its first."""
    target = (2.0, 0.0, 1.0, 2.0, 1.0, 0.0)
    core = _Quadratic(3, 3, horizon=6, candidates=32, iterations=6, elites=6, smoothing=0.1, target=target)
    with jax.enable_x64(True):
        action, plan = core.plan_action(None, jnp.zeros(3), core._fresh_plan(jnp.float32), jax.random.key(1))
    assert int(action) == 2
    assert list(np.argmax(np.asarray(plan), axis=1)) == [int(t) for t in target]


@dataclass(frozen=True)
class _TrueCartPole:
    """The DynamicsModel interface (`runner.neural.model`) over CartPole's true JAX dynamics: a perfect model."""

    @property
    def encoding(self) -> ActionEncoding:
        return ActionEncoding(2)

    def predict(self, params, states, actions):
        step = jax.vmap(jax_dynamics("CartPole-v1").step, in_axes=(0, 0, None))
        nxt, reward, _ = step(states, actions, params)
        zeros = jnp.zeros_like(nxt)
        return Prediction(nxt, zeros, jnp.broadcast_to(reward, nxt.shape[:1]), jnp.zeros(nxt.shape[:1]))

    def sample(self, params, key, states, actions):
        pred = self.predict(params, states, actions)
        return pred.next_state_mean, pred.reward_mean


@dataclass(frozen=True)
class _PerfectModelCore(MPCCore):
    """The controller planning through the perfect model, with CartPole's true episode ends."""

    @property
    def dynamics(self):
        return _TrueCartPole()

    def _end_probability(self, termination, next_obs):
        c, p = cartpole_ids, PARAMS
        outside = (jnp.abs(next_obs[..., 0]) > p[c.X_LIMIT]) | (jnp.abs(next_obs[..., 2]) > p[c.THETA_LIMIT])
        return outside.astype(jnp.float32)


PARAMS = np.asarray(cartpole_ids.default_params(), dtype=np.float64)


@pytest.mark.parametrize(("planner", "horizon", "candidates"), [("cem", 30, 64), ("shooting", 50, 128)])
def test_with_the_true_model_mpc_balances_cartpole(planner, horizon, candidates):
    """A strong sanity check of the planning side: with the true dynamics as its model (the model interface
    holding a perfect model) and the true episode ends, receding-horizon planning keeps CartPole-v1's pole up for
    200 real gymnasium steps. The only signal is surviving the horizon, so it must be long enough to see a fall
    coming (in our runs, horizon 15 with 32 candidates fell after 89 steps)."""
    core = _PerfectModelCore(
        4, 2, planner=planner, horizon=horizon, candidates=candidates, iterations=3, elites=6, particles=0, gamma=1.0
    )
    env = gym.make("CartPole-v1")
    obs, _ = env.reset(seed=3)
    with jax.enable_x64(True):
        inputs = PlanInputs(jnp.asarray(PARAMS), None, None, jax.random.key(5))
        for _ in range(200):
            action = int(core.greedy(inputs, jnp.asarray(obs, jnp.float64)))
            obs, _, terminated, _, _ = env.step(action)
            assert not terminated
    env.close()


def test_chunks_end_at_refits_and_evaluation_points():
    core = MPCCore(4, 2, learning_starts=100, model_every=250)
    assert core.refit_steps(1000) == [100, 350, 600, 850]
    assert _chunk_plan(1000, 500, core.refit_steps(1000)) == [[100, 250, 150], [100, 250, 150]]
    assert _chunk_plan(400, 200, [100, 200, 300, 400]) == [[100, 100], [100, 100]]


@pytest.fixture(scope="module")
def compiled_runs():
    """Two runs of one compiled trial spec and one of another seed (the tiny ensemble: shared compiled shapes)."""
    return run_trial(_spec(4)), run_trial(_spec(4)), run_trial(_spec(5))


def test_compiled_trial_rows_repeat_bit_for_bit_and_count_what_they_say(compiled_runs):
    first, again, other = compiled_runs
    assert resolve_path(_spec(4)) == first.trial_path == "compiled"
    for column in COMPARED:
        assert np.array_equal(first.rows[column], again.rows[column], equal_nan=True), column
    assert not all(np.array_equal(first.rows[c], other.rows[c], equal_nan=True) for c in COMPARED)
    rows = first.rows
    assert list(rows["real_steps"]) == [0, 200, 400]
    per_plan = 16 * 2 * 5 * 2  # candidates x particles x horizon x iterations
    assert list(rows["planning_updates"]) == [0, 100 * per_plan, 300 * per_plan]
    assert list(rows["model_updates"]) == [0, 2, 4]  # refits after steps 100, 200, 300, 400
    assert list(rows["real_updates"]) == [0, 101, 301]  # the value network: one update a step from step 100 on
    assert np.array_equal(rows["reward_earned"], rows["real_steps"])  # CartPole pays 1 every step
    assert np.all((rows["eval_return"] >= 1) & (rows["eval_return"] <= 50))
    errors = rows["model_error_1"]
    assert np.all(np.isfinite(errors)) and errors[2] < errors[0]  # held-out error falls once the model is fitted
    assert np.isnan(rows["model_spread_1"][0]) and np.all(rows["model_spread_1"][1:] > 0)  # the fitted ensemble's
    assert np.all((rows["model_coverage_1"][1:] >= 0) & (rows["model_coverage_1"][1:] <= 1))


def test_counters_add_up_step_by_step_and_rows_repeat():
    spec = _spec(6, steps=200)
    first, again = run_trial(spec, path="gymnasium"), run_trial(spec, path="gymnasium")
    assert first.trial_path == "gymnasium"
    for column in COMPARED:
        assert np.array_equal(first.rows[column], again.rows[column], equal_nan=True), column
    agent = make_agent("mpc", TINY)
    env = gym.make("CartPole-v1")
    agent.setup(env.observation_space, env.action_space, 0)
    obs, _ = env.reset(seed=0)
    for _ in range(230):
        action = agent.act(obs)
        nxt, reward, terminated, truncated, _ = env.step(action)
        agent.observe(obs, action, reward, nxt, terminated, truncated)
        obs = env.reset()[0] if terminated or truncated else nxt
    assert agent.counter_problems(230) == []
    assert agent.counters() == {"real_updates": 131, "planning_updates": 130 * 320, "model_updates": 2}
    agent.counters_[1] += 1
    assert agent.counter_problems(230) == [f"planning_updates {130 * 320 + 1} != {130 * 320} expected after 230 steps"]


PENDULUM = {"source": "gym", "id": "Pendulum-v1", "options": {}, "step_limit": None}
GP_BOX = {
    "value_bootstrap": False,
    "model": "gp",
    "gp_points": 32,
    "gp_iterations": 10,
    "gp_selection": "spread",
    "termination": "none",
}


def test_box_actions_with_the_gaussian_process_on_pendulum():
    """Box actions (Gaussian CEM clipped to the bounds) planning on the Gaussian-process model, compiled: rows
    repeat bit for bit, counters as stated, and the GP's held-out error falls once fitted on its capped set (the
    contract suite runs box actions step by step on the continuous corridor)."""
    spec = _spec(2, params=GP_BOX, steps=200, env=PENDULUM)
    first, again = run_trial(spec), run_trial(spec)
    assert first.trial_path == "compiled"
    for column in COMPARED:
        assert np.array_equal(first.rows[column], again.rows[column], equal_nan=True), column
    rows = first.rows
    assert list(rows["planning_updates"]) == [0, 100 * 320]
    assert list(rows["model_updates"]) == [0, 2]
    assert np.all(rows["eval_return"] <= 0) and rows["model_error_1"][1] < rows["model_error_1"][0]
