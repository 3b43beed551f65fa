"""Experiment texts shared by several test modules."""

EXAMPLE_EXPERIMENT = """\
experiment: smoke
seeds: 2
real_steps: 3000
evaluation: {every: 500, episodes: 5}
environments:
  - label: maze
    grid:
      map: |
        .......XG
        ..#....#.
        S.#..~.#.
      slip: 0.2
    step_limit: 200
  - gym: FrozenLake-v1
agents:
  - {label: q, kind: q_learning}
  - {label: dyna, kind: dyna_q, params: {planning_steps: [0, 5, 50]}}
  - {label: ce, kind: certainty_equivalence}
baseline: q
"""

HALL_Q = "  - {label: q, kind: q_learning}\n"
HALL_DYNA = "  - {label: dyna, kind: dyna_q, params: {planning_steps: 5}}\n"


def hall_experiment(name: str, seeds: int, steps: int = 400, every: int = 100, agents: str = HALL_Q + HALL_DYNA) -> str:
    """A tiny slippery hall (trials of a few milliseconds) for tests of running, resuming, locking and re-running."""
    return f"""\
experiment: {name}
seeds: {seeds}
real_steps: {steps}
evaluation: {{every: {every}, episodes: 2}}
environments:
  - label: hall
    grid:
      map: |
        S.~.
        .#.G
      slip: 0.2
    step_limit: 40
agents:
{agents}baseline: q
"""


def room_experiment(name: str, seeds: int, steps: int, every: int) -> str:
    """A small room with a wall (trials of a fraction of a second on the step-by-step path): 4 agent variants per
    seed, for tests that need a run to last a while (being killed, a cluster losing a worker)."""
    return f"""\
experiment: {name}
seeds: {seeds}
real_steps: {steps}
evaluation: {{every: {every}, episodes: 3}}
environments:
  - label: room
    grid:
      map: |
        S...#...
        .~..#.~.
        ....#...
        ........
        ..~....G
      slip: 0.1
    step_limit: 100
agents:
  - {{label: q, kind: q_learning}}
  - {{label: dyna, kind: dyna_q, params: {{planning_steps: [2, 10]}}}}
  - {{label: ce, kind: certainty_equivalence}}
baseline: q
"""
