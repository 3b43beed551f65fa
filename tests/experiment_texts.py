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
