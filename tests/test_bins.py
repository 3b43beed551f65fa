"""Grids of bins over box observations (state aggregation, Sutton & Barto 2018, section 9.3), checked against
numpy's own `digitize` and `ravel_multi_index`; the tabular kinds run on continuous tasks through them."""

import gymnasium as gym
import numpy as np
import pytest

from runner.envs.bins import BinnedObservation, BinsError, resolve_bins
from runner.envs.sources import build_env
from runner.trial import resolve_path, run_trial
from runner.trial_spec import TrialSpec


class _Fixed(gym.Env):
    """Returns the observations it is given, so the wrapper's mapping can be read off directly."""

    def __init__(self, size: int) -> None:
        self.observation_space = gym.spaces.Box(-np.inf, np.inf, shape=(size,), dtype=np.float64)
        self.action_space = gym.spaces.Discrete(1)


def test_bin_index_equals_numpy_digitize_and_ravel_multi_index():
    rng = np.random.default_rng(0)
    edges = [np.sort(rng.uniform(-2, 2, size=k)) for k in (3, 1, 5)]
    wrapper = BinnedObservation(_Fixed(3), [e.tolist() for e in edges])
    dims = tuple(e.size + 1 for e in edges)
    assert wrapper.observation_space.n == int(np.prod(dims))
    values = rng.uniform(-3, 3, size=(2000, 3))
    values[:10] = np.array([e[0] for e in edges])  # exactly on an edge: the bin above it, as digitize says
    for v in values:
        # reference: numpy.digitize (right=False: edges[i-1] <= x < edges[i]) and numpy.ravel_multi_index (C order)
        expected = np.ravel_multi_index(tuple(int(np.digitize(x, e)) for x, e in zip(v, edges, strict=True)), dims)
        assert wrapper.observation(v) == expected


def test_counts_with_low_and_high_give_equal_widths_and_clip_outside():
    space = gym.spaces.Box(-np.inf, np.inf, shape=(2,), dtype=np.float64)
    resolved = resolve_bins({"counts": [4, 2], "low": [0, -1], "high": [1, 1]}, space)
    assert resolved == {"edges": [[0.25, 0.5, 0.75], [0.0]]}
    wrapper = BinnedObservation(_Fixed(2), resolved["edges"])
    assert wrapper.observation(np.array([-5.0, -5.0])) == 0  # clipped into the first bins
    assert wrapper.observation(np.array([5.0, 5.0])) == 7  # clipped into the last bins
    assert wrapper.observation(np.array([0.3, 0.5])) == 1 * 2 + 1


def test_bounds_default_to_the_space_when_finite():
    env = build_env({"source": "gym", "id": "MountainCar-v0", "options": {}, "step_limit": None})
    resolved = resolve_bins({"counts": 2}, env.observation_space)
    low, high = env.observation_space.low, env.observation_space.high
    assert resolved["edges"] == [
        [float(np.linspace(low[0], high[0], 3)[1])],
        [float(np.linspace(low[1], high[1], 3)[1])],
    ]


@pytest.mark.parametrize(
    ("data", "key"),
    [({"counts": [2, 2], "edges": [[0], [0]]}, ("edges",)), ({"edges": [[0], "x"]}, ("edges", 1)), ({}, ())],
)
def test_bad_blocks_name_their_key(data, key):
    space = gym.spaces.Box(-1, 1, shape=(2,), dtype=np.float64)
    with pytest.raises(BinsError) as caught:
        resolve_bins(data, space)
    assert caught.value.key == key


def _binned_spec(kind: str, params: dict, env_id: str, bins: dict, seed: int = 0) -> dict:
    env = build_env({"source": "gym", "id": env_id, "options": {}, "step_limit": None})
    spec = {
        "source": "gym",
        "id": env_id,
        "options": {},
        "step_limit": 200,
        "bins": resolve_bins(bins, env.observation_space),
    }
    return TrialSpec.build(
        spec, kind, params, seed, 1000, every=500, episodes=2, step_cap=200, training_window=3
    ).as_dict()


@pytest.mark.parametrize("kind", ["q_learning", "dyna_q", "certainty_equivalence", "prioritized_sweeping"])
def test_tabular_kinds_run_on_a_binned_continuous_task(kind):
    spec = _binned_spec(kind, {}, "MountainCar-v0", {"counts": [8, 8]})
    assert resolve_path(spec) == "compiled"  # MountainCar has compiled dynamics, and the kind compiled kernels
    for path in ("compiled", "gymnasium"):
        result = run_trial(spec, path)
        assert result.trial_path == path
        assert result.rows["real_steps"].tolist() == [0, 500, 1000]
        assert max(result.rows["real_updates"][-1], result.rows["model_updates"][-1]) == 1000
        assert np.all(np.isfinite(result.rows["eval_return"]))
