"""Soft actor-critic (`soft_actor_critic`): its squashed log-density against scipy, its losses against numpy, its
targets, temperature and accounting, its compiled trial on Pendulum-v1 and the continuous crane (rows reproduced
bit for bit, rows' meaning), the step-by-step path, and kinds without box actions refused in one line.

Every trial here shares one tiny setting (1 x 16 units, 400 real steps, evaluation every 200), so the compiled
chunks are built once per environment and reused (`runner.neural.trial` keeps them by setting)."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import integrate, stats

jax = pytest.importorskip("jax")
import jax.numpy as jnp  # noqa: E402
from stored_reruns import assert_reruns_on_both_paths  # noqa: E402

from runner.agents import make_agent  # noqa: E402
from runner.config import load_experiment  # noqa: E402
from runner.errors import ConfigError, EnvironmentSourceError  # noqa: E402
from runner.metrics import METRIC_COLUMNS, TIMING_COLUMNS  # noqa: E402
from runner.neural.soft_actor_critic import SoftActorCriticCore, squashed_log_prob  # noqa: E402
from runner.trial import resolve_path, run_trial  # noqa: E402
from runner.trial_spec import TrialSpec  # noqa: E402

TINY = {"hidden_layers": 1, "hidden_units": 16, "batch_size": 16, "buffer_size": 1000, "learning_starts": 50}
PENDULUM = {"source": "gym", "id": "Pendulum-v1", "options": {}, "step_limit": None}
CRANE = {"source": "gym", "id": "stepmeter/OverheadCraneContinuous-v0", "options": {}, "step_limit": None}
COMPARED = [c for c in METRIC_COLUMNS if c not in TIMING_COLUMNS]
STEPS = 400


def _spec(seed: int, env: dict = PENDULUM, params: dict | None = None) -> dict:
    return TrialSpec.build(
        env,
        "soft_actor_critic",
        {**TINY, **(params or {})},
        seed,
        STEPS,
        every=200,
        episodes=2,
        step_cap=200,
        training_window=5,
    ).as_dict()


def _core(**changes) -> SoftActorCriticCore:
    return SoftActorCriticCore(3, 1, (-2.0,), (2.0,), hidden_layers=1, hidden_units=8, batch_size=8, **changes)


LEARNING = _core(learning_starts=1, polyak_rate=0.25, temperature=0.2)
"""The core most tests below feed (its jitted steps compile once)."""


def test_squashed_log_density_is_the_gaussian_one_with_the_change_of_variables():
    """log pi(a) = sum_i [log N(u_i; m_i, s_i) - log(1 - tanh(u_i)^2)] (Haarnoja et al. 2018, appendix C, eq. 21),
    the Gaussian term from scipy.stats.norm.logpdf."""
    rng = np.random.default_rng(0)
    mean = rng.normal(size=(50, 2))
    log_std = rng.uniform(-2.0, 1.0, size=(50, 2))
    u = mean + np.exp(log_std) * rng.normal(size=(50, 2))
    expected = (stats.norm.logpdf(u, mean, np.exp(log_std)) - np.log(1.0 - np.tanh(u) ** 2)).sum(axis=1)
    got = np.asarray(squashed_log_prob(*(jnp.asarray(x, jnp.float32) for x in (u, mean, log_std))))
    np.testing.assert_allclose(got, expected, rtol=1e-5, atol=1e-4)


def test_squashed_density_integrates_to_one_over_the_box():
    """The density of a = tanh(u) in one dimension integrates to 1 over (-1, 1) (scipy.integrate.quad): the
    correction is the right Jacobian."""
    mean, log_std = 0.7, math.log(0.8)

    def density(a: float) -> float:
        u = jnp.asarray([math.atanh(a)], jnp.float32)
        return float(np.exp(squashed_log_prob(u, jnp.asarray([mean], jnp.float32), jnp.asarray([log_std]))))

    assert integrate.quad(density, -1 + 1e-4, 1 - 1e-4, limit=200)[0] == pytest.approx(1.0, abs=1e-4)


def _numpy_mlp(params, x):
    """The MLP forward pass written out in numpy (relu hidden layers, linear outputs)."""
    x = np.asarray(x, dtype=np.float64)
    *hidden, last = params
    for layer in hidden:
        x = np.maximum(x @ np.asarray(layer.weight, np.float64) + np.asarray(layer.bias, np.float64), 0.0)
    return x @ np.asarray(last.weight, np.float64) + np.asarray(last.bias, np.float64)


def _member(stacked, i):
    return jax.tree_util.tree_map(lambda leaf: leaf[i], stacked)


def test_critic_loss_is_the_soft_bellman_residual():
    """y = r + gamma (1 - d) (min_i Qtarget_i(s', a') - alpha log pi(a' | s')), loss the mean over batch and both
    critics of (Q_i(s, a) - y)^2 / 2 (Haarnoja et al. 2018, eq. 5-6 with twin critics), written out in numpy."""
    core = LEARNING
    state = core.init(jax.random.key(0))
    state = state._replace(targets=core.init(jax.random.key(1)).critics)
    rng = np.random.default_rng(2)
    obs, next_obs = rng.normal(size=(8, 3)).astype(np.float32), rng.normal(size=(8, 3)).astype(np.float32)
    actions = rng.uniform(-1, 1, size=(8, 1)).astype(np.float32)
    rewards = rng.normal(size=8).astype(np.float32)
    terminated = rng.random(8) < 0.3
    key = jax.random.key(4)
    got = float(core.critic_loss(state.critics, state, (obs, actions, rewards, next_obs, terminated), key))
    next_actions, next_log_prob = (np.asarray(x, np.float64) for x in core.sample(state.online, next_obs, key))
    next_in = np.concatenate([next_obs, next_actions], axis=1)
    next_q = np.minimum(*(_numpy_mlp(_member(state.targets, i), next_in)[:, 0] for i in (0, 1)))
    goal = rewards + 0.99 * np.where(terminated, 0.0, next_q - 0.2 * next_log_prob)
    q = [_numpy_mlp(_member(state.critics, i), np.concatenate([obs, actions], axis=1))[:, 0] for i in (0, 1)]
    assert got == pytest.approx(0.5 * np.mean([(qi - goal) ** 2 for qi in q]), rel=1e-4)


def _feed(core, steps, seed=3):
    state = core.init(jax.random.key(seed))
    obs = np.array([1.0, 0.0, 0.5], np.float32)
    for _ in range(steps):
        state, action = core.act(state, obs)
        state = core.observe(state, obs, action, np.float32(-1.0), obs * 0.5, np.bool_(False))
    return state


def test_targets_follow_the_critics_by_the_polyak_rate():
    before, after = _feed(LEARNING, 4), _feed(LEARNING, 5)
    leaves = (jax.tree_util.tree_leaves(x) for x in (before.targets, after.critics, after.targets))
    for t0, c1, t1 in zip(*leaves, strict=True):
        np.testing.assert_allclose(np.asarray(t1), 0.25 * np.asarray(c1) + 0.75 * np.asarray(t0), rtol=1e-5)


def test_polyak_rate_zero_copies_the_critics_every_target_period_updates():
    """Hard target updates (not a value of the `soft_actor_critic` kind; `neural_dyna` on box actions offers it):
    the targets stay the initial critics for two updates, are the critics after the third, and stay so after the
    fourth, which moves the critics."""
    core = _core(learning_starts=1, polyak_rate=0.0, target_period=3, temperature=0.2)
    initial = core.init(jax.random.key(3)).critics
    states = {steps: _feed(core, steps) for steps in (2, 3, 4)}

    def same(a, b):
        pairs = zip(jax.tree_util.tree_leaves(a), jax.tree_util.tree_leaves(b), strict=True)
        return all(np.array_equal(x, y) for x, y in pairs)

    assert same(states[2].targets, initial) and not same(states[2].critics, initial)
    assert same(states[3].targets, states[3].critics)
    assert same(states[4].targets, states[3].critics) and not same(states[4].critics, states[3].critics)


def test_the_temperature_moves_towards_the_target_entropy_or_stays_fixed():
    """J(alpha) = E[-alpha (log pi + target entropy)] (Haarnoja et al. 2018b, eq. 18): alpha grows when the
    policy's entropy is below the target (log pi above 1 here) and shrinks above it."""
    core = LEARNING
    low_entropy, high_entropy = jnp.full(8, 3.0, jnp.float32), jnp.full(8, -3.0, jnp.float32)
    assert float(jax.grad(core.temperature_loss)(jnp.float32(0.0), low_entropy)) < 0
    assert float(jax.grad(core.temperature_loss)(jnp.float32(0.0), high_entropy)) > 0
    assert float(core.temperature_loss(jnp.float32(math.log(2.0)), low_entropy)) == pytest.approx(-2.0 * (3.0 - 1.0))
    fixed = _feed(_core(learning_starts=1, learn_temperature=False, temperature=0.2), 6)
    assert float(jnp.exp(fixed.log_alpha)) == pytest.approx(0.2)
    learned = _feed(LEARNING, 6)
    assert float(jnp.exp(learned.log_alpha)) != pytest.approx(0.2)


def test_updates_follow_learning_starts_update_every_and_replays():
    core = _core(learning_starts=5, update_every=3, replays=2)
    for steps in (4, 5, 6, 9):
        assert (
            int(_feed(core, steps).updates)
            == core.updates_after(steps)
            == 2 * len([t for t in range(5, steps + 1) if t % 3 == 0])
        )


def test_actions_stay_in_the_box_and_map_back():
    core = SoftActorCriticCore(2, 2, (-2.0, 0.0), (2.0, 10.0), hidden_layers=1, hidden_units=8)
    state = core.init(jax.random.key(5))
    state = state._replace(online=jax.tree_util.tree_map(lambda w: 30.0 * w, state.online))
    obs = np.random.default_rng(6).normal(size=(200, 2)).astype(np.float32) * 5
    for acted in (core.greedy(state.online, obs), jax.vmap(lambda o: core.act(state, o)[1])(obs)):
        acted = np.asarray(acted)
        assert acted.dtype == np.float32 and acted.shape == (200, 2)
        assert np.all(acted >= [-2.0, 0.0]) and np.all(acted <= [2.0, 10.0])
    squashed = np.array([[-1.0, 1.0], [0.0, 0.5]], np.float32)
    np.testing.assert_allclose(np.asarray(core.from_box(core.to_box(squashed))), squashed, atol=1e-6)


@pytest.fixture(scope="module")
def pendulum_runs():
    """Trials of the tiny setting on Pendulum-v1: compiled twice with seed 4, once with seed 5."""
    return run_trial(_spec(4)), run_trial(_spec(4)), run_trial(_spec(5))


def test_compiled_trial_rows_repeat_bit_for_bit_and_mean_what_they_say(pendulum_runs):
    first, again, other = pendulum_runs
    assert resolve_path(_spec(4)) == "compiled" and first.trial_path == "compiled"
    for column in COMPARED:
        assert np.array_equal(first.rows[column], again.rows[column], equal_nan=True), column
    assert np.array_equal(first.episode_returns, again.episode_returns)
    assert not all(np.array_equal(first.rows[c], other.rows[c], equal_nan=True) for c in COMPARED)
    rows = first.rows
    core = make_agent("soft_actor_critic", TINY)
    expected = SoftActorCriticCore(3, 1, (-2.0,), (2.0,), **core.get_params())
    assert list(rows["real_steps"]) == [0, 200, 400]
    assert list(rows["real_updates"]) == [expected.updates_after(int(s)) for s in rows["real_steps"]]
    assert list(rows["episodes"]) == [0, 1, 2]  # Pendulum never terminates: 200-step episodes
    assert np.array_equal(first.episode_lengths, [200, 200])
    assert rows["reward_earned"][-1] == pytest.approx(first.episode_returns.sum())
    assert np.all(rows["eval_return"] <= 0) and np.all(rows["eval_return"] >= -16.3 * 200)  # cost <= pi^2+6.4+.004
    assert np.all(np.isnan(rows["model_error_1"])) and np.all(rows["planning_updates"] == 0)


def test_step_by_step_path_fills_the_same_rows():
    spec = _spec(6)
    first, again = run_trial(spec, path="gymnasium"), run_trial(spec, path="gymnasium")
    assert first.trial_path == "gymnasium"
    for column in COMPARED:
        assert np.array_equal(first.rows[column], again.rows[column], equal_nan=True), column
    assert list(first.rows["real_updates"]) == [0, 151, 351]
    assert list(first.rows["episodes"]) == [0, 1, 2]


def test_the_continuous_crane_runs_compiled():
    result = run_trial(_spec(7, env=CRANE))
    assert result.trial_path == "compiled"
    assert list(result.rows["real_updates"]) == [0, 151, 351]
    assert np.all(np.isfinite(result.rows["eval_return"]))


_EXPERIMENT = """\
experiment: box-actions
seeds: 1
real_steps: 1000
environments:
  - gym: Pendulum-v1
agents:
  - label: deep
    kind: {kind}
"""


def test_a_kind_without_box_actions_gets_one_line_at_check(tmp_path):
    path = tmp_path / "x.yaml"
    path.write_text(_EXPERIMENT.format(kind="q_network"))
    with pytest.raises(ConfigError) as caught:
        load_experiment(path)
    message = str(caught.value)
    assert "\n" not in message and message.startswith(f"{path}:8: agents[0].kind:")
    assert "takes discrete actions" in message and "box actions" in message
    path.write_text(_EXPERIMENT.format(kind="soft_actor_critic"))
    load_experiment(path)


def test_setup_refuses_spaces_the_kind_does_not_take():
    import gymnasium as gym

    box = gym.spaces.Box(-1.0, 1.0, shape=(3,))
    with pytest.raises(EnvironmentSourceError, match="flat box actions"):
        make_agent("soft_actor_critic", TINY).setup(box, gym.spaces.Discrete(3), 0)
    with pytest.raises(EnvironmentSourceError, match="finite bounds"):
        make_agent("soft_actor_critic", TINY).setup(box, gym.spaces.Box(-np.inf, np.inf, shape=(1,)), 0)
    with pytest.raises(EnvironmentSourceError, match="discrete \\(from 0\\) actions"):
        make_agent("q_network", {}).setup(box, gym.spaces.Box(-1.0, 1.0, shape=(1,)), 0)


_STORED = """\
experiment: swing
seeds: 1
real_steps: 400
evaluation: {every: 200, episodes: 2, step_cap: 200}
environments:
  - gym: Pendulum-v1
agents:
  - label: sac
    kind: soft_actor_critic
    params: {hidden_layers: 1, hidden_units: 16, batch_size: 16, buffer_size: 1000, learning_starts: 50}
"""


def test_stored_trials_rerun_bit_for_bit_on_both_paths(tmp_path, capsys):
    """`stepmeter rerun --all` on a store holding a compiled and a step-by-step trial."""
    assert_reruns_on_both_paths(tmp_path, capsys, _STORED, "swing")
