"""Feature kernels and declarations: tile coding, RBF, the Fourier basis and raw features."""

import itertools

import numpy as np
import pytest

from runner.errors import EnvironmentSourceError
from runner.features import FeatureSpecError, build_feature_map, feature_values, resolve_features
from runner.features.spec import UNBOUNDED_CLIP

LOW, HIGH = np.array([-1.2, -0.07]), np.array([0.6, 0.07])
"""Mountain Car's observation bounds (gymnasium's MountainCar-v0 observation space)."""


def _active(fmap, obs):
    n = int(fmap[0][6])
    idx, val = np.zeros(n, dtype=np.int64), np.zeros(n)
    count = feature_values(np.asarray(obs, dtype=np.float64), fmap, idx, val)
    return idx[:count], val[:count]


def _tiles(tilings=8, tiles=8, hash_size=0, low=LOW, high=HIGH):
    spec = resolve_features({"kind": "tiles", "tilings": tilings, "tiles": tiles, "hash_size": hash_size})
    return build_feature_map(spec, low, high)


def test_one_tile_per_tiling():
    """Sutton & Barto (2018), section 9.5.4: every input activates exactly one tile in each tiling."""
    fmap = _tiles()
    per_tiling = 9**2
    rng = np.random.default_rng(0)
    for obs in rng.uniform(LOW - 0.1, HIGH + 0.1, size=(500, 2)):
        idx, val = _active(fmap, obs)
        assert len(idx) == 8 and np.all(val == 1.0)
        assert sorted(idx // per_tiling) == list(range(8))
        assert np.all((idx >= 0) & (idx < fmap[0][5]))


def test_one_tile_width_apart_share_no_tile():
    """Section 9.5.4: inputs a tile width apart along a dimension fall in different tiles of every tiling."""
    fmap = _tiles()
    width = (HIGH - LOW) / 8
    rng = np.random.default_rng(1)
    for obs in rng.uniform(LOW, HIGH - width, size=(300, 2)):
        for d in range(2):
            other = obs.copy()
            other[d] += width[d] * (1 + 1e-9)
            assert not set(_active(fmap, obs)[0]) & set(_active(fmap, other)[0])


def test_shared_tiles_fall_with_distance():
    """Section 9.5.4: the tiles two inputs share fall off with their distance, from all tilings at distance 0
    to none at one tile width; averaged over start points the fall is close to linear (generalisation is
    strongest nearby)."""
    fmap = _tiles()
    width = (HIGH - LOW) / 8
    rng = np.random.default_rng(2)
    starts = rng.uniform(LOW + width, HIGH - 2 * width, size=(400, 2))
    fractions = np.linspace(0.0, 1.0, 9)
    for d in range(2):
        shared = []
        for f in fractions:
            counts = []
            for obs in starts:
                other = obs.copy()
                other[d] += f * width[d] * (1 + 1e-9) if f == 1.0 else f * width[d]
                counts.append(len(set(_active(fmap, obs)[0]) & set(_active(fmap, other)[0])))
            shared.append(np.mean(counts))
        assert shared[0] == 8 and shared[-1] == 0
        assert np.all(np.diff(shared) < 0)
        assert np.allclose(shared, 8 * (1 - fractions), atol=0.5)


def _numpy_tile_coords(obs, tilings, tiles, low, high):
    """Tile coordinates of every tiling computed directly in numpy (shape (tilings, dims)): the scaled input plus
    the asymmetric offsets ((t * (2d + 1)) mod tilings) / tilings of a tile (section 9.5.4), floored."""
    s = np.clip((obs - low) / (high - low), 0.0, 1.0)
    t, d = np.arange(tilings)[:, None], np.arange(len(obs))[None, :]
    return np.floor(s * tiles + ((t * (2 * d + 1)) % tilings) / tilings).astype(np.int64)


def test_tile_indices_equal_a_direct_numpy_computation():
    """Unhashed, tiling t's tile is t * (tiles + 1)**dims plus its coordinates read as digits in base tiles + 1;
    on 2 and 3 dimensions, inside and outside the bounds and exactly on tile edges."""
    rng = np.random.default_rng(5)
    for tilings, tiles, low, high in ((8, 8, LOW, HIGH), (5, 4, -np.ones(3), np.array([1.0, 2.0, 3.0]))):
        fmap = _tiles(tilings, tiles, low=low, high=high)
        edges = low + (high - low) * rng.integers(0, tiles + 1, size=(50, len(low))) / tiles
        for obs in np.vstack([rng.uniform(low - 0.2, high + 0.2, size=(300, len(low))), edges]):
            coords = _numpy_tile_coords(obs, tilings, tiles, low, high)
            digits = (tiles + 1) ** np.arange(len(low))[::-1]
            expected = np.arange(tilings) * (tiles + 1) ** len(low) + coords @ digits
            assert np.array_equal(_active(fmap, obs)[0], expected)


def test_hashed_tile_indices_are_fnv_1a_of_the_tiling_and_coordinates():
    """Hashed, tiling t's index is FNV-1a (64-bit offset basis and prime, common practice) over t and then each
    coordinate, xor before multiply, modulo hash_size: computed here with Python integers."""
    offset, prime, mask = 14695981039346656037, 1099511628211, (1 << 64) - 1
    fmap = _tiles(tilings=4, tiles=10, hash_size=97, low=np.zeros(3), high=np.ones(3))
    rng = np.random.default_rng(6)
    for obs in rng.uniform(-0.1, 1.1, size=(200, 3)):
        expected = []
        for t, coords in enumerate(_numpy_tile_coords(obs, 4, 10, np.zeros(3), np.ones(3))):
            h = ((offset ^ t) * prime) & mask
            for c in coords:
                h = ((h ^ int(c)) * prime) & mask
            expected.append(h % 97)
        assert _active(fmap, obs)[0].tolist() == expected


def test_hashing_keeps_one_index_per_tiling_inside_the_table():
    fmap = _tiles(tilings=4, tiles=10, hash_size=64, low=np.zeros(3), high=np.ones(3))
    assert fmap[0][5] == 64
    rng = np.random.default_rng(3)
    seen = set()
    for obs in rng.uniform(0, 1, size=(200, 3)):
        idx, _ = _active(fmap, obs)
        assert len(idx) == 4 and np.all((idx >= 0) & (idx < 64))
        assert np.array_equal(idx, _active(fmap, obs)[0])
        seen.update(idx.tolist())
    assert len(seen) > 48


def test_fourier_feature_is_the_cosine_of_the_coefficients():
    """Konidaris, Osentoski & Thomas (2011): feature i is cos(pi c_i . s), s scaled to [0, 1], c_i in {0..n}^d."""
    fmap = build_feature_map(resolve_features({"kind": "fourier", "order": 3}), LOW, HIGH)
    coefficients = np.array(list(itertools.product(range(4), repeat=2)), dtype=np.float64)
    rng = np.random.default_rng(4)
    for obs in rng.uniform(LOW, HIGH, size=(50, 2)):
        _, val = _active(fmap, obs)
        s = (obs - LOW) / (HIGH - LOW)
        assert np.allclose(val, np.cos(np.pi * coefficients @ s), rtol=0, atol=1e-12)
    assert _active(fmap, LOW)[1][0] == 1.0


def test_rbf_features_are_gaussian_bumps_on_a_grid():
    """Sutton & Barto (2018), section 9.5.5: x_i(s) = exp(-||s - c_i||^2 / (2 sigma^2))."""
    fmap = build_feature_map(resolve_features({"kind": "rbf", "centres": 3, "width": 0.25}), LOW, HIGH)
    centres = np.array(list(itertools.product([0.0, 0.5, 1.0], repeat=2)))
    obs = np.array([0.1, 0.01])
    s = (obs - LOW) / (HIGH - LOW)
    expected = np.exp(-np.sum((s - centres) ** 2, axis=1) / (2 * 0.25**2))
    assert np.allclose(_active(fmap, obs)[1], expected, rtol=0, atol=1e-12)


def test_raw_features_are_the_observation_and_a_bias():
    fmap = build_feature_map(resolve_features({"kind": "raw"}), LOW, HIGH)
    idx, val = _active(fmap, [0.3, -0.02])
    assert idx.tolist() == [0, 1, 2] and val.tolist() == [0.3, -0.02, 1.0]


def test_unbounded_sides_are_clipped_unless_bounds_are_given():
    spec = resolve_features({"kind": "fourier", "order": 1})
    fmap = build_feature_map(spec, np.array([-np.inf, 0.0]), np.array([np.inf, 1.0]))
    assert fmap[2].tolist() == [-UNBOUNDED_CLIP, 0.0] and fmap[3].tolist() == [UNBOUNDED_CLIP, 1.0]
    given = resolve_features({"kind": "fourier", "order": 1, "low": [-2, 0], "high": [2, 1]})
    assert build_feature_map(given, np.array([-np.inf, 0.0]), np.array([np.inf, 1.0]))[2].tolist() == [-2.0, 0.0]
    with pytest.raises(EnvironmentSourceError, match="expected 3 numbers"):
        build_feature_map(given, np.zeros(3), np.ones(3))


@pytest.mark.parametrize(
    ("value", "where", "message"),
    [
        ({"kind": "tile"}, ("kind",), "expected one of"),
        ({"kind": "tiles", "tilings": 0}, ("tilings",), "whole number in [1, 64]"),
        ({"kind": "tiles", "order": 3}, ("order",), "unknown key of tiles features"),
        ({"kind": "rbf", "width": -1.0}, ("width",), "a number in (0, inf)"),
        ({"kind": "fourier", "low": [0, "a"]}, ("low", 1), "a finite number"),
        ({"kind": "fourier", "low": [0, 1], "high": [1, 1]}, ("high", 1), "above low's 1.0"),
        ({"kind": "tiles", "tilings": 8, "hash_size": 4}, ("hash_size",), "0 or at least tilings"),
        ("tiles", (), "expected a mapping"),
    ],
)
def test_bad_declarations_name_the_key(value, where, message):
    with pytest.raises(FeatureSpecError) as caught:
        resolve_features(value)
    assert caught.value.subpath == where and message in str(caught.value)


def test_too_many_features_are_refused_with_a_hint():
    spec = resolve_features({"kind": "tiles", "tilings": 8, "tiles": 20, "hash_size": 0})
    with pytest.raises(EnvironmentSourceError, match="hash_size"):
        build_feature_map(spec, np.zeros(6), np.ones(6))
