"""`neural_dyna` on box actions, where its learner is soft actor-critic (the MBPO arrangement): `planning_steps: 0`
is the `soft_actor_critic` kind bit for bit on both paths; compiled rows repeat, count what the schedule says and
carry the model's held-out errors, spread and coverage, as the step-by-step rows do; the model takes actions in the
environment's units; the weighted SAC losses ignore rows after a simulated end; a parameter only the other learner
reads is one line at check and at setup; the contract checks pass on the continuous line walk; `rerun` reproduces
stored trials of both paths.

Every Pendulum trial here shares one tiny setting (1 x 16 units, 400 real steps, evaluation every 200), so the
compiled chunks are built once and reused (`runner.neural.trial` keeps them by setting)."""

from __future__ import annotations

import dataclasses
from typing import Any, ClassVar

import numpy as np
import pytest

jax = pytest.importorskip("jax")
import jax.numpy as jnp  # noqa: E402
from stored_reruns import assert_reruns_on_both_paths  # noqa: E402

from runner.agents import AGENTS, agent_class, make_agent  # noqa: E402
from runner.agents.neural_dyna import NeuralDyna  # noqa: E402
from runner.checks import agent_checks  # noqa: E402
from runner.config import load_experiment  # noqa: E402
from runner.errors import ConfigError, EnvironmentSourceError  # noqa: E402
from runner.metrics import HONESTY_COLUMNS, METRIC_COLUMNS, TIMING_COLUMNS  # noqa: E402
from runner.neural.dyna import NeuralDynaCore  # noqa: E402
from runner.trial import run_trial  # noqa: E402
from runner.trial_spec import TrialSpec  # noqa: E402

SAC_TINY = {
    "hidden_layers": 1,
    "hidden_units": 16,
    "batch_size": 16,
    "buffer_size": 1000,
    "learning_starts": 50,
    "learning_rate": 1e-3,
    "polyak_rate": 0.005,
}
"""Soft actor-critic's parameters, each given, so the two kinds' differing defaults do not enter."""
MODEL_TINY = {
    "ensemble_size": 2,
    "model_layers": 1,
    "model_units": 16,
    "model_every": 100,
    "model_steps": 5,
    "rollout_length": 3,
}
PENDULUM = {"source": "gym", "id": "Pendulum-v1", "options": {}, "step_limit": None}
COMPARED = [c for c in METRIC_COLUMNS if c not in TIMING_COLUMNS]
MODEL_COLUMNS = ("model_error_1", "model_error_5", "model_error_20", "model_reward_error", *HONESTY_COLUMNS)


def _spec(kind: str, params: dict, seed: int) -> dict:
    return TrialSpec.build(
        PENDULUM, kind, params, seed, 400, every=200, episodes=2, step_cap=200, training_window=5
    ).as_dict()


def _same_rows(a, b) -> bool:
    return all(np.array_equal(a.rows[c], b.rows[c], equal_nan=True) for c in COMPARED) and np.array_equal(
        a.episode_returns, b.episode_returns
    )


def test_registered_for_both_kinds_of_actions(capsys):
    from runner.cli import main

    cls = agent_class("neural_dyna")
    assert cls.tags.actions == ("discrete", "box") and cls.tags.learned_model == "function"
    assert {p.name for p in agent_class("soft_actor_critic").schema} < {p.name for p in cls.schema}
    assert main(["list", "agents"]) == 0
    out = capsys.readouterr().out
    entry = out[out.index("\n  neural_dyna: ") :].split("\n\n")[0]
    assert "takes: observations: box; actions: discrete or box;" in entry
    assert "temperature" in entry and "(box actions only)" in entry and "(discrete actions only)" in entry


@pytest.mark.parametrize("path", ["compiled", "gymnasium"])
def test_no_planning_is_soft_actor_critic_bit_for_bit(path):
    """With `planning_steps: 0` no model is trained and every row and training episode equals the
    `soft_actor_critic` kind's of the same seed and parameters."""
    dyna = run_trial(_spec("neural_dyna", {**SAC_TINY, **MODEL_TINY, "planning_steps": 0}, 3), path)
    sac = run_trial(_spec("soft_actor_critic", SAC_TINY, 3), path)
    assert dyna.trial_path == sac.trial_path == path
    assert _same_rows(dyna, sac)
    assert dyna.rows["real_updates"][-1] > 0
    assert np.all(dyna.rows["planning_updates"] == 0) and np.all(dyna.rows["model_updates"] == 0)
    assert np.all(np.isnan(dyna.rows["model_error_1"])) and np.all(np.isnan(dyna.rows["model_spread_1"]))


@pytest.fixture(scope="module")
def box_runs():
    params = {**SAC_TINY, **MODEL_TINY, "planning_steps": 2}
    return params, run_trial(_spec("neural_dyna", params, 4)), run_trial(_spec("neural_dyna", params, 4))


def test_compiled_rows_repeat_and_count_what_the_schedule_says(box_runs):
    params, first, again = box_runs
    assert first.trial_path == "compiled"
    assert _same_rows(first, again)
    rows = first.rows
    core = NeuralDynaCore.from_params(make_agent("neural_dyna", params).get_params(), 3, 1, ((-2.0,), (2.0,)))
    steps = [int(s) for s in rows["real_steps"]]
    assert steps == [0, 200, 400]
    assert list(rows["real_updates"]) == [core.q.updates_after(s) for s in steps] == [0, 151, 351]
    # model rounds at 100, 200, 300 and 400; from the first on, 2 planning updates at every real step
    assert list(rows["planning_updates"]) == [core.planning_updates_after(s) for s in steps] == [0, 202, 602]
    assert list(rows["model_updates"]) == [5 * core.model_rounds_after(s) for s in steps] == [0, 10, 20]


def test_both_paths_report_the_models_held_out_errors_spread_and_coverage(box_runs):
    """Finite errors, spread and coverage at every point on both paths, coverage a fraction, and the trained
    model's one-step error below its untrained one."""
    params, compiled, _ = box_runs
    stepped = run_trial(_spec("neural_dyna", params, 4), "gymnasium")
    assert stepped.trial_path == "gymnasium"
    for result in (compiled, stepped):
        for column in MODEL_COLUMNS:
            assert np.all(np.isfinite(result.rows[column])), column
        coverage = result.rows["model_coverage_1"]
        assert np.all((coverage >= 0) & (coverage <= 1))
        assert result.rows["model_error_1"][-1] < result.rows["model_error_1"][0]
    assert list(stepped.rows["planning_updates"]) == list(compiled.rows["planning_updates"])


def _known_box_system(core: NeuralDynaCore, n: int, seed: int):
    """A buffer of n transitions of s' = s + 0.2 u e_0 for a push u in [-2, 2] (stored squashed, as soft
    actor-critic stores it), reward s_1, terminated when s'_0 > 0.8."""
    rng = np.random.default_rng(seed)
    obs = rng.uniform(-1.0, 1.0, size=(n, 2)).astype(np.float32)
    push = rng.uniform(-2.0, 2.0, size=(n, 1)).astype(np.float32)
    next_obs = obs.copy()
    next_obs[:, 0] += 0.2 * push[:, 0]
    state = core.init(jax.random.key(seed))
    buf = state.q.buffer
    buf = buf._replace(
        obs=buf.obs.at[:n].set(obs),
        actions=buf.actions.at[:n].set(np.asarray(core.q.from_box(push))),
        rewards=buf.rewards.at[:n].set(obs[:, 1]),
        next_obs=buf.next_obs.at[:n].set(next_obs),
        terminated=buf.terminated.at[:n].set(next_obs[:, 0] > 0.8),
        size=jnp.int32(n),
    )
    return state._replace(q=state.q._replace(buffer=buf, steps=jnp.int32(n)))


@pytest.fixture(scope="module")
def trained():
    """A small model trained for 30 rounds on the known box system (float64 mode, as trials run)."""
    with jax.enable_x64(True):
        params = {**SAC_TINY, "batch_size": 32, "buffer_size": 600}
        q = NeuralDynaCore.from_params(params, 2, 1, ((-2.0,), (2.0,))).q
        core = NeuralDynaCore(q, ensemble_size=2, model_units=32, model_steps=50, rollout_length=4)
        state = _known_box_system(core, 600, seed=0)
        for _ in range(30):
            state = core.train_model(state)
        return core, state


def test_the_model_takes_actions_in_the_environments_units(trained):
    """Trained on squashed actions stored in the buffer, the model predicts from pushes in [-2, 2]: had it learned
    on the squashed values, a push of 2 would move s_0 by 0.8, not 0.4."""
    core, state = trained
    with jax.enable_x64(True):
        grid = np.array([[x, y] for x in (-0.5, 0.0, 0.3) for y in (-0.5, 0.5)], np.float32)
        for push in (-2.0, 0.5, 2.0):
            pred = core.predict(state, grid, np.full((len(grid), 1), push, np.float32))
            expected = grid + np.array([0.2 * push, 0.0], np.float32)
            np.testing.assert_allclose(np.asarray(pred.next_state_mean), expected, atol=0.06)
            np.testing.assert_allclose(np.asarray(pred.reward_mean), grid[:, 1], atol=0.06)


def test_rollouts_start_at_real_states_and_take_the_policys_squashed_actions(trained):
    core, state = trained
    with jax.enable_x64(True):
        obs, actions, rewards, next_obs, _, weight = jax.jit(core.simulate)(state, jax.random.key(5))
        runs = -(-core.q.batch_size // core.rollout_length)
        assert obs.shape == (core.q.batch_size, 2) and actions.shape == (core.q.batch_size, 1)
        assert np.all(np.abs(np.asarray(actions)) <= 1.0)
        stored = {tuple(row) for row in np.asarray(state.q.buffer.obs[:600]).tolist()}
        assert all(tuple(row) in stored for row in np.asarray(obs[:runs]).tolist())
        assert np.all(np.asarray(weight[:runs]) == 1.0)
        # each step follows the model from the action moved back into the box (s' = s + 0.2 u e_0)
        moved = np.asarray(next_obs[:, 0] - obs[:, 0])
        np.testing.assert_allclose(moved, 0.2 * np.asarray(core.q.to_box(actions))[:, 0], atol=0.1)
        np.testing.assert_allclose(np.asarray(rewards), np.asarray(obs[:, 1]), atol=0.1)
        np.testing.assert_array_equal(np.asarray(obs[runs:]), np.asarray(next_obs[: core.q.batch_size - runs]))


def test_weighted_soft_actor_critic_losses_ignore_rows_of_weight_zero(trained):
    """Rows after a simulated end weigh 0: changing them changes no loss, and the weighted loss is the mean of
    the rows that count (each row's loss alone taken with a one-hot weight)."""
    core, state = trained
    sac, q = core.q, state.q
    rng = np.random.default_rng(1)
    batch = [
        rng.normal(size=(8, 2)).astype(np.float32),
        rng.uniform(-1, 1, size=(8, 1)).astype(np.float32),
        rng.normal(size=8).astype(np.float32),
        rng.normal(size=(8, 2)).astype(np.float32),
        rng.random(8) < 0.3,
    ]
    weight = np.array([1, 1, 1, 0, 1, 0, 0, 1], np.float32)
    changed = [b.copy() for b in batch]
    for b in changed[:4]:
        b[weight == 0] = 50.0
    key = jax.random.key(3)
    with jax.enable_x64(True):
        critic = sac.critic_loss

        def policy(obs, w):
            return sac.policy_loss(q.online, q.critics, q.log_alpha, obs, key, w)[0]

        weighted = float(critic(q.critics, q, tuple(batch), key, weight))
        assert weighted == float(critic(q.critics, q, tuple(changed), key, weight))
        rows = [float(critic(q.critics, q, tuple(batch), key, np.eye(8, dtype=np.float32)[i])) for i in range(8)]
        assert weighted == pytest.approx(np.mean(np.asarray(rows)[weight > 0]), rel=1e-5)
        assert float(policy(batch[0], weight)) == float(policy(changed[0], weight))
        plain = float(critic(q.critics, q, tuple(batch), key, None))
        assert plain == pytest.approx(float(critic(q.critics, q, tuple(batch), key, np.ones(8, np.float32))), rel=1e-6)


_EXPERIMENT = """\
experiment: other-actions
seeds: 1
real_steps: 1000
environments:
  - gym: {env}
agents:
  - label: dyna
    kind: neural_dyna
    params: {params}
"""


@pytest.mark.parametrize(
    ("env", "params", "named"),
    [
        ("Pendulum-v1", "{epsilon_steps: 5000}", "epsilon_steps: 5000"),
        ("CartPole-v1", "{temperature: 0.2, learn_temperature: false}", "learn_temperature: False, temperature: 0.2"),
    ],
)
def test_a_parameter_of_the_other_learner_is_one_line_at_check_and_at_setup(tmp_path, env, params, named):
    import gymnasium as gym

    path = tmp_path / "x.yaml"
    path.write_text(_EXPERIMENT.format(env=env, params=params))
    with pytest.raises(ConfigError) as caught:
        load_experiment(path)
    message = str(caught.value)
    assert "\n" not in message and message.startswith(f"{path}:9: agents[0].params: on '{env}':")
    assert named in message and "leave" in message
    env_object = gym.make(env)
    agent = make_agent("neural_dyna", {"epsilon_steps": 5000} if env == "Pendulum-v1" else {"temperature": 0.2})
    with pytest.raises(EnvironmentSourceError, match="does not read"):
        agent.setup(env_object.observation_space, env_object.action_space, 0)
    env_object.close()
    path.write_text(_EXPERIMENT.format(env=env, params="{}"))
    load_experiment(path)


_STORED = """\
experiment: swing-dyna
seeds: 1
real_steps: 400
evaluation: {every: 200, episodes: 2, step_cap: 200}
environments:
  - gym: Pendulum-v1
agents:
  - label: dyna
    kind: neural_dyna
    params: {hidden_layers: 1, hidden_units: 16, batch_size: 16, buffer_size: 1000, learning_starts: 50,
             learning_rate: 0.001, polyak_rate: 0.005, planning_steps: 2, ensemble_size: 2, model_layers: 1,
             model_units: 16, model_every: 100, model_steps: 5, rollout_length: 3}
"""


@pytest.mark.slow
def test_stored_trials_rerun_bit_for_bit_on_both_paths(tmp_path, capsys):
    """`stepmeter rerun --all` on a store holding a compiled and a step-by-step trial of box-action Dyna."""
    assert_reruns_on_both_paths(tmp_path, capsys, _STORED, "swing-dyna")


class BoxOnlyDyna(NeuralDyna):
    """`neural_dyna` declaring box actions only, so the contract checks (which pick the discrete line walk for a
    kind that takes discrete actions) run it on the continuous line walk, where its learner is soft actor-critic."""

    kind = "neural_dyna_box_actions"
    tags = dataclasses.replace(NeuralDyna.tags, actions=("box",))
    check_params: ClassVar[dict[str, Any]] = {
        **agent_class("soft_actor_critic").check_params,
        "polyak_rate": 0.005,
        "planning_steps": 1,
        "ensemble_size": 2,
        "model_layers": 1,
        "model_units": 16,
        "model_every": 100,
        "model_steps": 10,
        "rollout_length": 2,
    }


_BOX_CHECKS = [name for name, _ in agent_checks("neural_dyna")]


@pytest.mark.slow
@pytest.mark.parametrize("check", _BOX_CHECKS)
def test_the_contract_holds_on_box_actions(monkeypatch, check):
    monkeypatch.setitem(AGENTS.entries, BoxOnlyDyna.kind, f"{__name__}:BoxOnlyDyna")
    runs = dict(agent_checks(BoxOnlyDyna.kind))
    runs[check]()
