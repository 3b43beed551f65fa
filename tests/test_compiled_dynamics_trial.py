"""Whole trials of compiled agent kinds on compiled dynamics seen through bins: the loop bins as the wrapper does,
replays the same training steps as the kernels driven one by one from Python, and is the same experiment as the
step-by-step path in distribution."""

from pathlib import Path

import numpy as np
import pytest
from scipy import stats

from runner.agents import make_agent
from runner.analysis.curves import normalized_auc
from runner.compiled_dynamics_trial import bin_index, compiled_dynamics
from runner.envs.bins import resolve_bins
from runner.envs.dynamics.stepper import DynamicsStepper
from runner.envs.sources import build_env
from runner.errors import EnvironmentSourceError
from runner.seeding import trial_streams
from runner.streams import new_stream
from runner.trial import resolve_path, run_trial
from runner.trial_spec import TrialSpec


def _env(env_id: str, count: int = 6, step_limit: int | None = None, **options) -> dict:
    built = build_env({"source": "gym", "id": env_id, "options": options, "step_limit": None})
    bins = resolve_bins({"counts": count, "low": -2.0, "high": 2.0}, built.observation_space)
    built.close()
    return {"source": "gym", "id": env_id, "options": options, "step_limit": step_limit, "bins": bins}


def _spec(env: dict, kind: str, seed: int, steps: int = 3000, **params) -> dict:
    return TrialSpec.build(
        env, kind, params, seed, steps, every=steps // 10, episodes=5, step_cap=200, training_window=5
    ).as_dict()


def test_bin_index_matches_the_wrapper():
    env = build_env(_env("Acrobot-v1", count=5))
    dynamics = compiled_dynamics(_env("Acrobot-v1", count=5), env)
    rng = np.random.default_rng(1)
    for obs in rng.uniform(-3, 3, size=(500, 6)):
        assert bin_index(obs, *dynamics.bins) == env.observation(obs)


@pytest.mark.parametrize(
    ("env", "path"),
    [
        (_env("CartPole-v1"), "compiled"),
        (_env("stepmeter/OverheadCrane-v0", step_limit=100, rail_length=6.0, bay_position=4.0), "compiled"),
        (_env("CartPole-v1") | {"bins": None}, "gymnasium"),
        (_env("Pendulum-v1") | {"bins": None}, "gymnasium"),
    ],
    ids=["binned-cartpole", "binned-crane", "boxes", "box-actions"],
)
def test_auto_takes_the_compiled_path_where_kernels_exist_on_both_sides(env, path, monkeypatch):
    monkeypatch.syspath_prepend(str(Path(__file__).resolve().parent.parent / "examples"))
    kind = "q_learning" if env.get("bins") and env["id"] != "Pendulum-v1" else "linear_q:LinearQ"
    assert resolve_path(_spec(env, kind, 0)) == path


def test_forcing_the_compiled_path_where_it_cannot_run_is_one_clear_error():
    with pytest.raises(EnvironmentSourceError, match="compiled dynamics seen through bins"):
        resolve_path(
            _spec(_env("CartPole-v1", step_limit=50) | {"options": {"sutton_barto_reward": True}}, "q_learning", 0),
            "compiled",
        )


def test_training_steps_equal_the_kernels_driven_from_python():
    """The compiled loop's training episodes equal those of the same kernels, streams and agent driven step by
    step from Python (`DynamicsStepper`): the loop adds nothing but the binning and the bookkeeping."""
    env = _env("CartPole-v1", step_limit=60)
    spec = _spec(env, "dyna_q", seed=4, steps=2000, planning_steps=3)
    result = run_trial(spec, "compiled")
    streams = trial_streams(4)
    agent = make_agent("dyna_q", spec["agent"]["params"])
    wrapper = build_env(env)
    agent.setup(wrapper.observation_space.n, 2, streams.agent)
    stepper = DynamicsStepper("CartPole-v1", new_stream(streams.env))
    lengths, returns = [], []
    s = wrapper.observation(stepper.reset())
    length, total = 0, 0.0
    for _ in range(2000):
        a = agent.act(s)
        obs, reward, terminated, _ = stepper.step(a)
        s2 = wrapper.observation(obs)
        agent.observe(s, a, reward, s2, terminated)
        length, total, s = length + 1, total + reward, s2
        if terminated or length >= 60:
            lengths.append(length)
            returns.append(total)
            length, total = 0, 0.0
            s = wrapper.observation(stepper.reset())
    assert result.episode_lengths.tolist() == lengths
    assert result.episode_returns.tolist() == returns
    assert result.rows["planning_updates"][-1] == 3 * 2000


@pytest.mark.slow
def test_auc_distributions_of_both_paths_agree():
    env = _env("CartPole-v1", count=4)
    aucs = {}
    for path in ("compiled", "gymnasium"):
        aucs[path] = np.array(
            [
                normalized_auc(r.rows["real_steps"], r.rows["eval_return"])
                for r in (run_trial(_spec(env, "q_learning", seed, alpha=0.2), path) for seed in range(30))
            ]
        )
    # reference: scipy.stats.ks_2samp (two-sample Kolmogorov-Smirnov test)
    result = stats.ks_2samp(aucs["compiled"], aucs["gymnasium"])
    assert result.pvalue > 0.01
    assert not np.array_equal(aucs["compiled"], aucs["gymnasium"])  # different start-state streams
