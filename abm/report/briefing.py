"""Turn a batch folder into a briefing a decision-maker can read in ten minutes.

:func:`brief` reads the batch (:mod:`abm.report.store_view`), what it needs
from the run directories (:mod:`abm.report.evidence`), builds the tables
(:mod:`abm.report.tables`) and figures (:mod:`abm.report.figures`), assembles
the sections as a :class:`~abm.report.document.Document` and writes
``OUT/briefing.html`` (self-contained) and ``OUT/briefing.md`` with
``OUT/figures/*.png``.

Sections: the question and the scenario, with its load from
:mod:`abm.report.load_notes` (:mod:`abm.report.headline_sections`); how many
are trying and getting through (:mod:`abm.report.answer`); headline findings
(:mod:`abm.report.headline_sections`); the policy comparison, static
against adaptive behaviour and the stakeholders' views
(:mod:`abm.report.comparison_section`); figures
(:mod:`abm.report.figure_section`); estimator reliability, what drives the
answer (only for sampled designs, which support it), limitations and cautions
and the method appendix (:mod:`abm.report.appendix_sections`). The bottom line
comes first (:mod:`abm.report.bottom_line`); what the sections share is
:class:`abm.report.context.Context`. Every sentence with a number is generated from the tables, and
every number comes with its interval.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass
from pathlib import Path

import pandas as pd

from ..analysis.policy_table import DelayLimits
from ..errors import InputError
from ..atomic import write_atomically
from . import html as html_renderer
from .answer import section_answer
from .headline_sections import section_headline, section_question
from .bottom_line import bottom_line
from . import markdown as markdown_renderer
from .document import Document, FigureBlock
from .evidence import Evidence, gather
from .figures import FIGURE_KEYS
from .store_view import BatchView, load_batch
from .context import Context
from .comparison_section import section_assumptions, section_comparison
from .figure_section import section_figures
from .appendix_sections import section_drivers, section_estimators, section_limitations, section_method
from .tables import (
    behaviour_contrast, best_within_limits, comparison, delay_status, frontier, means, run_table, scenarios,
)

HTML_FILE = "briefing.html"
MD_FILE = "briefing.md"
FORMATS = ("html", "md")
CONTRAST_FIGURES = ("detections", "crossings", "displaced_out", "hazard_weighted_share")


class BriefingError(InputError):
    """A briefing request that cannot be met (e.g. an unknown format)."""


# -- 1. the question -----------------------------------------------------------------------------------


@dataclass(frozen=True)
class Briefing:
    """A built briefing and the tables behind it."""

    document: Document
    batch: BatchView
    evidence: Evidence
    runs: pd.DataFrame
    comparison: pd.DataFrame
    status: pd.DataFrame
    best: dict[tuple, int]


def _drivers(batch: BatchView, runs: pd.DataFrame) -> tuple[pd.DataFrame | None, str]:
    """PRCC of crossings, detections and p95 time at the crossing with the range factors; (None, why) when it cannot run."""
    from ..analysis.sensitivity import SensitivityInputError, prcc

    ranged = [f.label for f in batch.factors if f.is_range]
    if not ranged:
        return None, "the design samples no ranges"
    outputs = [f for f in ("crossings", "detections", "time_in_port_p95_min") if f in runs]
    try:
        return prcc(runs[ranged].astype(float), runs[outputs].astype(float)).to_frame(), ""
    except SensitivityInputError as exc:
        return None, str(exc)


def _silent(stage: str) -> None:
    return None


def build(out: str | Path, baseline: str | None = None, limits: DelayLimits = DelayLimits(),
          argv: Sequence[str] = (), report: Callable[[str], None] = _silent) -> Briefing:
    """Read a batch folder and build its briefing (nothing is written but the two per-run tables).

    ``report`` is told each stage as it starts (the command prints them).
    """
    batch = load_batch(out, baseline)  # bad input fails here, before any stage is reported
    report(f"weighing the estimators against truth in {batch.runs} runs")
    evidence = gather(batch)
    runs = run_table(batch, evidence)
    table = comparison(batch, runs)
    status = delay_status(batch, table, limits)
    best = best_within_limits(batch, table, status)
    drivers, problem = _drivers(batch, runs)
    ctx = Context(
        batch=batch, evidence=evidence, runs=runs, table=table, means=means(table), status=status, best=best,
        on_frontier=frontier(batch, table), limits=limits,
        contrast=behaviour_contrast(batch, runs, CONTRAST_FIGURES), scenario_points=scenarios(batch),
        drivers=drivers, drivers_problem=problem,
    )
    report("comparing policies")
    sections = [section_question(ctx), section_answer(batch, evidence), section_headline(ctx), section_comparison(ctx),
                section_assumptions(ctx)]
    report("drawing figures")
    sections += [section_figures(ctx), section_estimators(ctx)]
    drivers = section_drivers(ctx)
    if drivers is not None:
        sections.append(drivers)
    sections += [section_limitations(ctx), section_method(ctx, argv or ("undertow", "brief", str(out)))]
    document = Document(
        title=f"Briefing: {batch.name}",
        subtitle=(f"{batch.world_name} — {batch.runs} simulated runs. Model estimates from a fictional world, not "
                  "counts of real people; figures are labelled truth (simulated) or observed (what an agency holds)."),
        sections=tuple(sections),
        footer="Made by undertow brief from the batch's tables. People hidden in vehicles can be hurt: read the "
               "cautions in section “Assumptions, limitations and cautions” before using any figure.",
        bottom_line=bottom_line(ctx),
    )
    return Briefing(document, batch, evidence, runs, table, status, best)


def parse_formats(text: str) -> tuple[str, ...]:
    """``html,md`` -> ('html', 'md'); raise BriefingError on anything else."""
    chosen = tuple(dict.fromkeys(part.strip().lower() for part in text.split(",") if part.strip()))
    unknown = [f for f in chosen if f not in FORMATS]
    if unknown or not chosen:
        raise BriefingError(f"--format: expected html, md or both (html,md), got '{text}'")
    return chosen


def write(briefing: Briefing, formats: Sequence[str] = FORMATS) -> dict[str, Path]:
    """Write the chosen formats into the batch folder; return their paths."""
    out = briefing.batch.out
    paths: dict[str, Path] = {}
    if "html" in formats:
        paths["html"] = _write_text(out / HTML_FILE, html_renderer.render(briefing.document))
    if "md" in formats:
        figures = [b for s in briefing.document.sections for b in s.blocks if isinstance(b, FigureBlock)]
        for key in FIGURE_KEYS - {f.key for f in figures}:  # a figure an earlier briefing drew and this one does not
            (out / markdown_renderer.FIGURES_DIR / f"{key}.png").unlink(missing_ok=True)
        for figure in figures:
            write_atomically(out / markdown_renderer.figure_path(figure), lambda tmp: tmp.write_bytes(figure.png))
        paths["md"] = _write_text(out / MD_FILE, markdown_renderer.render(briefing.document))
    return paths


def _write_text(path: Path, text: str) -> Path:
    """Write atomically (temporary name, then rename), as runs are written."""
    return write_atomically(path, lambda tmp: tmp.write_text(text, encoding="utf-8"))


def brief(out: str | Path, baseline: str | None = None, formats: Sequence[str] = FORMATS,
          limits: DelayLimits = DelayLimits(), argv: Sequence[str] = (),
          report: Callable[[str], None] = _silent) -> tuple[Briefing, dict[str, Path]]:
    """Build and write a batch folder's briefing, telling ``report`` each stage."""
    briefing = build(out, baseline, limits, argv, report)
    report(f"writing {', '.join(formats)}")
    return briefing, write(briefing, formats)
