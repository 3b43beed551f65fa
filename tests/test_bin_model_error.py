"""Model error of the tabular count and last-outcome models on bins: each predicts the expected bin centre of
its learned next-bin distribution, and its held-out one-step and open-loop errors come out the same from the
step-by-step path (Python, `model_errors`) and from compiled code (`bin_model_errors`) on a fixed model."""

import gymnasium as gym
import numpy as np
import pytest

from runner.agents import AGENTS, agent_class, make_agent
from runner.envs.bins import bin_centres, resolve_bins
from runner.envs.sources import build_env
from runner.models.held_out import collect_held_out, model_errors
from runner.models.held_out_bins import bin_arrays, bin_model_errors, bin_predictor, held_out_arrays
from runner.seeding import held_out_sequence
from runner.trial import run_trial
from runner.trial_spec import TrialSpec

_BOX = gym.spaces.Box(np.array([-np.inf, 0.0]), np.array([np.inf, 4.0]), dtype=np.float64)
_MODEL_KINDS = sorted(k for k in AGENTS.names() if agent_class(k)().has_bin_model())


def test_the_count_and_last_outcome_kinds_all_predict_on_bins():
    assert set(_MODEL_KINDS) >= {
        "dyna_q",
        "dyna_q_plus",
        "prioritized_sweeping",
        "certainty_equivalence",
        "rmax",
        "uct_search",
        "puct_search",
    }
    assert not make_agent("q_learning", {}).has_bin_model()


def test_bin_centres_recover_the_clipping_range_of_counts_bins():
    resolved = resolve_bins({"counts": [4, 2], "low": [-2.0, 0.0], "high": [2.0, 4.0]}, _BOX)
    centres = bin_centres(resolved["edges"], _BOX)
    # reference: numpy.linspace over low..high, the midpoints of its consecutive points
    for got, (lo, hi, c) in zip(centres, [(-2.0, 2.0, 4), (0.0, 4.0, 2)], strict=True):
        points = np.linspace(lo, hi, c + 1)
        np.testing.assert_allclose(got, (points[:-1] + points[1:]) / 2, rtol=0, atol=1e-12)


def test_a_single_edge_reaches_finite_bounds_and_sits_on_the_edge_otherwise():
    centres = bin_centres([[1.0], [1.0]], _BOX)
    np.testing.assert_array_equal(centres[0], [1.0, 1.0])  # unbounded: no width to give the outer bins
    np.testing.assert_array_equal(centres[1], [0.5, 2.5])  # bounded by 0 and 4


def _grid():
    edges = resolve_bins({"counts": [4, 2], "low": [-2.0, 0.0], "high": [2.0, 4.0]}, _BOX)["edges"]
    return bin_arrays(edges, _BOX)


def _predict(agent, state, action, grid):
    out = np.zeros(2)
    reward = agent.predict_kernel(agent.arrays_, state, action, grid, out)
    return out, reward


def test_count_model_predicts_the_expected_bin_centre_and_leaves_ended_outcomes_out():
    _, grid = _grid()
    agent = make_agent("certainty_equivalence", {"replan_every": 1000})
    agent.setup(8, 2, 0)
    # bins are row-major: bin = 2 * i + j for i the first dimension's bin (centres -1.5 .. 1.5) and j the second's
    for next_bin, reward, ended in [(3, 1.0, False), (3, 1.0, False), (6, 4.0, False), (0, -3.0, True)]:
        agent.observe(5, 1, reward, next_bin, ended)
    out, reward = _predict(agent, 5, 1, grid)
    # by hand: bins 3 = (-0.5, 3) twice and 6 = (1.5, 1) once; the ended outcome has no next bin
    np.testing.assert_allclose(out, [(2 * -0.5 + 1.5) / 3, (2 * 3.0 + 1.0) / 3], rtol=1e-12)
    assert reward == pytest.approx((1 + 1 + 4 - 3) / 4)
    out, reward = _predict(agent, 5, 0, grid)  # never tried: no movement, its own bin (0.5, 3)
    np.testing.assert_array_equal(out, [0.5, 3.0])
    assert reward == 0.0


def test_last_outcome_model_predicts_the_centre_of_the_bin_it_remembers():
    _, grid = _grid()
    agent = make_agent("dyna_q", {"planning_steps": 0})
    agent.setup(8, 2, 0)
    agent.observe(2, 0, 1.0, 7, False)
    agent.observe(2, 0, 2.0, 4, False)
    out, reward = _predict(agent, 2, 0, grid)
    np.testing.assert_array_equal(out, [0.5, 1.0])
    assert reward == 2.0
    agent.observe(2, 0, -1.0, 0, True)  # ended: no next bin, so its own bin (-0.5, 1)
    out, reward = _predict(agent, 2, 0, grid)
    np.testing.assert_array_equal(out, [-0.5, 1.0])
    assert reward == -1.0


def _binned_cartpole() -> dict:
    built = build_env({"source": "gym", "id": "CartPole-v1", "options": {}, "step_limit": None})
    bins = resolve_bins(
        {"counts": [3, 4, 6, 4], "low": [-2.4, -2, -0.21, -2], "high": [2.4, 2, 0.21, 2]}, built.observation_space
    )
    built.close()
    return {"source": "gym", "id": "CartPole-v1", "options": {}, "step_limit": None, "bins": bins}


@pytest.mark.parametrize("kind", _MODEL_KINDS)
def test_both_paths_measure_the_same_errors_on_a_fixed_model(kind):
    spec = _binned_cartpole()
    env = build_env(spec)
    bins, grid = bin_arrays(spec["bins"]["edges"], env.env.observation_space)
    agent = make_agent(kind, {"simulations": 4} if "search" in kind else {})
    agent.setup(env.observation_space.n, 2, 1)
    rng = np.random.default_rng(5)
    state, _ = env.reset(seed=5)
    for _ in range(3000):  # a fixed model learned from random real steps
        action = int(rng.integers(2))
        next_state, reward, terminated, truncated, _ = env.step(action)
        agent.observe(state, action, float(reward), next_state, terminated, truncated)
        state = next_state if not (terminated or truncated) else env.reset()[0]
    held_env = build_env({**spec, "bins": None})
    held = collect_held_out(held_env, held_out_sequence(9))
    python = model_errors(bin_predictor(agent, bins, grid), held)
    compiled = bin_model_errors(kind, agent.arrays_, bins, grid, held_out_arrays(held, 4))
    assert all(np.isfinite(python))
    np.testing.assert_allclose(compiled, python, rtol=1e-12)
    assert python[0] < 1.0  # a learned model beats "off by a typical spread" one step ahead


def test_compiled_and_step_by_step_trials_fill_the_model_error_columns():
    """Step 0: the model is empty, so both paths predict no movement on the same held-out set (equal errors);
    later points are learned ones (finite); a model-free kind leaves them NaN."""
    rows = {}
    for kind in ("dyna_q", "q_learning"):
        spec = TrialSpec.build(
            _binned_cartpole() | {"step_limit": 200},
            kind,
            {},
            3,
            1000,
            every=500,
            episodes=2,
            step_cap=200,
            training_window=5,
        ).as_dict()
        for path in ("compiled", "gymnasium"):
            result = run_trial(spec, path=path)
            assert result.trial_path == path
            rows[kind, path] = np.array([result.rows[f"model_error_{k}"] for k in (1, 5, 20)])
    assert np.isnan(rows["q_learning", "compiled"]).all() and np.isnan(rows["q_learning", "gymnasium"]).all()
    np.testing.assert_allclose(rows["dyna_q", "compiled"][:, 0], rows["dyna_q", "gymnasium"][:, 0], rtol=1e-12)
    assert np.isfinite(rows["dyna_q", "compiled"]).all() and np.isfinite(rows["dyna_q", "gymnasium"]).all()
