"""Call any compiled environment's kernels by id from compiled code, resolved when the caller compiles.

`env_reset(env_id, ...)`, `env_step(env_id, ...)` and `env_observation(env_id, ...)` take the id as a
compile-time literal (call them as `env_step(literally(env_id), ...)`) and compile to a direct call of that
environment's kernel, as `runner.compiled_trial` resolves agent kinds: a loop over agents x environments needs no
switch, and numba's disk cache keys on the id string, not on the kernels' identities.
"""

from __future__ import annotations

from numba import types
from numba.extending import overload

from runner.envs.dynamics import dynamics_kernels

__all__ = ["env_observation", "env_reset", "env_step"]


def env_reset(env_id, state, params, stream):
    """The reset kernel of `env_id` (a compile-time literal); callable only from compiled code."""
    raise NotImplementedError("env_reset is resolved inside compiled code")


def env_step(env_id, state, action, params, out_state):
    """The step kernel of `env_id` (a compile-time literal); callable only from compiled code."""
    raise NotImplementedError("env_step is resolved inside compiled code")


def env_observation(env_id, state, params, out_obs):
    """The observation kernel of `env_id` (a compile-time literal); callable only from compiled code."""
    raise NotImplementedError("env_observation is resolved inside compiled code")


@overload(env_reset, inline="always")
def _env_reset(env_id, state, params, stream):
    if not isinstance(env_id, types.StringLiteral):
        return None
    kernel = dynamics_kernels(env_id.literal_value)[0]

    def impl(env_id, state, params, stream):
        kernel(state, params, stream)

    return impl


@overload(env_step, inline="always")
def _env_step(env_id, state, action, params, out_state):
    if not isinstance(env_id, types.StringLiteral):
        return None
    kernel = dynamics_kernels(env_id.literal_value)[1]

    def impl(env_id, state, action, params, out_state):
        return kernel(state, action, params, out_state)

    return impl


@overload(env_observation, inline="always")
def _env_observation(env_id, state, params, out_obs):
    if not isinstance(env_id, types.StringLiteral):
        return None
    kernel = dynamics_kernels(env_id.literal_value)[2]

    def impl(env_id, state, params, out_obs):
        kernel(state, params, out_obs)

    return impl
