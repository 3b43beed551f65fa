"""The compiled prediction of a learned function model, as the compiled loops measure it on held-out transitions.

A compiled kind with a function model on box observations gives `function_predict_kernel(arrays, observation,
action, out) -> reward`: it writes the predicted next observation into `out` and returns the predicted reward,
the same numbers as its Python `predict` (which should call it). `runner.models.held_out_function` measures it;
kinds without a function model keep `no_function_prediction`.
"""

import numpy as np
from numba import njit

__all__ = ["no_function_prediction"]


@njit(cache=True)
def no_function_prediction(arrays, observation, action, out):
    """For kinds without a learned function model: no prediction (NaN)."""
    out[:] = np.nan
    return np.nan
