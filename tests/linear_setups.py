"""Set-ups shared by the linear agents' tests: Mountain Car's observation box, agents built on it, order-2 Fourier
features by hand, compiled Mountain Car episodes driven by an agent's own kernels, and short trials whose rows
are compared column by column."""

import numpy as np
from numba import njit

from runner.agents import make_agent
from runner.envs.dynamics.mountain_car import default_params, observation, reset, step
from runner.metrics import TIMING_COLUMNS
from runner.streams import new_stream
from runner.trial import TrialResult, run_trial
from runner.trial_spec import TrialSpec

MOUNTAIN_CAR = (np.array([-1.2, -0.07]), np.array([0.6, 0.07]))
"""Mountain Car's observation box (position, velocity), gymnasium's `MountainCarEnv.low` and `.high`."""


def agent_on_mountain_car(kind, seed=0, **params):
    """An agent of `kind` set up for Mountain Car's box and three actions, seeded with `seed`."""
    agent = make_agent(kind, params)
    agent.setup(2, 3, seed, bounds=MOUNTAIN_CAR)
    return agent


def fourier_order_2(obs):
    """The order-2 Fourier basis on Mountain Car's box (Konidaris et al. 2011), in numpy."""
    s = (np.asarray(obs) - MOUNTAIN_CAR[0]) / (MOUNTAIN_CAR[1] - MOUNTAIN_CAR[0])
    c = np.array([(i, j) for i in range(3) for j in range(3)], dtype=float)
    return np.cos(np.pi * c @ s)


@njit(cache=True)
def _episode_lengths(act, observe, arrays, hyper, counters, rng, env_stream, params, lengths, cap):
    """The compiled Mountain Car with no time limit (episodes capped at `cap` steps), as Example 10.1 runs."""
    state, obs, nxt = np.zeros(2), np.zeros(2), np.zeros(2)
    for e in range(lengths.shape[0]):
        reset(state, params, env_stream)
        observation(state, params, obs)
        steps = 0
        while True:
            action = act(arrays, hyper, obs, rng)
            reward, terminated = step(state, action, params, state)
            observation(state, params, nxt)
            steps += 1
            observe(arrays, hyper, counters, obs, action, reward, nxt, terminated, rng)
            obs[:] = nxt
            if terminated or steps >= cap:
                break
        lengths[e] = steps


def episode_lengths(agent, env_seed, episodes, cap=100_000):
    """Steps of each of `episodes` compiled Mountain Car episodes, the agent learning from every real step."""
    lengths = np.zeros(episodes, dtype=np.int64)
    args = (agent.arrays_, agent.hyper_, agent.counters_, agent.stream_, new_stream(env_seed), default_params())
    _episode_lengths(agent.act_kernel, agent.observe_kernel, *args, lengths, cap)
    return lengths


def short_trial(env, kind, params, seed, real_steps, every, step_cap, path="auto") -> TrialResult:
    """One trial of `kind` on `env` with two greedy episodes per evaluation and a training window of 5."""
    spec = TrialSpec.build(
        env, kind, params, seed, real_steps, every=every, episodes=2, step_cap=step_cap, training_window=5
    )
    return run_trial(spec.as_dict(), path)


def assert_same_rows(result: TrialResult, reference: TrialResult, skip=()) -> None:
    """Every metric column of two trials equal to the bit (NaN equal to NaN), timings and `skip` aside."""
    for column, values in reference.rows.items():
        if column not in (*TIMING_COLUMNS, *skip):
            assert np.array_equal(result.rows[column], values, equal_nan=True), column
