"""The briefing's first answer: how many people are trying to cross, and how many get through.

With a calibration (the batch's experiment named ``calibration:``), the answer
is the calibration's: attempts, distinct persons, crossings and crossings by
people who boarded after the last check, over its window of the agency's
records, each with its interval and the coverage its own self-check measured
(:mod:`abm.calibration.self_check`). Beside it, every closed-form estimator run
on the same records, with what it targets, its assumptions, and the bias and
coverage it showed against truth in this batch's runs
(:mod:`abm.report.evidence`). An estimator is called reliable only when that
coverage is close to nominal (:func:`abm.calibration.self_check.within_nominal`).

Without a calibration the section says that how many try is an assumption of
the world file, and which figure was assumed.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import pandas as pd

from ..analysis.estimator_check.estimates import sensitivities_from_world
from ..analysis.estimator_check.truth import method_slug
from ..calibration.config import LATENT, LATENT_MEANING
from ..calibration.run import RELIABILITY_FILE, SELF_CHECK_TABLE
from ..calibration.self_check import within_nominal
from ..calibration.target import load_target
from ..errors import InputError
from ..estimate.report import run_all
from ..world import load_world
from .context import percent
from .document import Bullets, Cell, Item, Paragraph, Section, Table, interval, number
from .evidence import ALL_BEHAVIOURS, Evidence
from .store_view import BatchView

TITLE = "How many are trying and getting through"
POSTERIOR_SUMMARY = "posterior_summary.parquet"
HEADER = "calibration.json"


@dataclass(frozen=True)
class CalibrationView:
    """A calibration output folder as the briefing reads it."""

    folder: Path
    posterior: pd.DataFrame  # posterior_summary.parquet: quantity, kind, mean, sd, low, high, level, about
    self_check: pd.DataFrame | None  # self_check.parquet (None when the calibration skipped it)
    record: dict[str, Any]  # reliability.json: name, method, level, window, how it checked itself, warnings
    header: dict[str, Any]  # calibration.json

    @property
    def level(self) -> float:
        return float(self.record["level"])

    @property
    def window(self) -> tuple[int, int]:
        first = int(self.record["first_day"])
        return first, first + int(self.record["days"]) - 1


def read_calibration(folder: str | Path) -> CalibrationView:
    """Read what a briefing needs from a calibration output folder; one-line error when it is incomplete."""
    folder = Path(folder)
    needed = [folder / POSTERIOR_SUMMARY, folder / RELIABILITY_FILE, folder / HEADER]
    missing = [p.name for p in needed if not p.is_file()]
    if missing:
        raise InputError(f"{folder}: the batch's calibration lacks {', '.join(missing)}; rerun undertow calibrate")
    check = folder / SELF_CHECK_TABLE
    return CalibrationView(
        folder=folder,
        posterior=pd.read_parquet(folder / POSTERIOR_SUMMARY),
        self_check=pd.read_parquet(check) if check.is_file() else None,
        record=json.loads((folder / RELIABILITY_FILE).read_text(encoding="utf-8")),
        header=json.loads((folder / HEADER).read_text(encoding="utf-8")),
    )


def _answer_in_words(view: CalibrationView) -> Paragraph:
    """The answer first, in plain words: who tried, who got through, how many no record could see."""
    post = view.posterior.set_index("quantity")
    check = view.self_check.set_index("quantity") if view.self_check is not None else None

    def figure(quantity: str) -> str:
        row = post.loc[quantity]
        return f"{number(row['mean'])} ({view.level:.0%} interval {interval(row['low'], row['high'])})"

    days = int(view.record["days"])
    text = (f"Over the {days} days of the agency's records, the calibrated model puts the people who tried at "
            f"{figure('persons')} distinct persons, of whom {figure('crossings')} eventually crossed (some after "
            "being found on an earlier try); "
            f"{figure('crossings_after_last_check')} of those crossings boarded after the last check, where no "
            "record can see them.")
    if check is not None and "crossings" in check.index:
        text += (f" Its self-check found intervals like these held the known truth in "
                 f"{percent(check.loc['crossings', 'coverage'])} of {int(check.loc['crossings', 'trials'])} trials "
                 f"(nominal {view.level:.0%}).")
    else:
        text += " How often such intervals hold the truth was not measured (no self-check)."
    return Paragraph(text, lead="The answer.")


def _coverage_text(check: pd.DataFrame | None, quantity: str) -> tuple[str, dict[str, Any]]:
    if check is None or quantity not in set(check["quantity"]):
        return "not measured", {}
    row = check.set_index("quantity").loc[quantity]
    text = f"{percent(row['coverage'])} of {int(row['trials'])}\n{percent(row['coverage_low'])} to {percent(row['coverage_high'])}"
    return text, {"coverage": float(row["coverage"]), "trials": int(row["trials"])}


def _unknown_label(quantity: str, prior: str) -> str:
    """An unknown as the reader needs it: what it is, its prior, and whether it multiplies the world's value."""
    if prior.endswith("(multiplier)"):
        return (f"{quantity}: a multiplier on the world file's value (1 = as the file says); "
                f"prior {prior.removesuffix('(multiplier)').strip()}")
    return f"{quantity}: an unknown of the world; prior {prior}" if prior else f"{quantity} (unknown of the world)"


def _calibrated_table(view: CalibrationView) -> Table:
    post = view.posterior.set_index("quantity")
    days = int(view.record["days"])
    level = view.level
    rows = []
    names = [q for q in LATENT if q in post.index] + [q for q in post.index if post.loc[q, "kind"] == "parameter"]
    for quantity in names:
        row = post.loc[quantity]
        latent = quantity in LATENT
        label = LATENT_MEANING[quantity] if latent else _unknown_label(quantity, str(row.get("about", "")))
        coverage, data = _coverage_text(view.self_check, quantity)
        kind = "count" if latent else "ratio"
        rows.append((
            Cell(label, {"quantity": quantity}, header=True),
            Cell(f"{number(row['mean'], kind)}\n{interval(row['low'], row['high'], kind)}",
                 {"quantity": quantity, "mean": float(row["mean"]), "low": float(row["low"]), "high": float(row["high"])}),
            Cell(number(row["mean"] / days, "rate") if latent else "", {}),
            Cell(coverage, {"quantity": quantity, **data}),
            Cell("model estimate from observed records" if latent else "posterior of an assumption"),
        ))
    return Table(
        "calibrated-answer",
        f"Calibrated to the agency's records, days {view.window[0]}–{view.window[1]} ({days} days)",
        ("Quantity", f"Posterior mean\n{level:.0%} interval", "Per day", f"Self-check: share of {level:.0%} intervals\n"
         "holding the truth (95% Wilson)", "Record set"),
        tuple(rows),
        note="The self-check calibrates pseudo-observed records whose truth is known and counts how often the "
             "interval held it; an interval far from its nominal share is not to be trusted as stated.",
    )


def _estimator_rows(view: CalibrationView, evidence: Evidence) -> tuple[list[tuple[Cell, ...]], int]:
    """One row per closed-form estimator on the calibration's records; and how many are reliable here."""
    world_file = view.header.get("world_file")
    sensitivities = sensitivities_from_world(load_world(world_file)) if world_file else None
    results, _ = run_all(load_target(view.record["observed_path"]), view.window, view.level, sensitivities, isolate=True)
    pooled = evidence.reliability
    if len(pooled):
        pooled = pooled[pooled["behaviour"] == ALL_BEHAVIOURS]
    rows, reliable = [], 0
    for result in results:
        slug = method_slug(result.method)
        measured = pooled[pooled["slug"] == slug] if len(pooled) else pooled
        if len(measured):
            m = measured.iloc[0]
            ok = bool(m["eligible"]) and within_nominal(float(m["coverage"]), float(m["level"]))
            reliable += ok
            batch_text = (f"bias {number(m['relative_bias'], 'relative', True)}; its {float(m['level']):.0%} intervals "
                          f"held the truth in {percent(m['coverage'])} of {int(m['n'])} runs")
            verdict = "reliable here" if ok else "not reliable here"
            data = {"slug": slug, "coverage": float(m["coverage"]), "reliable": str(ok).lower()}
        else:
            batch_text, verdict, data = "not measured in this batch", "not reliable here", {"slug": slug}
        rows.append((
            Cell(result.method, {"slug": slug}, header=True),
            Cell(result.target),
            Cell(f"{number(result.estimate)}\n{interval(result.ci_low, result.ci_high)}",
                 {"slug": slug, "estimate": result.estimate}),
            Cell(_assumptions_line(result.assumptions)),
            Cell(f"{batch_text}\n{verdict}", data),
        ))
    return rows, reliable


def _assumptions_line(assumptions: tuple[str, ...]) -> str:
    """The first assumption (what the family shares) and the last (what this estimator adds), as one line."""
    picked = list(dict.fromkeys((assumptions[0], assumptions[-1]))) if assumptions else []
    return "; ".join(picked) + ("; …" if len(assumptions) > len(picked) else "")


def _why_estimators_fail(batch: BatchView) -> str:
    """The reasons this batch's world gives closed-form estimators to go wrong, in words."""
    world = batch.world
    behaviours = {world.get("adversary", {}).get("behaviour", "static")}
    if batch.behaviour is not None:
        behaviours |= {str(level) for level in batch.factor(batch.behaviour).levels}
    reasons = []
    if behaviours - {"static"}:
        reasons.append("people adapt, moving toward options where fewer are caught, so capture chances are neither "
                       "equal nor constant")
    if len(world.get("depths") or []) > 1:
        reasons.append("people hide at different depths, which checks find at different rates")
    methods = world.get("methods") or []
    if any(m.get("cargo") for m in methods):
        reasons.append("some cargo confounds the kit")
    if any(m.get("fatigue") for m in methods):
        reasons.append("teams tire between rests")
    if any(p.get("before_station") == "departure" for p in world.get("boarding_points") or []):
        reasons.append("people who board after the last check are invisible to every record")
    return "; ".join(reasons)


def _assumed_inflow(batch: BatchView) -> Paragraph:
    adversary = batch.world.get("adversary", {})
    groups = float(adversary.get("arrivals_per_day", math.nan))
    sizes = {int(k): float(v) for k, v in (adversary.get("group_size") or {1: 1.0}).items()}
    persons = groups * sum(k * v for k, v in sizes.items()) / max(sum(sizes.values()), 1e-12)
    varies = [f.label for f in batch.factors if f.path == "adversary.arrivals_per_day"]
    tail = f" It varies between design points through {', '.join(varies)}." if varies else ""
    return Paragraph(
        f"This batch was not calibrated to any agency records, so how many try is not estimated here: it is an "
        f"assumption of the world file, adversary.arrivals_per_day = {number(groups, 'rate')} new groups a day "
        f"(about {number(persons, 'rate')} persons a day at the world's group sizes).{tail} Every crossing figure "
        "below follows from that assumption. To estimate it, calibrate the world to an agency extract "
        "(undertow calibrate) and name the calibration in the experiment file (calibration: FOLDER).",
        lead="Not estimated.",
    )


def section_answer(batch: BatchView, evidence: Evidence) -> Section:
    """The first section after the scenario: the calibrated answer, or the world's assumed inflow."""
    if batch.calibration is None:
        blocks: list[Any] = [_assumed_inflow(batch), Paragraph(
            "Intervals in the comparisons below carry simulation noise only: the unknowns are fixed at the world "
            "file's values.", lead="Uncertainty.")]
        return Section("answer", TITLE, tuple(blocks))
    view = read_calibration(batch.calibration["folder"])
    level, (first, last) = view.level, view.window
    blocks = [
        _answer_in_words(view),
        Paragraph(
            f"Calibrated by approximate Bayesian computation (“{view.record['name']}”, {view.record['method']}) to the "
            f"observed records at {view.record['observed_path']}, days {first}–{last}: only what an agency holds was "
            "read. The figures are the simulated truth of the model runs whose observed records matched: model "
            "estimates, not counts.",
            lead="Where the answer comes from.",
        ),
        _calibrated_table(view),
    ]
    if view.record.get("self_check"):
        blocks.append(Paragraph(f"Self-check: {view.record['self_check']}.", lead="How the intervals were checked."))
    warnings = [str(w) for w in view.record.get("warnings") or []]
    if warnings:
        blocks.append(Paragraph("The calibration warns:", lead="Read before using these figures."))
        blocks.append(Bullets(tuple(Item(w.removeprefix("warning: "), {"claim": "calibration-warning"}) for w in warnings)))
    rows, reliable = _estimator_rows(view, evidence)
    if rows:
        blocks.append(Table(
            "closed-form",
            f"Closed-form estimators on the same records (cross-checks, {level:.0%} intervals; bias and coverage "
            "measured against truth in this batch's runs)",
            ("Estimator", "Counts", "On the agency's records", "Assumes", "Measured in this batch"),
            tuple(rows),
        ))
    if reliable:
        blocks.append(Paragraph(
            f"{reliable} closed-form estimator{'s' if reliable != 1 else ''} held the truth close to the nominal "
            f"{level:.0%} in this batch; the others are cross-checks only."))
    else:
        why = _why_estimators_fail(batch)
        blocks.append(Paragraph(
            f"No closed-form estimator is reliable for this crossing: in this batch none of their {level:.0%} "
            "intervals held the truth in 80–97% of runs, so none of their figures is quoted as an answer"
            + (f". Why, in this world: {why}." if why else "."),
            lead="No closed-form answer."))
    blocks.append(Paragraph(
        f"Replication r of every design point draws its unknowns from the posterior ({batch.calibration['particles']} "
        "particles; the same draw at every design point), so the intervals in the comparisons below carry parameter "
        "uncertainty as well as simulation noise.", lead="Uncertainty."))
    return Section("answer", TITLE, tuple(blocks))
