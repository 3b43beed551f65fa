"""Parameters shared by several agent kinds, declared once."""

from runner.params import Param

__all__ = ["ALPHA", "EPSILON", "GAMMA", "INITIAL_Q", "model_free_counter_problems", "replay_counter_problems"]

ALPHA = Param("alpha", "float", 0.1, "step size of each value update", low=0.0, high=1.0, low_open=True)
GAMMA = Param("gamma", "float", 0.95, "discount factor", low=0.0, high=1.0)
EPSILON = Param("epsilon", "float", 0.1, "probability of a uniform random action when acting", low=0.0, high=1.0)
INITIAL_Q = Param("initial_q", "float", 0.0, "starting value of every Q-table entry")


def model_free_counter_problems(counters: dict[str, int], real_steps: int) -> list[str]:
    """The accounting of an agent that learns from real transitions only: one update per real step, nothing else."""
    problems = []
    if counters["real_updates"] != real_steps:
        problems.append(f"real_updates {counters['real_updates']} != real steps {real_steps}")
    if counters["planning_updates"] or counters["model_updates"]:
        problems.append(f"a model-free agent counted planning or model updates: {counters}")
    return problems


def replay_counter_problems(counters: dict[str, int], real_steps: int, replays: int) -> list[str]:
    """The accounting of an agent that replays stored real transitions: one update per real step, `replays`
    replayed updates per real step (counted as planning), and no model."""
    problems = []
    if counters["real_updates"] != real_steps:
        problems.append(f"real_updates {counters['real_updates']} != real steps {real_steps}")
    if counters["planning_updates"] != replays * real_steps:
        problems.append(f"planning_updates {counters['planning_updates']} != replays x real steps")
    if counters["model_updates"]:
        problems.append("a replay buffer is not a model; model_updates should stay 0")
    return problems
