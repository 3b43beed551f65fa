"""Neural-network agents and learned models in JAX (the optional `neural` extra: `pip install "stepmeter[neural]"`).

Modules here import JAX at their top; the rest of stepmeter imports them only when an experiment names a neural
kind, so tabular and linear experiments run without JAX installed.
"""
