"""Held-out model errors of a compiled function model on box observations, in compiled code.

The compiled loop on compiled dynamics with box observations (`runner.compiled_box_trial`) calls
`function_model_errors` at each evaluation point on the trial's held-out transitions, passed in as arrays
(`runner.models.held_out_bins.held_out_arrays`: the same runs `runner.models.held_out.collect_held_out` records for
the step-by-step path). It computes what `runner.models.held_out.model_errors` computes from the agent's `predict`
(root mean square over transitions and varying dimensions, each divided by its spread; mean absolute reward
error; open-loop errors after `ROLLOUT_STEPS` of the model's own predictions), through the kind's
`function_predict_kernel` (`runner.models.function_prediction`); `tests/test_function_model_error.py` checks
both give the same numbers.
"""

import numpy as np
from numba import literally, njit

from runner.compiled_trial import agent_function_predict
from runner.models.held_out_bins import error_sums, held_out_errors, score_one_step, score_open_loop

__all__ = ["function_model_errors"]


@njit(cache=True)
def function_model_errors(kind, arrays, held):
    """(one-step error, mean absolute reward error, open-loop errors after 5 and 20 steps) of agent kind `kind`'s
    function model over the held-out arrays (see `runner.models.held_out`); NaN when there are no runs."""
    starts, actions, observations, rewards, lengths, spread = held
    dim = starts.shape[1]
    predicted = np.zeros(dim)
    imagined = np.zeros(dim)
    following = np.zeros(dim)
    sums = error_sums()
    for i in range(starts.shape[0]):
        imagined[:] = starts[i]
        for t in range(lengths[i]):
            before = starts[i] if t == 0 else observations[i, t - 1]
            reward = agent_function_predict(literally(kind), arrays, before, actions[i, t], predicted)
            score_one_step(sums, predicted, observations[i, t], reward, rewards[i, t], spread)
            agent_function_predict(literally(kind), arrays, imagined, actions[i, t], following)
            imagined[:] = following
            score_open_loop(sums, t, imagined, observations[i, t], spread)
    return held_out_errors(sums, spread)
