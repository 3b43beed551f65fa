"""Feature declarations: the `features` parameter of the linear agent kinds, checked like any parameter, and
the compiled feature map built from it for an environment's observation bounds.

In an experiment file: `params: {features: {kind: tiles, tilings: 8, tiles: 8}}`. Keys by kind:

- `tiles` (tile coding, Sutton & Barto 2018 section 9.5.4): `tilings`, `tiles` per dimension and tiling,
  `hash_size` (tiles are hashed into that many features when the tilings hold more; 0: never hash);
- `rbf` (radial basis functions, section 9.5.5): `centres` per dimension on a grid over [0, 1], `width` (the
  standard deviation, in the scaled units);
- `fourier` (the Fourier basis, Konidaris, Osentoski & Thomas 2011): `order` (every coefficient vector in
  {0..order}**dims);
- `raw`: the observation itself plus a bias of 1.

`low` and `high` (lists, one number per observation dimension) set the range scaled to [0, 1] (values outside are
clipped); by default the observation space's bounds, with unbounded sides at -+`UNBOUNDED_CLIP`.
"""

from __future__ import annotations

import itertools
import math
from typing import Any

import numpy as np

from runner.errors import EnvironmentSourceError
from runner.features.kernels import KIND_CODES, tile_shifts
from runner.params import Param, check_value

__all__ = [
    "DEFAULT_FEATURES",
    "FEATURES_PARAM",
    "MAX_FEATURES",
    "UNBOUNDED_CLIP",
    "FeatureSpecError",
    "build_feature_map",
    "resolve_features",
]

UNBOUNDED_CLIP = 5.0
"""Where an unbounded observation side is clipped when `low`/`high` are not given (our default; say `low` and
`high` for your environment's real ranges)."""
MAX_FEATURES = 1 << 22
"""Most features per action (weights are n_actions x n_features floats): beyond it, hash the tiles."""

_KEYS: dict[str, tuple[Param, ...]] = {
    "tiles": (
        Param("tilings", "int", 8, "offset tilings", low=1, high=64),
        Param("tiles", "int", 8, "tiles per dimension in each tiling", low=1, high=1000),
        Param(
            "hash_size",
            "int",
            65536,
            "features the tiles are hashed into when the tilings hold more (0: never hash)",
            low=0,
            high=MAX_FEATURES,
        ),
    ),
    "rbf": (
        Param("centres", "int", 5, "centres per dimension, evenly spaced over [0, 1]", low=1, high=100),
        Param("width", "float", 0.2, "standard deviation of each bump, in scaled units", low=0.0, low_open=True),
    ),
    "fourier": (Param("order", "int", 3, "largest coefficient of the basis per dimension", low=0, high=20),),
    "raw": (),
}
DEFAULT_FEATURES = {"kind": "tiles", "tilings": 8, "tiles": 8, "hash_size": 65536, "low": None, "high": None}


class FeatureSpecError(ValueError):
    """A feature declaration is wrong; `subpath` is the key path inside it (for file:line:key-path messages)."""

    def __init__(self, subpath: tuple[Any, ...], message: str) -> None:
        super().__init__(f"{'.'.join(map(str, subpath))}: {message}" if subpath else message)
        self.subpath = subpath
        self.bare = message


def _bound(value: Any, name: str) -> list[float] | None:
    if value is None:
        return None
    if not isinstance(value, list) or not value:
        raise FeatureSpecError((name,), f"expected a list of numbers (one per observation dimension), got {value!r}")
    out = []
    for i, item in enumerate(value):
        if isinstance(item, bool) or not isinstance(item, (int, float)) or not math.isfinite(item):
            raise FeatureSpecError((name, i), f"expected a finite number, got {item!r}")
        out.append(float(item))
    return out


def resolve_features(value: Any) -> dict[str, Any]:
    """The canonical feature declaration (every key of its kind, defaults filled); FeatureSpecError if wrong."""
    if not isinstance(value, dict):
        raise FeatureSpecError((), f"expected a mapping such as {{kind: tiles, tilings: 8, tiles: 8}}, got {value!r}")
    kind = value.get("kind")
    if kind not in _KEYS:
        raise FeatureSpecError(("kind",), f"expected one of {', '.join(map(repr, _KEYS))}, got {kind!r}")
    schema = _KEYS[kind]
    known = ("kind", *(p.name for p in schema), "low", "high")
    for key in value:
        if key not in known:
            raise FeatureSpecError((key,), f"unknown key of {kind} features; expected one of {', '.join(known)}")
    out: dict[str, Any] = {"kind": kind}
    for p in schema:
        try:
            out[p.name] = check_value(p, value.get(p.name, p.default))
        except ValueError as err:
            raise FeatureSpecError((p.name,), str(err)) from None
    if kind == "tiles" and 0 < out["hash_size"] < out["tilings"]:
        raise FeatureSpecError(
            ("hash_size",), f"expected 0 or at least tilings ({out['tilings']}), got {out['hash_size']}"
        )
    low, high = _bound(value.get("low"), "low"), _bound(value.get("high"), "high")
    if low is not None and high is not None:
        if len(low) != len(high):
            raise FeatureSpecError(("high",), f"expected as many numbers as low ({len(low)}), got {len(high)}")
        bad = [i for i, (a, b) in enumerate(zip(low, high, strict=True)) if not a < b]
        if bad:
            raise FeatureSpecError(("high", bad[0]), f"expected a number above low's {low[bad[0]]}, got {high[bad[0]]}")
    out["low"], out["high"] = low, high
    return out


FEATURES_PARAM = Param(
    "features",
    "mapping",
    DEFAULT_FEATURES,
    "what the linear values see: tiles, rbf, fourier or raw, with their keys (runner/features/spec.py)",
    check=resolve_features,
)


def _bounds(spec: dict[str, Any], low: np.ndarray, high: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    dims = low.size
    out = []
    for name, given, space, sign in (("low", spec["low"], low, -1.0), ("high", spec["high"], high, 1.0)):
        if given is not None and len(given) != dims:
            raise EnvironmentSourceError(
                f"features.{name}: expected {dims} numbers (the observation has {dims} dimensions), got {len(given)}"
            )
        fallback = np.where(np.isfinite(space), space, sign * UNBOUNDED_CLIP)
        out.append(np.asarray(given, dtype=np.float64) if given is not None else fallback.astype(np.float64))
    if not np.all(out[0] < out[1]):
        raise EnvironmentSourceError(f"features: expected low < high in every dimension, got {out[0]} and {out[1]}")
    return out[0], out[1]


def build_feature_map(spec: dict[str, Any], low: np.ndarray, high: np.ndarray) -> tuple[np.ndarray, ...]:
    """The compiled feature map (see `runner.features.kernels`) of a canonical declaration for observations
    bounded by the space's `low` and `high` (finite or not). EnvironmentSourceError when they do not fit."""
    lo, hi = _bounds(spec, np.asarray(low, dtype=np.float64), np.asarray(high, dtype=np.float64))
    dims = lo.size
    kind = spec["kind"]
    tilings = tiles = hash_size = 0
    width = 0.0
    table = np.zeros((0, dims))
    if kind == "tiles":
        tilings, tiles = spec["tilings"], spec["tiles"]
        full = tilings * (tiles + 1) ** dims
        hash_size = spec["hash_size"] if full > spec["hash_size"] > 0 else 0
        n_features, n_active = (hash_size or full), tilings
        table = tile_shifts(tilings, dims)
    elif kind == "raw":
        n_features = n_active = dims + 1
    else:
        per = spec["order"] + 1 if kind == "fourier" else spec["centres"]
        n_features = n_active = per**dims
        if kind == "fourier":
            grid = [float(c) for c in range(per)]
        else:
            grid = [0.5] if per == 1 else [i / (per - 1) for i in range(per)]
            width = spec["width"]
        if n_features <= MAX_FEATURES:
            table = np.array(list(itertools.product(grid, repeat=dims)), dtype=np.float64).reshape(-1, dims)
    if n_features > MAX_FEATURES:
        raise EnvironmentSourceError(
            f"features: {kind} on {dims} observation dimensions make {n_features:,} features per action, more than "
            f"{MAX_FEATURES:,}; use fewer tiles/centres/order, or a hash_size"
        )
    ints = np.array([KIND_CODES[kind], dims, tilings, tiles, hash_size, n_features, n_active], dtype=np.int64)
    return ints, np.array([width]), lo, hi, table
