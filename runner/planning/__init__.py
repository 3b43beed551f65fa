"""Planning on tabular models: value iteration over successor lists."""

from runner.planning.value_iteration import solve_dense_mdp, sweep_until_converged

__all__ = ["solve_dense_mdp", "sweep_until_converged"]
