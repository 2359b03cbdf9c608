"""Scenario discovery: where in the factor space does the outcome of interest happen?

PRIM, the patient rule induction method (Friedman & Fisher 1999, Statistics
and Computing 9:123-143), over a batch's summary table: the inputs are the
factor columns, the output marks the runs of interest (``crossings > T``:
binary) or measures them (continuous, non-negative). PRIM finds a box
``low <= x <= high`` on a few factors inside which the outcome is much more
common than over all runs; a box reads as a sentence a briefing can use
(:func:`boxes_summary`).

Peeling
    Starting from the box holding every run, each step tries to shave about
    ``alpha`` of the runs still in the box off one face (the low or the high
    end of one factor) and keeps the shave that leaves the highest mean of the
    output in the box. Peeling stops when no shave leaves at least
    ``min_mass`` of all runs in the box. Every step is recorded (the
    trajectory): ever smaller boxes of (usually) rising density.
Choosing
    From the trajectory, either the box of largest coverage whose density
    reaches ``min_density``, or the box maximising a coverage-density
    trade-off: the F-score ``(1 + beta^2) c d / (beta^2 d + c)`` of coverage
    c (as recall) and density d (as precision); ``beta = 1`` weighs them alike,
    ``beta < 1`` favours density. For a continuous output the score uses
    density divided by the largest output, so it lies in [0, 1] like a share.
Pasting
    The chosen box is then grown again: each step tries adding about ``alpha``
    of the box's runs back along one of its restricted faces and keeps the best addition while it
    raises the mean; it stops when no addition does.

Measures of a box, for an output y >= 0 over N runs:
    coverage = sum of y inside / sum of y over all runs  (binary: share of the runs of interest inside)
    density  = mean of y inside                          (binary: share of the runs inside that are of interest)
    mass     = runs inside / N

Factors must be numeric (booleans and whole numbers are fine); categorical
factors are not supported: code them as integers in a meaningful order, or as
one 0/1 column per category. A shave of a factor with ties removes whole values
(the smallest or largest value at once when shaving ``alpha`` would remove
nothing), which is how a whole-number factor with few levels gets restricted.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field, replace

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike

from ..errors import InputError

DEFAULT_ALPHA = 0.05  # Friedman & Fisher's usual peeling share is 0.05-0.10
DEFAULT_MIN_MASS = 0.05  # from memory, not checked against the paper (REFERENCES.md marks it [mem])
FACES = ("low", "high")


class DiscoveryInputError(InputError):
    """Inputs, outputs or settings scenario discovery cannot use."""


@dataclass(frozen=True)
class PrimBox:
    """A box ``low <= x <= high`` on each restricted factor; ``-inf`` / ``inf`` mark an open side.

    ``limits`` lists only the factors the box restricts, in the order of the inputs.
    """

    limits: tuple[tuple[str, float, float], ...]

    @property
    def restricted(self) -> tuple[str, ...]:
        """The factors the box restricts."""
        return tuple(name for name, _, _ in self.limits)

    def contains(self, inputs: pd.DataFrame) -> np.ndarray:
        """Which rows of ``inputs`` lie in the box (a boolean array)."""
        inside = np.ones(len(inputs), dtype=bool)
        for name, low, high in self.limits:
            values = inputs[name].to_numpy(dtype=float)
            inside &= (values >= low) & (values <= high)
        return inside

    def describe(self, labels: Mapping[str, str] | None = None, digits: int = 3) -> str:
        """The box as conditions, e.g. ``rationality ≥ 1.4 and imaging fraction ≤ 0.3``."""
        if not self.limits:
            return "any factor values"
        parts = []
        for name, low, high in self.limits:
            label = _label(name, labels)
            if math.isinf(high):
                parts.append(f"{label} ≥ {_number(low, digits)}")
            elif math.isinf(low):
                parts.append(f"{label} ≤ {_number(high, digits)}")
            else:
                parts.append(f"{_number(low, digits)} ≤ {label} ≤ {_number(high, digits)}")
        return parts[0] if len(parts) == 1 else ", ".join(parts[:-1]) + " and " + parts[-1]


def _label(name: str, labels: Mapping[str, str] | None) -> str:
    """A factor's label for sentences: the given one, else its column name with spaces for underscores."""
    return (labels or {}).get(name, name.replace("_", " "))


def _number(value: float, digits: int) -> str:
    """A bound for a sentence: whole numbers as such, others to ``digits`` significant figures."""
    return str(int(value)) if float(value).is_integer() else f"{value:.{digits}g}"


@dataclass(frozen=True, eq=False)
class PrimResult:
    """The box PRIM chose, its measures, and the trajectory it was chosen from.

    ``step`` is the trajectory row the box was chosen at; ``pasting`` lists the
    additions made to it afterwards (empty when none raised the mean).
    ``trajectory`` has a row per peeling step (0 is every run): ``peeled``
    (factor and face shaved), ``coverage``, ``density``, ``mass``, ``runs``,
    ``restricted`` (how many factors the box restricts), and the box's limits
    in columns ``low:<factor>`` and ``high:<factor>``.
    """

    outcome: str
    binary: bool
    factors: tuple[str, ...]
    box: PrimBox
    coverage: float
    density: float
    mass: float
    runs: int
    total_runs: int
    base_density: float
    step: int
    alpha: float
    min_mass: float
    trajectory: pd.DataFrame
    pasting: pd.DataFrame
    # Kept so select() can paste another trajectory box without the caller passing the data again.
    _x: np.ndarray = field(repr=False)
    _y: np.ndarray = field(repr=False)

    def box_at(self, step: int) -> PrimBox:
        """The peeled box at one trajectory step (before any pasting)."""
        if not 0 <= step < len(self.trajectory):
            raise DiscoveryInputError(f"step: expected 0..{len(self.trajectory) - 1}, got {step}")
        row = self.trajectory.iloc[step]
        lows = np.array([row[f"low:{f}"] for f in self.factors])
        highs = np.array([row[f"high:{f}"] for f in self.factors])
        return _box(self.factors, lows, highs)

    def select(
        self,
        *,
        min_density: float | None = None,
        beta: float = 1.0,
        step: int | None = None,
        paste: bool = True,
    ) -> PrimResult:
        """Choose another box from the same trajectory, then paste it (unless ``paste`` is False).

        ``step`` picks a trajectory row outright; otherwise ``min_density``, if
        given, picks the box of largest coverage reaching it; otherwise the
        F-score with weight ``beta`` (see the module docstring).
        """
        chosen = _choose(self.trajectory, self._y, min_density=min_density, beta=beta, step=step)
        row = self.trajectory.iloc[chosen]
        lows = np.array([row[f"low:{f}"] for f in self.factors], dtype=float)
        highs = np.array([row[f"high:{f}"] for f in self.factors], dtype=float)
        pasting = []
        if paste:
            lows, highs, pasting = _paste(self._x, self._y, lows, highs, self.alpha, self.factors)
        inside = _inside(self._x, lows, highs)
        coverage, density, mass = _measures(self._y, inside)
        return replace(
            self,
            box=_box(self.factors, lows, highs),
            coverage=coverage,
            density=density,
            mass=mass,
            runs=int(inside.sum()),
            step=chosen,
            pasting=pd.DataFrame.from_records(pasting, columns=["pasted", "coverage", "density", "mass", "runs"]),
        )

    def to_frame(self) -> pd.DataFrame:
        """One row per restricted factor: ``factor``, ``low``, ``high`` (``-inf`` / ``inf`` for an open side)."""
        return pd.DataFrame.from_records(self.box.limits, columns=["factor", "low", "high"])

    def summary(self) -> str:
        """The box, its measures, and where it sits on the trajectory."""
        share = "share of runs of interest" if self.binary else f"mean of {self.outcome}"
        lines = [
            f"PRIM box for {self.outcome} ({self.total_runs} runs; {share} over all runs {self.base_density:.3g}):",
            f"  where {self.box.describe()}",
            f"  density {self.density:.3g}, coverage {self.coverage:.1%}, mass {self.mass:.1%} ({self.runs} runs)",
            f"  chosen at peeling step {self.step} of {len(self.trajectory) - 1}"
            + (f", then {len(self.pasting)} pasting steps" if len(self.pasting) else ", no pasting raised the mean"),
            f"  alpha {self.alpha}, minimum mass {self.min_mass}",
        ]
        return "\n".join(lines)

    def sentence(self, labels: Mapping[str, str] | None = None, digits: int = 3) -> str:
        """The box as one briefing sentence (see :func:`boxes_summary`)."""
        if self.box.limits:
            where = f"where {self.box.describe(labels, digits)}"
        else:
            where = "over all runs (no factor restricts the box)"
        if self.binary:
            return (
                f"{self.outcome[:1].upper()}{self.outcome[1:]} in {self.density:.0%} of runs {where} "
                f"(against {self.base_density:.0%} over all runs); the box holds {self.coverage:.0%} of such runs "
                f"and {self.mass:.0%} of all runs."
            )
        return (
            f"The mean of {self.outcome} is {self.density:.3g} in runs {where} (against {self.base_density:.3g} "
            f"over all runs); the box holds {self.coverage:.0%} of the total and {self.mass:.0%} of all runs."
        )


def boxes_summary(
    results: PrimResult | Sequence[PrimResult],
    *,
    labels: Mapping[str, str] | None = None,
    digits: int = 3,
) -> list[str]:
    """One sentence per box, e.g. "Crossings exceed 40 in 82% of runs where rationality ≥ 1.4 and
    imaging fraction ≤ 0.3 (against 20% over all runs); the box holds 61% of such runs and 15% of all runs."

    ``labels`` maps column names to words (default: underscores become spaces);
    the outcome phrase is the ``outcome`` given to :func:`prim`.
    """
    if isinstance(results, PrimResult):
        results = [results]
    return [r.sentence(labels, digits) for r in results]


# -- the algorithm ----------------------------------------------------------------------------
def _inside(x: np.ndarray, lows: np.ndarray, highs: np.ndarray) -> np.ndarray:
    return np.all((x >= lows) & (x <= highs), axis=1)


def _measures(y: np.ndarray, inside: np.ndarray) -> tuple[float, float, float]:
    """Coverage, density and mass of the runs marked ``inside``."""
    return float(y[inside].sum() / y.sum()), float(y[inside].mean()), float(inside.mean())


def _box(factors: Sequence[str], lows: np.ndarray, highs: np.ndarray) -> PrimBox:
    return PrimBox(tuple(
        (name, float(lo), float(hi))
        for name, lo, hi in zip(factors, lows, highs)
        if np.isfinite(lo) or np.isfinite(hi)
    ))


def _peel_bound(values: np.ndarray, alpha: float, face: str) -> float | None:
    """The new limit that shaves about ``alpha`` of ``values`` off one face, or None if nothing can be shaved.

    The limit is a data value (the nearest one kept), so membership is exact.
    When ties would make the shave remove nothing, the whole extreme value goes.
    """
    s = np.sort(values)
    if s[0] == s[-1]:
        return None
    r = max(1, int(alpha * len(s)))
    if face == "low":
        return float(s[r] if s[r] > s[0] else s[np.searchsorted(s, s[0], side="right")])
    return float(s[-1 - r] if s[-1 - r] < s[-1] else s[np.searchsorted(s, s[-1], side="left") - 1])


def _peel(
    x: np.ndarray, y: np.ndarray, alpha: float, min_runs: int, factors: Sequence[str]
) -> pd.DataFrame:
    """The peeling trajectory from the box holding every run (see the module docstring)."""
    k = x.shape[1]
    lows, highs = np.full(k, -np.inf), np.full(k, np.inf)
    inside = np.ones(len(y), dtype=bool)
    records = [_record(0, "", y, inside, lows, highs, factors)]
    while True:
        idx = np.flatnonzero(inside)
        best: tuple[float, int, str, float] | None = None
        for j in range(k):
            values = x[idx, j]
            for face in FACES:
                bound = _peel_bound(values, alpha, face)
                if bound is None:
                    continue
                keep = values >= bound if face == "low" else values <= bound
                if keep.sum() < min_runs:
                    continue
                mean = y[idx][keep].mean()
                # Strictly greater: on a tie the first factor (in column order) and the low face win,
                # so the path is deterministic.
                if best is None or mean > best[0]:
                    best = (mean, j, face, bound)
        if best is None:
            return pd.DataFrame.from_records(records)
        _, j, face, bound = best
        inside = _move_face(x, lows, highs, j, face, bound)
        records.append(_record(len(records), f"{factors[j]} {face}", y, inside, lows, highs, factors))


def _move_face(x: np.ndarray, lows: np.ndarray, highs: np.ndarray, j: int, face: str, bound: float) -> np.ndarray:
    """Set factor ``j``'s ``face`` ("low" or "high") of the box to ``bound`` (in place); the runs now inside."""
    (lows if face == "low" else highs)[j] = bound
    return _inside(x, lows, highs)


def _record(
    step: int, peeled: str, y: np.ndarray, inside: np.ndarray, lows: np.ndarray, highs: np.ndarray,
    factors: Sequence[str],
) -> dict[str, object]:
    coverage, density, mass = _measures(y, inside)
    row: dict[str, object] = {
        "step": step, "peeled": peeled, "coverage": coverage, "density": density, "mass": mass,
        "runs": int(inside.sum()), "restricted": int(np.sum(np.isfinite(lows) | np.isfinite(highs))),
    }
    row.update({f"low:{f}": lo for f, lo in zip(factors, lows)})
    row.update({f"high:{f}": hi for f, hi in zip(factors, highs)})
    return row


def _paste(
    x: np.ndarray, y: np.ndarray, lows: np.ndarray, highs: np.ndarray, alpha: float, factors: Sequence[str]
) -> tuple[np.ndarray, np.ndarray, list[dict[str, object]]]:
    """Grow the box along its restricted faces while an addition of about ``alpha`` of its runs raises the mean."""
    lows, highs = lows.copy(), highs.copy()
    data_min, data_max = x.min(axis=0), x.max(axis=0)
    steps: list[dict[str, object]] = []
    inside = _inside(x, lows, highs)
    while True:
        current = y[inside].mean()
        r = max(1, int(alpha * inside.sum()))
        best: tuple[float, int, str, float] | None = None
        for j in range(x.shape[1]):
            others = np.delete(np.arange(x.shape[1]), j)
            in_others = _inside(x[:, others], lows[others], highs[others])
            for face in FACES:
                if face == "low" and np.isfinite(lows[j]):
                    outside = np.sort(x[in_others & (x[:, j] < lows[j]), j])[::-1]  # nearest first
                elif face == "high" and np.isfinite(highs[j]):
                    outside = np.sort(x[in_others & (x[:, j] > highs[j]), j])
                else:
                    continue
                if len(outside) == 0:
                    continue
                bound = float(outside[min(r, len(outside)) - 1])  # ties with the r-th nearest come in too
                grown_lows, grown_highs = lows.copy(), highs.copy()
                if face == "low":
                    grown_lows[j] = -np.inf if bound <= data_min[j] else bound
                else:
                    grown_highs[j] = np.inf if bound >= data_max[j] else bound
                mean = y[_inside(x, grown_lows, grown_highs)].mean()
                if mean > current and (best is None or mean > best[0]):
                    best = (mean, j, face, grown_lows[j] if face == "low" else grown_highs[j])
        if best is None:
            return lows, highs, steps
        _, j, face, bound = best
        inside = _move_face(x, lows, highs, j, face, bound)
        coverage, density, mass = _measures(y, inside)
        steps.append({"pasted": f"{factors[j]} {face}", "coverage": coverage, "density": density, "mass": mass,
                      "runs": int(inside.sum())})


def _choose(
    trajectory: pd.DataFrame, y: np.ndarray, *, min_density: float | None, beta: float, step: int | None
) -> int:
    """The trajectory step to use: ``step`` if given, else by ``min_density``, else the F-score trade-off."""
    if step is not None:
        if not 0 <= step < len(trajectory):
            raise DiscoveryInputError(f"step: expected 0..{len(trajectory) - 1}, got {step}")
        return int(step)
    coverage = trajectory["coverage"].to_numpy()
    density = trajectory["density"].to_numpy()
    if min_density is not None:
        reached = np.flatnonzero(density >= min_density)
        if len(reached) == 0:
            raise DiscoveryInputError(
                f"min_density: no box on the trajectory reaches {min_density}; the densest has {density.max():.3g}"
            )
        # Coverage only falls along the trajectory, so the first box reaching the density covers most.
        return int(reached[np.argmax(coverage[reached])])
    if not beta > 0:
        raise DiscoveryInputError(f"beta: expected a positive number, got {beta}")
    d = density / y.max()
    score = (1 + beta**2) * coverage * d / (beta**2 * d + coverage)
    return int(np.argmax(score))


def prim(
    inputs: pd.DataFrame,
    output: ArrayLike | pd.Series,
    *,
    outcome: str | None = None,
    alpha: float = DEFAULT_ALPHA,
    min_mass: float = DEFAULT_MIN_MASS,
    min_density: float | None = None,
    beta: float = 1.0,
    step: int | None = None,
    paste: bool = True,
) -> PrimResult:
    """PRIM over the rows of a batch: peel, choose a box from the trajectory, paste (see the module docstring).

    ``inputs`` holds the numeric factor columns; ``output`` one value per row,
    0/1 (or boolean) for runs of interest, or a non-negative measure.
    ``outcome`` is the phrase sentences use, e.g. "crossings exceed 40";
    by default it is taken from the output's name.
    """
    if not 0 < alpha < 0.5:
        raise DiscoveryInputError(f"alpha: expected a share in (0, 0.5), got {alpha}")
    if not 0 < min_mass <= 1:
        raise DiscoveryInputError(f"min_mass: expected a share in (0, 1], got {min_mass}")
    factors = tuple(str(c) for c in inputs.columns)
    if not factors:
        raise DiscoveryInputError("inputs: at least one factor column is needed")
    non_numeric = [c for c in inputs.columns if not pd.api.types.is_numeric_dtype(inputs[c])]
    if non_numeric:
        raise DiscoveryInputError(
            f"inputs: {', '.join(map(str, non_numeric))} not numeric; PRIM here takes numeric factors only "
            "(code a category as integers or as 0/1 columns)"
        )
    x = inputs.to_numpy(dtype=float)
    y = np.asarray(output, dtype=float)
    if y.shape != (len(x),):
        raise DiscoveryInputError(f"output: expected one value per input row ({len(x)}), got shape {y.shape}")
    if not (np.isfinite(x).all() and np.isfinite(y).all()):
        raise DiscoveryInputError("inputs or output hold missing or infinite values; drop those runs first")
    if (y < 0).any() or y.sum() <= 0:
        # Coverage is a share of the output's total, which needs a non-negative output with some mass.
        raise DiscoveryInputError(
            "output: expected non-negative values, not all zero (threshold a signed measure first)"
        )
    binary = bool(np.isin(y, (0.0, 1.0)).all())
    if outcome is None:
        name = getattr(output, "name", None) or "the outcome"
        outcome = f"{name} is of interest" if binary else str(name)
    # Rounded before the ceiling so 0.05 * 2000 gives 100 runs, not 101.
    min_runs = max(1, math.ceil(round(min_mass * len(y), 9)))
    trajectory = _peel(x, y, alpha, min_runs, factors)
    start = PrimResult(
        outcome=outcome, binary=binary, factors=factors, box=PrimBox(()), coverage=1.0, density=float(y.mean()),
        mass=1.0, runs=len(y), total_runs=len(y), base_density=float(y.mean()), step=0, alpha=alpha,
        min_mass=min_mass, trajectory=trajectory, pasting=pd.DataFrame(), _x=x, _y=y,
    )
    return start.select(min_density=min_density, beta=beta, step=step, paste=paste)
