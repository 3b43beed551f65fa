"""Long sweeps stay cheap: comparisons grow linearly with the variants, and figures draw a bounded number."""

from itertools import combinations, pairwise

import numpy as np
import pandas as pd

from runner.analysis.compare import ALL_PAIRS_UP_TO, NEAREST_RIVALS, comparison_pairs, pairwise_welch
from runner.analysis.report import FIGURE_AGENTS, ExperimentFacts, write_report


def test_a_few_variants_compare_every_pair():
    means = {f"a{i}": float(i) for i in range(ALL_PAIRS_UP_TO)}
    assert comparison_pairs(means, "a0") == list(combinations(means, 2))


def test_many_variants_compare_with_the_baseline_and_nearest_rivals_only():
    rng = np.random.default_rng(3)
    agents = [f"v{i}" for i in range(1000)]
    means = dict(zip(agents, rng.normal(size=1000), strict=True))
    pairs = comparison_pairs(means, "v500")
    assert len(pairs) == len(set(pairs)) <= 1000 * (NEAREST_RIVALS + 1)
    position = {agent: i for i, agent in enumerate(agents)}
    assert all(position[a] < position[b] for a, b in pairs)
    as_sets = {frozenset(pair) for pair in pairs}
    assert all(frozenset((agent, "v500")) in as_sets for agent in agents if agent != "v500")
    ranked = sorted(agents, key=lambda agent: -means[agent])
    for upper, lower in pairwise(ranked):  # each variant meets the one ranked just below
        assert frozenset((upper, lower)) in as_sets
    without_baseline = comparison_pairs(means, None)
    assert len(without_baseline) == 1000 * NEAREST_RIVALS - NEAREST_RIVALS * (NEAREST_RIVALS + 1) // 2


def test_pairwise_table_follows_the_chosen_pairs():
    rng = np.random.default_rng(0)
    rows = [
        {"env": "e", "agent": f"v{i}", "auc": float(value)}
        for i in range(30)
        for value in rng.normal(loc=i / 30, scale=0.1, size=4)
    ]
    scores = pd.DataFrame(rows)
    order = [f"v{i}" for i in range(30)]
    table = pairwise_welch(scores, "e", order, n_resamples=200, baseline="v0")
    means = scores.groupby("agent")["auc"].mean().reindex(order).to_dict()
    assert list(zip(table["agent_a"], table["agent_b"], strict=True)) == comparison_pairs(means, "v0")
    assert table["p_holm"].between(0, 1).all()


def test_figures_of_a_long_sweep_draw_the_baseline_and_the_best(tmp_path):
    rng = np.random.default_rng(1)
    agents = [f"sweep (alpha={i})" for i in range(FIGURE_AGENTS + 8)]
    steps = np.array([0, 50, 100])
    rows = []
    for rank, agent in enumerate(agents):
        for seed in range(3):
            for point, step in enumerate(steps):
                rows.append(
                    {
                        "env": "hall",
                        "agent": agent,
                        "kind": "q_learning",
                        "trial_id": f"{rank}-{seed}",
                        "seed": seed,
                        "point": point,
                        "real_steps": int(step),
                        "episodes": point,
                        "eval_return": rank / 20 * step / 100 + rng.normal(scale=0.01),
                        "train_return": 0.0,
                        "real_updates": int(step),
                        "planning_updates": 0,
                        "model_updates": 0,
                        "wall_seconds": 0.001 * point,
                    }
                )
    facts = ExperimentFacts(
        name="sweep",
        budget=100,
        baseline=agents[0],
        thresholds={"hall": None},
        env_order=["hall"],
        agent_order=agents,
        n_resamples=200,
    )
    write_report(pd.DataFrame(rows), facts, tmp_path)
    svg = next(tmp_path.glob("curves_*.svg")).read_text(encoding="utf-8")
    assert f"{FIGURE_AGENTS} of {len(agents)} variants: baseline and best AUC" in svg
    assert agents[0] in svg and agents[-1] in svg  # the baseline and the best
    assert agents[1] not in svg  # second worst: left out of the figure
    assert len(pd.read_csv(tmp_path / "summary.csv")) == len(agents)  # tables keep every variant
    advice = pd.read_csv(tmp_path / "seeds_advice.csv")
    assert set(advice["agent_b"]) | set(advice["agent_a"]) <= set(agents[:1] + agents[-(FIGURE_AGENTS - 1) :])
