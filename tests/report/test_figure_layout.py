"""Figure layout: labels of near markers on the frontier chart never print over one another."""

from __future__ import annotations

from matplotlib.figure import Figure
from matplotlib.text import Text

from abm.report.figures import SeriesPoint, _stack_labels, frontier_figure


def test_labels_of_markers_at_one_place_are_stacked_apart() -> None:
    fig = Figure(figsize=(8, 4.8), layout="constrained")
    ax = fig.add_subplot()
    ax.plot([114, 118.5], [46.2, 49.8], "o")
    labels = [ax.annotate(name, (114.0, 46.2 + 0.01 * k), xytext=(5, 4), textcoords="offset points", fontsize=7.5,
                          arrowprops={"arrowstyle": "-"})
              for k, name in enumerate(("Current roster", "Marshalling-yard patrols", "A third policy"))]
    labels.append(ax.annotate("Double probing", (118.5, 49.8), xytext=(5, 4), textcoords="offset points"))
    _stack_labels(fig, ax, labels)
    renderer = fig.canvas.get_renderer()
    boxes = [Text.get_window_extent(label, renderer) for label in labels]
    assert not any(a.overlaps(b) for i, a in enumerate(boxes) for b in boxes[i + 1:])
    assert max(b.y1 for b in boxes) <= ax.get_window_extent(renderer).y1 + 1  # kept inside the axes
    assert labels[-1].xyann == (5, 4)  # a label with room stays where it was


def test_the_frontier_figure_draws_with_coinciding_policies() -> None:
    same = ((114.0, 111.7, 116.3), (46.2, 34.3, 62.2))
    points = [SeriesPoint(name, *same, on_frontier=True, within=True) for name in ("Current", "Patrols", "Both")]
    block = frontier_figure({"all runs": points}, {"all runs": 125.4}, 28, 5)
    assert block.png.startswith(b"\x89PNG")
