"""Figures of a calibration for the briefing: posterior densities and the posterior predictive check.

Drawn on matplotlib's Agg canvas directly (no pyplot, no global backend
switch), so they can be made in any process, with or without a display.
"""

from __future__ import annotations

import textwrap
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

from ..atomic import write_atomically
from .abc.weighted import weighted_quantile

if TYPE_CHECKING:
    from .run import CalibrationResult


def posterior_figure(result: "CalibrationResult") -> Figure:
    """One panel per unknown (posterior histogram, prior density, credible interval) and per latent quantity."""
    post = result.posterior
    panels = [(n, post.theta[:, j], result.priors.priors[j]) for j, n in enumerate(post.names)]
    panels += [(n, post.latent[:, j], None) for j, n in enumerate(post.latent_names)]
    cols = min(3, len(panels))
    rows = -(-len(panels) // cols)
    fig = Figure(figsize=(4.2 * cols, 3.2 * rows), layout="constrained")
    lo, hi = (1 - post.level) / 2, 1 - (1 - post.level) / 2
    for k, (name, values, prior) in enumerate(panels):
        ax = fig.add_subplot(rows, cols, k + 1)
        ax.hist(values, bins=30, weights=post.weights, density=True, color="#4c72b0", alpha=0.7, label="posterior")
        low, high = weighted_quantile(values, post.weights, [lo, hi])
        ax.axvspan(low, high, color="#4c72b0", alpha=0.12, label=f"{post.level:.0%} interval")
        if prior is not None:
            grid = np.linspace(*_range(values, prior.support()), 200)
            ax.plot(grid, prior.pdf(grid), color="#dd8452", label="prior")
        ax.set_title(textwrap.fill(_words(name) if prior is not None else f"{_words(name)} (truth of matching runs)",
                                   45), fontsize=9)
        ax.set_ylabel("density", fontsize=8)
        ax.tick_params(labelsize=8)
    handles, labels = fig.axes[0].get_legend_handles_labels()
    fig.legend(handles, labels, fontsize=7, loc="outside lower center", ncol=3, frameon=False)
    fig.suptitle(textwrap.fill(f"{result.name}: posterior (model estimates, not counts)", 40 * cols), fontsize=10)
    return fig


def _words(name: str) -> str:
    """A parameter path or latent name as words: "adversary.arrivals_per_day" -> "arrivals per day (adversary)"."""
    *where, last = name.split(".")
    text = last.replace("_", " ")
    return f"{text} ({'.'.join(where).replace('_', ' ')})" if where else text


def _range(values: np.ndarray, support: tuple[float, float]) -> tuple[float, float]:
    """The plotted range: the sample's spread padded, cut to the prior's support."""
    low, high = float(np.min(values)), float(np.max(values))
    pad = 0.25 * (high - low) or 0.1 * max(abs(low), 1.0)
    return max(low - pad, support[0]), min(high + pad, support[1])


def predictive_figure(result: "CalibrationResult") -> Figure:
    """Each summary's predictive interval and mean against the observed value, in units of the distance's scale."""
    check = result.predictive
    assert check is not None
    table = check.to_frame()
    scale = result.posterior.final.scale
    y = np.arange(len(table))[::-1]
    fig = Figure(figsize=(7.0, 0.28 * len(table) + 1.6), layout="constrained")
    ax = fig.add_subplot(1, 1, 1)
    low = (table["low"] - table["observed"]) / scale
    high = (table["high"] - table["observed"]) / scale
    mean = (table["predictive_mean"] - table["observed"]) / scale
    colours = np.where(table["inside"], "#4c72b0", "#c44e52")
    ax.hlines(y, low, high, colors=colours, linewidth=3, alpha=0.6, label=f"{check.level:.0%} predictive interval")
    ax.plot(mean, y, "o", color="#333333", markersize=3, label="predictive mean")
    ax.axvline(0.0, color="#dd8452", linewidth=1, label="observed")
    ax.set_yticks(y, table["summary"], fontsize=7)
    ax.set_xlabel("How far the simulated records lie from the agency's (in units of each summary's spread)",
                  fontsize=8)
    # Outside the axes, so the legend never hides an interval (the figure's constrained layout makes room).
    fig.legend(*ax.get_legend_handles_labels(), fontsize=7, loc="outside lower center", ncol=3, frameon=False)
    ax.set_title(textwrap.fill(f"{result.name}: posterior predictive check", 70), fontsize=9)
    return fig


def write_figures(result: "CalibrationResult", folder: str | Path) -> list[Path]:
    """Write ``posterior.png`` and (with predictive runs) ``predictive_check.png``; return the paths."""
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    figures = [("posterior.png", posterior_figure(result))]
    if result.predictive is not None:
        figures.append(("predictive_check.png", predictive_figure(result)))
    paths = []
    for name, fig in figures:
        FigureCanvasAgg(fig)
        paths.append(write_atomically(folder / name, lambda tmp: fig.savefig(tmp, dpi=110, format="png")))
    return paths
