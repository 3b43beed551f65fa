"""The compiled loop of box-taking kinds on compiled dynamics: chosen automatically, reproducible, and learning
exactly as the same kernels driven step by step from Python on the same compiled environment."""

import gymnasium as gym
import numpy as np
import pytest

from runner.agents import make_agent
from runner.envs.dynamics.stepper import DynamicsStepper
from runner.errors import EnvironmentSourceError
from runner.metrics import TIMING_COLUMNS
from runner.seeding import trial_streams
from runner.streams import new_stream
from runner.trial import resolve_path, run_trial
from runner.trial_spec import TrialSpec

FEATURES = {"kind": "tiles", "tilings": 4, "tiles": 6, "hash_size": 0}


def _spec(kind, env_id, params, seed=0, steps=3000, bins=None):
    env = {"source": "gym", "id": env_id, "options": {}, "step_limit": None}
    if bins is not None:
        env["bins"] = bins
    return TrialSpec.build(env, kind, params, seed, steps, every=1000, episodes=2, step_cap=200, training_window=5)


@pytest.mark.parametrize("kind", ["linear_sarsa", "linear_q_learning", "linear_dyna", "linear_gaussian"])
def test_compiled_path_is_chosen_and_reproducible(kind):
    """Auto takes the compiled loop; it gives the same rows for the same seed and other weights for another."""
    params = {"features": {"kind": "fourier", "order": 2}}
    if kind in ("linear_dyna", "linear_gaussian"):
        params["planning_steps"] = 2
    spec = _spec(kind, "MountainCar-v0", params).as_dict()
    assert resolve_path(spec) == "compiled"
    first, again = run_trial(spec), run_trial(spec)
    assert first.trial_path == "compiled"
    for column, values in first.rows.items():
        if column not in TIMING_COLUMNS:
            assert np.array_equal(values, again.rows[column], equal_nan=True), column
    assert first.rows["real_updates"].tolist() == [0, 1000, 2000, 3000]
    other = run_trial(_spec(kind, "MountainCar-v0", params, seed=1).as_dict())
    assert not np.array_equal(other.final_values, first.final_values)


@pytest.mark.parametrize("env_id", ["MountainCar-v0", "CartPole-v1", "Acrobot-v1", "stepmeter/OverheadCrane-v0"])
def test_learns_exactly_as_the_kernels_driven_from_python(env_id):
    """Same agent stream, same environment stream: the compiled loop's weights equal those of a Python loop over
    `DynamicsStepper` (the compiled dynamics with gymnasium's truncation), bit for bit; evaluation draws from its
    own streams and leaves learning alone."""
    spec = _spec("linear_sarsa", env_id, {"epsilon": 0.2, "features": {**FEATURES, "hash_size": 4096}}).as_dict()
    result = run_trial(spec, "compiled")
    streams = trial_streams(spec["seed"])
    agent = make_agent("linear_sarsa", spec["agent"]["params"])
    stepper = DynamicsStepper(env_id, new_stream(streams.env))
    space = gym.make(env_id).observation_space
    agent.setup(stepper.spec.obs_size, stepper.spec.action_size, streams.agent, bounds=(space.low, space.high))
    obs = stepper.reset()
    episodes = 0
    for _ in range(spec["real_steps"]):
        action = agent.act(obs)
        nxt, reward, terminated, truncated = stepper.step(action)
        agent.observe(obs, action, reward, nxt, terminated, truncated)
        obs = nxt
        if terminated or truncated:
            obs = stepper.reset()
            episodes += 1
    assert np.array_equal(agent.arrays_[0], result.final_values)
    assert len(result.episode_lengths) == episodes


def test_binned_environments_keep_the_tabular_loop_and_forcing_says_why():
    """Bins still take the tabular kinds' compiled loop; an environment without compiled dynamics runs step by
    step, and forcing the compiled path says why not."""
    spec = _spec("q_learning", "MountainCar-v0", {}, bins={"edges": [[-0.5, 0.0], [0.0]]}).as_dict()
    assert resolve_path(spec) == "compiled" and run_trial(spec).trial_path == "compiled"
    line = {"source": "entry", "entry": "runner.envs.line:LineWalk", "options": {}, "step_limit": 50}
    walk = TrialSpec.build(line, "linear_sarsa", {}, 0, 100, every=50, episodes=1, step_cap=50, training_window=2)
    assert resolve_path(walk.as_dict()) == "gymnasium"
    with pytest.raises(EnvironmentSourceError, match="no compiled dynamics for this environment"):
        resolve_path(walk.as_dict(), "compiled")
