"""Neural-network agents and learned models in JAX (the optional `neural` extra: `pip install "stepmeter[neural]"`).

Modules here import JAX at their top; the rest of stepmeter imports them only when an experiment names a neural
kind, so tabular and linear experiments run without JAX installed.
"""

JAX_DYNAMICS_IDS = (
    "CartPole-v1",
    "MountainCar-v0",
    "Acrobot-v1",
    "Pendulum-v1",
    "stepmeter/OverheadCrane-v0",
    "stepmeter/OverheadCraneContinuous-v0",
)
"""Environment ids with dynamics in jax.numpy (`runner.neural.dynamics`): neural kinds run whole trials compiled on
them (with box actions on Pendulum-v1 and the continuous crane); on any other environment they run step by step
through gymnasium."""
