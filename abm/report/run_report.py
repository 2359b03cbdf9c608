"""A short report on one run directory: ``undertow brief RUN_DIR``.

Where the batch briefing (:mod:`abm.report.briefing`) weighs policies against
each other over replications, this report says what happened in one run: the
answer first in two or three plain sentences, then the run and its load, the
day-by-day series, where attempts boarded (truth) beside what the records
show, the estimators on the run's observed records, waits, queues and lane use
per station and hour, missed departures per departure, and the same cautions
the briefing carries. It is written into the run directory as
``run_report.html`` (self-contained) and ``run_report.md`` with
``figures/run-*.png``, through the briefing's own document and renderers.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass
from pathlib import Path

from ..atomic import write_atomically
from . import html as html_renderer
from . import markdown as markdown_renderer
from .document import Document, FigureBlock, is_number, number
from .run_figures import FIGURE_KEYS
from .run_sections import (
    label, section_boarding, section_cautions, section_daily, section_departures, section_estimators, section_files,
    section_lanes, section_queues, section_run, shown,
)
from .run_view import RunView, load_run

HTML_FILE = "run_report.html"
MD_FILE = "run_report.md"


@dataclass(frozen=True)
class RunReport:
    """A built single-run report and the run it reads."""

    document: Document
    view: RunView


def _queue_clause(view: RunView) -> str:
    """Where and when vehicles waited longest for a check, as a clause; "" without queue figures."""
    hours = view.queue_hours
    if hours is None or not hours["wait_mean_min"].notna().any():
        return ""
    worst = hours.loc[hours["wait_mean_min"].idxmax()]
    return (f"vehicles waited longest for a check at {label(worst['station'])} around {int(worst['hour']):02d}:00 "
            f"(mean {number(worst['wait_mean_min'], 'minutes')} minutes, 95th percentile "
            f"{number(worst['wait_p95_min'], 'minutes')} minutes)")


def bottom_line(view: RunView) -> str:
    """What happened in this run, in three sentences: truth, then the records, then delay."""
    s, w = view.summary, view.words
    first = (f"Over {view.window_text} at {view.world.name}, the simulated truth has {shown(s.get('attempts'))} "
             f"person-attempts to cross hidden in vehicles, of which {shown(s.get('crossings'))} got through "
             "(model estimates an agency never sees).")
    second = (f"The agency's records show {shown(s.get('detections'))} persons found at checks and "
              f"{shown(s.get('interdictions'))} stopped at boarding points, with {shown(s.get('false_alarms'))} "
              f"false alarms in {shown(s.get('checks'))} checks.")
    delay = []
    queue = _queue_clause(view)
    if queue:
        delay.append(queue)
    missed = s.get("missed_departure_share")
    if view.world.departures is not None and is_number(missed):
        delay.append(f"{number(missed, 'percent')} of vehicles missed their booked {w.service}")
    elif is_number(s.get("time_in_port_p95_min")):
        delay.append(f"the 95th percentile of {w.time_at_site} was {number(s['time_in_port_p95_min'], 'minutes')} "
                     "minutes")
    third = ("; ".join(delay) + ".") if delay else ""
    return " ".join(x for x in (first, second, third[:1].upper() + third[1:]) if x)


def _silent(stage: str) -> None:
    return None


def build_run_report(run_dir: str | Path, argv: Sequence[str] = (),
                     report: Callable[[str], None] = _silent) -> RunReport:
    """Read a run directory and build its report (nothing written but the run's cached estimates)."""
    view = load_run(run_dir)  # bad input fails here, before any stage is reported
    report("running the estimators on the observed records")
    estimators = section_estimators(view)
    report("drawing figures")
    sections = (
        section_run(view), section_daily(view), section_boarding(view), estimators, section_queues(view),
        section_lanes(view), section_departures(view), section_cautions(view),
        section_files(view, argv or ("undertow", "brief", str(run_dir))),
    )
    document = Document(
        title=f"Run report: {view.world.name}",
        subtitle=(f"One simulated run, {view.window_text}, seed {view.manifest.get('seed', 'n/a')}. Model estimates "
                  "from a fictional world, not counts of real people; figures are labelled observed (what an agency "
                  "holds) or simulated truth (what it never sees)."),
        sections=sections,
        footer="Made by undertow brief from the run directory's records. People hidden in vehicles can be hurt: read "
               "the cautions in section “Limitations and cautions” before using any figure.",
        bottom_line=bottom_line(view),
    )
    return RunReport(document, view)


def write_run_report(built: RunReport, formats: Sequence[str]) -> dict[str, Path]:
    """Write the chosen formats into the run directory; return their paths."""
    out = built.view.path
    paths: dict[str, Path] = {}
    if "html" in formats:
        text = html_renderer.render(built.document)
        paths["html"] = write_atomically(out / HTML_FILE, lambda tmp: tmp.write_text(text, encoding="utf-8"))
    if "md" in formats:
        figures = [b for s in built.document.sections for b in s.blocks if isinstance(b, FigureBlock)]
        for key in FIGURE_KEYS - {f.key for f in figures}:  # drawn by an earlier report and not by this one
            (out / markdown_renderer.FIGURES_DIR / f"{key}.png").unlink(missing_ok=True)
        for figure in figures:
            write_atomically(out / markdown_renderer.figure_path(figure), lambda tmp, f=figure: tmp.write_bytes(f.png))
        text = markdown_renderer.render(built.document)
        paths["md"] = write_atomically(out / MD_FILE, lambda tmp: tmp.write_text(text, encoding="utf-8"))
    return paths


def brief_run(run_dir: str | Path, formats: Sequence[str], argv: Sequence[str] = (),
              report: Callable[[str], None] = _silent) -> tuple[RunReport, dict[str, Path]]:
    """Build and write a run directory's report, telling ``report`` each stage."""
    built = build_run_report(run_dir, argv, report)
    report(f"writing {', '.join(formats)}")
    return built, write_run_report(built, formats)
