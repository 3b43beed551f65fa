"""Features for the linear agents: declarations checked like parameters, and compiled kernels shared by all."""

from runner.features.kernels import feature_values
from runner.features.spec import (
    DEFAULT_FEATURES,
    FEATURES_PARAM,
    FeatureSpecError,
    build_feature_map,
    resolve_features,
)

__all__ = [
    "DEFAULT_FEATURES",
    "FEATURES_PARAM",
    "FeatureSpecError",
    "build_feature_map",
    "feature_values",
    "resolve_features",
]
