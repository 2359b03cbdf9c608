"""The result of a policy search: the best policy, the finalists, the frontier, in words and as a figure."""

from __future__ import annotations

import math
import textwrap
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from ...experiment.compare import MIN_REPLICATIONS
from ...world.words import GENERIC, Words
from ..frontier import BENEFIT, DELAY, frontier
from .problem import FIGURE_SOURCES, REPORTED, Constraint, Problem

CAUTION = (
    "Model estimates, not counts: the search compares policies inside this model, with its invented numbers. "
    "A policy that displaces attempts can push people toward more dangerous boarding; defer to law, "
    "safeguarding duties and the agencies' own practice."
)


@dataclass(frozen=True, eq=False)
class PolicySearchResult:
    """The best policy, its figures on fresh seeds, the runner-ups and the detections/delay frontier."""

    name: str
    problem: Problem
    best: str  # the incumbent's candidate name
    best_changes: dict[str, Any]
    selection: pd.DataFrame  # one row per finalist: fresh means, intervals, constraint status, comparison
    history: pd.DataFrame  # every candidate the search simulated (means over the search's seeds)
    frontier: pd.DataFrame  # the non-dominated candidates on detections (more) and delay (less)
    search: dict[str, Any]  # what differential evolution reported, and the runs it took
    level: float = 0.95

    def to_frame(self) -> pd.DataFrame:
        """The finalists, best first."""
        return self.selection

    def summary(self) -> str:
        """The result in words, for a briefing."""
        p = self.problem
        sel = self.selection
        best = sel[sel["candidate"] == self.best].iloc[0]
        reps = int(best["replications"])
        lines = [
            f"Policy search: {self.name}",
            f"Objective: {p.sense} {p.objective} ({FIGURE_SOURCES.get(p.objective, '')}); constraints: "
            + (", ".join(c.describe() for c in p.constraints) or "none")
            + ".",
            f"Search: differential evolution, {self.search['candidates']} candidates x {self.search['replications']} "
            f"common-random-number replications ({self.search['nit']} generations; {self.search['message']}).",
            f"Selection: {len(sel)} finalists x {reps} fresh common seeds; two-sided paired t-tests against the "
            f"incumbent, Bonferroni-adjusted, alpha {self.search['alpha']}.",
            "",
            f"Best policy ({self.best}):",
        ]
        for path, value in self.best_changes.items():
            lines.append(f"  {path} = {_shown(value)}")
        if not self.best_changes:
            lines.append("  the world as it stands (no changes)")
        lines.append(f"  on fresh seeds ({self.level:.0%} intervals over {reps} replications; log scale for counts "
                     "and times, logit scale for shares):")
        if reps < MIN_REPLICATIONS:
            lines.append(f"  warning: only {reps} fresh replications: these intervals are unreliable; raise "
                         f"selection.replications to at least {MIN_REPLICATIONS}")
        for figure in dict.fromkeys([p.objective, *(c.figure for c in p.constraints), *REPORTED]):
            if f"{figure}_mean" in sel.columns:
                lines.append(
                    f"    {figure:<26} {_interval(best, figure)}  {FIGURE_SOURCES.get(figure, '')}"
                    + _status(best, figure, p.constraints)
                )
        others = sel[sel["candidate"] != self.best]
        if len(others):
            lines += ["", f"Runner-ups (candidate minus best in {p.objective}, per common seed; {self.level:.0%} interval):"]
            for _, row in others.iterrows():
                diff = f"{row['difference']:+.4g} [{row['difference_low']:+.4g}, {row['difference_high']:+.4g}]"
                lines.append(
                    f"  {row['candidate']:<18} {p.objective} {row[f'{p.objective}_mean']:>9.4g}  difference {diff:<28} "
                    f"{row['verdict']}"
                )
                lines.append(f"    settings: {_settings(row)}")
        lines += [
            "",
            f"Detections/delay frontier: {len(self.frontier)} of {len(self.history)} searched candidates are not "
            f"beaten on both {BENEFIT} and {DELAY}.",
            "",
            CAUTION,
        ]
        return "\n".join(lines)

    def frontier_figure(self, words: Words = GENERIC) -> Any:
        """Detections against delay for every searched candidate, the frontier joined, finalists marked.

        ``words`` are the crossing's own ("time in the terminal") for the axis.
        """
        from matplotlib.backends.backend_agg import FigureCanvasAgg
        from matplotlib.figure import Figure

        fig = Figure(figsize=(6.4, 4.4), layout="constrained")
        FigureCanvasAgg(fig)
        ax = fig.add_subplot(1, 1, 1)
        h = self.history
        ax.scatter(h[DELAY], h[BENEFIT], s=12, c=np.where(h["feasible"], "#4c72b0", "#bbbbbb"), label="searched")
        f = self.frontier.sort_values(DELAY)
        ax.plot(f[DELAY], f[BENEFIT], "-", color="#dd8452", label="frontier of the search (search seeds)")
        sel = self.selection
        fresh = sel.rename(columns={f"{DELAY}_mean": DELAY, f"{BENEFIT}_mean": BENEFIT})
        on = frontier(fresh)
        ax.plot(on[DELAY], on[BENEFIT], "--", color="#333333", linewidth=1, label="frontier of the finalists (fresh seeds)")
        ax.scatter(fresh[DELAY], fresh[BENEFIT], marker="x", color="#333333", label="finalists (fresh seeds)")
        best = fresh[fresh["candidate"] == self.best]
        ax.scatter(best[DELAY], best[BENEFIT], marker="*", s=140, color="#c44e52", label="best")
        ax.set_xlabel(words.fill("{Time_at_site}, 95th percentile (minutes; observed)"))
        ax.set_ylabel("Detections (persons; observed)")
        ax.set_title(textwrap.fill(f"{self.name}: detections against delay", 70), fontsize=9)
        fig.legend(*ax.get_legend_handles_labels(), fontsize=7, loc="outside lower center", ncol=2, frameon=False)
        if self.best not in set(on["candidate"]):
            why = (f"The best is chosen by {self.problem.sense} {self.problem.objective} within the constraints on "
                   "fresh seeds, not by detections against delay, so it need not lie on either frontier.")
            fig.suptitle(textwrap.fill(why, 90), fontsize=7, color="#444444")  # in the layout: never cut off
        return fig


def _settings(row: pd.Series) -> str:
    """A candidate's world changes as they read: "stations.gate_imaging.selection.fraction = 0.31; ..."."""
    parts = [f"{column[4:]} = {_shown(row[column])}" for column in row.index
             if column.startswith("set:") and not (isinstance(row[column], float) and math.isnan(row[column]))]
    return "; ".join(parts) or "the world as it stands (no changes)"


def _shown(value: Any) -> str:
    return f"{value:.4g}" if isinstance(value, float) else str(value)


def _interval(row: pd.Series, figure: str) -> str:
    mean, low, high = row[f"{figure}_mean"], row[f"{figure}_low"], row[f"{figure}_high"]
    if not math.isfinite(mean):
        return f"{'n/a':>28}"
    return f"{mean:>10.4g} [{low:.4g}, {high:.4g}]".ljust(28)


def _status(row: pd.Series, figure: str, constraints: Sequence[Constraint]) -> str:
    for c in constraints:
        if c.figure == figure:
            return f"  {c.describe()}: {row[f'status:{figure}']}"
    return ""
