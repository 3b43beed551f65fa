"""Legends sit beside the panels: with 10 variants no legend covers any part of a panel's data area."""

import numpy as np
import pandas as pd
import pytest
from matplotlib.backends.backend_agg import FigureCanvasAgg

from runner.analysis import plots

AGENTS = [f"dyna n={n}" for n in (0, 1, 2, 5, 10, 20, 50, 100, 200, 500)]


def _bands(agents):
    steps = np.arange(0, 10_001, 500)
    rows = []
    for i, agent in enumerate(agents):
        mean = 1.0 - np.exp(-steps / (800.0 * (i + 1)))
        rows.append(
            pd.DataFrame(
                {
                    "env": "floor",
                    "agent": agent,
                    "real_steps": steps,
                    "mean": mean,
                    "low": mean - 0.05,
                    "high": mean + 0.05,
                }
            )
        )
    return pd.concat(rows, ignore_index=True)


@pytest.fixture
def captured(monkeypatch):
    figures = []

    def keep(figure, out_dir, stem):
        figures.append(figure)
        return []

    monkeypatch.setattr(plots, "_save_both", keep)
    return figures


def _overlaps(figure):
    """(axes index, overlap area in pixels) for every legend that covers part of any axes of the figure."""
    FigureCanvasAgg(figure).draw()
    renderer = figure.canvas.get_renderer()
    found = []
    for axes in figure.axes:
        legend = axes.get_legend()
        if legend is None:
            continue
        box = legend.get_window_extent(renderer)
        for k, other in enumerate(figure.axes):
            panel = other.get_window_extent(renderer)
            width = min(box.x1, panel.x1) - max(box.x0, panel.x0)
            height = min(box.y1, panel.y1) - max(box.y0, panel.y0)
            if width > 0 and height > 0:
                found.append((k, width * height))
    return found


def test_curve_legend_with_ten_variants_covers_no_data(captured, tmp_path):
    plots.plot_curves(_bands(AGENTS), "floor", agent_order=AGENTS, threshold=0.9, out_dir=tmp_path, title="10 variants")
    (figure,) = captured
    assert figure.axes[0].get_legend() is not None
    assert len(figure.axes[0].get_legend().get_texts()) == 11  # ten variants and the threshold line
    assert _overlaps(figure) == []


def test_model_error_panels_keep_their_legends_outside_both_panels(captured, tmp_path):
    bands = _bands(AGENTS)
    errors = bands.assign(
        mean=lambda b: 1.0 - b["mean"], low=lambda b: 0.95 - b["mean"], high=lambda b: 1.05 - b["mean"]
    )
    held_out = pd.concat([errors.assign(steps_ahead=k) for k in (1, 5, 20)], ignore_index=True)
    plots.plot_model_error(
        bands, errors, "floor", agents=AGENTS, threshold=0.9, out_dir=tmp_path, title="models", held_out=held_out
    )
    (figure,) = captured
    assert len(figure.axes) == 5  # return, distance to the true table, held-out errors 1, 5 and 20 steps ahead
    assert [axes.get_legend() is not None for axes in figure.axes] == [False] * 4 + [True]
    assert len(figure.axes[-1].get_legend().get_texts()) == 11  # ten variants and the threshold line
    assert _overlaps(figure) == []
