"""The replay-based Q-network (`q_network`): its loss and targets against numpy, its schedules and accounting, its
compiled trial (rows reproduced bit for bit, rows' meaning, time limit) and the step-by-step path."""

from __future__ import annotations

import sys

import numpy as np
import pytest

jax = pytest.importorskip("jax")
from runner.agents import make_agent  # noqa: E402
from runner.agents.neural import MissingNeuralExtra  # noqa: E402
from runner.config import load_experiment  # noqa: E402
from runner.errors import ConfigError, TrialTimeout  # noqa: E402
from runner.metrics import METRIC_COLUMNS, TIMING_COLUMNS  # noqa: E402
from runner.neural.q_network import QNetworkCore  # noqa: E402
from runner.neural.trial import CHUNK_STEPS, _chunk_plan  # noqa: E402
from runner.trial import resolve_path, run_trial  # noqa: E402
from runner.trial_spec import TrialSpec  # noqa: E402

TINY = {"hidden_units": 16, "batch_size": 16, "buffer_size": 2000, "learning_starts": 50, "epsilon_steps": 500}
CARTPOLE = {"source": "gym", "id": "CartPole-v1", "options": {}, "step_limit": None}
COMPARED = [c for c in METRIC_COLUMNS if c not in TIMING_COLUMNS]


def _spec(seed: int, steps: int = 1500, params: dict | None = None, env: dict | None = None) -> dict:
    return TrialSpec.build(
        env or CARTPOLE,
        "q_network",
        {**TINY, **(params or {})},
        seed,
        steps,
        every=500,
        episodes=3,
        step_cap=200,
        training_window=5,
    ).as_dict()


def _numpy_q(params, obs):
    """The MLP forward pass written out in numpy (relu hidden layers, linear outputs)."""
    x = np.asarray(obs, dtype=np.float64)
    *hidden, last = params
    for layer in hidden:
        x = np.maximum(x @ np.asarray(layer.weight, np.float64) + np.asarray(layer.bias, np.float64), 0.0)
    return x @ np.asarray(last.weight, np.float64) + np.asarray(last.bias, np.float64)


def _huber(x):
    """Huber (1964) with delta 1: x^2 / 2 inside [-1, 1], |x| - 1/2 outside."""
    return np.where(np.abs(x) <= 1.0, 0.5 * x * x, np.abs(x) - 0.5)


@pytest.mark.parametrize("double_q", [False, True])
def test_loss_is_the_huber_loss_of_the_published_targets(double_q):
    """Targets r + gamma (1 - terminated) V(s') with V(s') = max_a Q_target(s', a) (Mnih et al. 2015) or, with
    Double Q-learning, Q_target(s', argmax_a Q_online(s', a)) (van Hasselt, Guez & Silver 2016), written out in
    numpy."""
    core = QNetworkCore(3, 4, hidden_units=8, gamma=0.9, double_q=double_q)
    online = core.init(jax.random.key(0)).online
    target = core.init(jax.random.key(1)).online
    rng = np.random.default_rng(2)
    obs, next_obs = rng.normal(size=(32, 3)).astype(np.float32), rng.normal(size=(32, 3)).astype(np.float32)
    actions = rng.integers(4, size=32).astype(np.int32)
    rewards = rng.normal(size=32).astype(np.float32) * 3
    terminated = rng.random(32) < 0.3
    got = float(core._loss(online, target, (obs, actions, rewards, next_obs, terminated)))
    q = _numpy_q(online, obs)[np.arange(32), actions]
    next_target = _numpy_q(target, next_obs)
    if double_q:
        next_value = next_target[np.arange(32), _numpy_q(online, next_obs).argmax(axis=1)]
    else:
        next_value = next_target.max(axis=1)
    goal = rewards + 0.9 * np.where(terminated, 0.0, next_value)
    assert got == pytest.approx(_huber(q - goal).mean(), rel=1e-5)


def test_epsilon_falls_linearly_then_stays():
    core = QNetworkCore(2, 2, epsilon_start=1.0, epsilon_end=0.1, epsilon_steps=100)
    assert [float(core.epsilon(t)) for t in (0.0, 50.0, 100.0, 400.0)] == pytest.approx([1.0, 0.55, 0.1, 0.1])


def _feed(core, steps):
    state = core.init(jax.random.key(3))
    obs = np.ones(2, np.float32)
    for _ in range(steps):
        state, action = core.act(state, obs)
        state = core.observe(state, obs, action, np.float32(1.0), obs * 0.5, np.bool_(False))
    return state


def _same(a, b):
    return all(
        np.array_equal(x, y) for x, y in zip(jax.tree_util.tree_leaves(a), jax.tree_util.tree_leaves(b), strict=True)
    )


def test_the_target_is_copied_every_target_period_updates():
    core = QNetworkCore(2, 2, hidden_units=4, batch_size=4, learning_starts=1, target_period=3)
    assert _same(_feed(core, 3).target, _feed(core, 3).online)
    after_four = _feed(core, 4)
    assert not _same(after_four.target, after_four.online)
    assert _same(after_four.target, _feed(core, 3).online)


def test_polyak_targets_move_by_the_rate():
    core = QNetworkCore(2, 2, hidden_units=4, batch_size=4, learning_starts=1, polyak_rate=0.25)
    before, after = _feed(core, 4), _feed(core, 5)
    for t0, o1, t1 in zip(
        *(jax.tree_util.tree_leaves(x) for x in (before.target, after.online, after.target)), strict=True
    ):
        np.testing.assert_allclose(np.asarray(t1), 0.25 * np.asarray(o1) + 0.75 * np.asarray(t0), rtol=1e-6)


def test_updates_follow_learning_starts_update_every_and_replays():
    core = QNetworkCore(2, 2, hidden_units=4, batch_size=4, learning_starts=5, update_every=3, replays=2)
    for steps in (4, 5, 6, 7, 9, 10):
        assert (
            int(_feed(core, steps).updates)
            == core.updates_after(steps)
            == 2 * len([t for t in range(5, steps + 1) if t % 3 == 0])
        )


def test_chunk_plan_covers_the_budget_between_evaluation_points():
    assert _chunk_plan(5000, 3000) == [[CHUNK_STEPS, 3000 - CHUNK_STEPS], [2000]]
    assert _chunk_plan(1000, 500) == [[500], [500]]
    assert sum(map(sum, _chunk_plan(123_457, 10_000))) == 123_457


def test_compiled_trial_rows_repeat_bit_for_bit_and_mean_what_they_say():
    spec = _spec(seed=4)
    assert resolve_path(spec) == "compiled"
    first, again, other = run_trial(spec), run_trial(_spec(seed=4)), run_trial(_spec(seed=5))
    assert first.trial_path == "compiled"
    for column in COMPARED:
        assert np.array_equal(first.rows[column], again.rows[column], equal_nan=True), column
    assert np.array_equal(first.episode_returns, again.episode_returns)
    assert not all(np.array_equal(first.rows[c], other.rows[c], equal_nan=True) for c in COMPARED)
    rows = first.rows
    core = QNetworkCore(4, 2, **{**make_agent("q_network", TINY).get_params()})
    assert list(rows["real_steps"]) == [0, 500, 1000, 1500]
    assert list(rows["real_updates"]) == [core.updates_after(int(s)) for s in rows["real_steps"]]
    assert np.array_equal(rows["reward_earned"], rows["real_steps"])  # CartPole pays 1 every step
    assert rows["episodes"][-1] == len(first.episode_returns) > 0
    assert first.episode_lengths.sum() <= 1500
    assert np.array_equal(first.episode_returns, first.episode_lengths)
    assert np.all(rows["eval_return"] >= 1) and np.all(rows["eval_return"] <= 200)
    assert np.all(np.isnan(rows["model_error_1"])) and np.all(rows["planning_updates"] == 0)
    assert np.all(np.diff(rows["cpu_seconds"]) > 0)


def test_the_time_limit_stops_a_compiled_trial():
    with pytest.raises(TrialTimeout):
        run_trial(_spec(seed=4, steps=200_000), time_limit=0.5)


def test_step_by_step_path_fills_the_same_rows():
    spec = _spec(seed=6, steps=1000)
    first, again = run_trial(spec, path="gymnasium"), run_trial(spec, path="gymnasium")
    assert first.trial_path == "gymnasium"
    for column in COMPARED:
        assert np.array_equal(first.rows[column], again.rows[column], equal_nan=True), column
    assert np.array_equal(first.rows["reward_earned"], first.rows["real_steps"])
    assert list(first.rows["real_updates"]) == [0, 451, 951]


def test_environments_without_jax_dynamics_run_step_by_step():
    line = {"source": "entry", "entry": "runner.envs.line:LineWalk", "options": {}, "step_limit": 50}
    assert resolve_path(_spec(seed=1, env=line)) == "gymnasium"
    shorter = {**CARTPOLE, "step_limit": 100}
    assert resolve_path(_spec(seed=1, env=shorter)) == "compiled"
    assert resolve_path(_spec(seed=1, env=shorter), path="gymnasium") == "gymnasium"


_EXPERIMENT = """\
experiment: neural-here
seeds: 1
real_steps: 1000
environments:
  - gym: CartPole-v1
agents:
  - label: deep
    kind: q_network
"""


def test_without_jax_an_experiment_gets_one_line_saying_what_to_install(tmp_path, monkeypatch):
    path = tmp_path / "x.yaml"
    path.write_text(_EXPERIMENT)
    load_experiment(path)
    monkeypatch.setitem(sys.modules, "jax", None)
    with pytest.raises(ConfigError) as caught:
        load_experiment(path)
    message = str(caught.value)
    assert "\n" not in message
    assert message.startswith(f"{path}:8: agents[0].kind:")
    assert 'pip install "stepmeter[neural]"' in message and "jax" in message
    with pytest.raises(MissingNeuralExtra, match="stepmeter\\[neural\\]"):
        run_trial(_spec(seed=0))
