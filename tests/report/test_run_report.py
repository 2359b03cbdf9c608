"""`undertow brief RUN_DIR`: the single-run report.

One short run of the demo world (a port with sailings) and one of the land
border (no departures) are made through the command line and briefed. The
report must hold each section, use the world's own words, label every figure
with its record set and truth as truth, carry the batch briefing's caution,
say that one run measures no estimator's coverage, agree with the run's own
files, open in headless Chromium with every image decoded, and refuse what it
cannot read in one line.
"""

from __future__ import annotations

import inspect
import json
import re
import shutil
from dataclasses import dataclass
from html.parser import HTMLParser
from pathlib import Path
from typing import Any

import pandas as pd
import pytest

from abm.cli import main
from abm.records import DEPARTURES_FILE, QUEUE_HOURS_FILE, QUEUES_FILE
from abm.report import run_figures, run_report, run_sections, run_view
from abm.report.context import SAFETY
from abm.report.run_figures import FIGURE_KEYS, TRUTH_TITLE
from abm.run_files import record_files

from .browser import probe, probed_copy, require_chromium

ROOT = Path(__file__).resolve().parents[2]
PORT = ROOT / "worlds" / "kestrel_quay" / "world.yaml"
BORDER = ROOT / "worlds" / "corran_ridge" / "world.yaml"
SECTIONS = ["run", "daily", "boarding", "estimators", "queues", "lanes", "departures", "cautions", "files"]


class Page(HTMLParser):
    """Sections, figures with their captions, and the data-* of table cells."""

    def __init__(self, text: str) -> None:
        super().__init__(convert_charrefs=True)
        self.sections: list[str] = []
        self.figures: dict[str, str] = {}
        self.cells: list[dict[str, str]] = []
        self._figure: str | None = None
        self._cell: dict[str, str] | None = None
        self.feed(text)

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        a = {k: v or "" for k, v in attrs}
        if tag == "section":
            self.sections.append(a["data-section"])
        elif tag == "figure":
            self._figure = a["data-figure"]
            self.figures[self._figure] = ""
        elif tag in ("td", "th") and any(k.startswith("data-") for k in a):
            self._cell = {**a, "text": ""}

    def handle_data(self, data: str) -> None:
        if self._figure is not None:
            self.figures[self._figure] += data
        if self._cell is not None:
            self._cell["text"] += data

    def handle_endtag(self, tag: str) -> None:
        if tag == "figure":
            self._figure = None
        elif tag in ("td", "th") and self._cell is not None:
            self.cells.append(self._cell)
            self._cell = None


@dataclass(frozen=True)
class Briefed:
    run: Path
    html: str
    markdown: str
    page: Page
    out: str  # what the command printed


def _brief(capsys: pytest.CaptureFixture[str], run: Path) -> Briefed:
    capsys.readouterr()
    assert main(["brief", str(run)]) == 0
    out = capsys.readouterr().out
    html = (run / run_report.HTML_FILE).read_text(encoding="utf-8")
    return Briefed(run, html, (run / run_report.MD_FILE).read_text(encoding="utf-8"), Page(html), out)


@pytest.fixture(scope="module")
def port(tmp_path_factory: pytest.TempPathFactory) -> Briefed:
    run = tmp_path_factory.mktemp("port") / "run"
    assert main(["run", str(PORT), "--days", "12", "--warmup", "3", "--seed", "6", "--out", str(run)]) == 0
    assert main(["brief", str(run)]) == 0  # a module's fixture has no capsys; what it prints is not read
    html = (run / run_report.HTML_FILE).read_text(encoding="utf-8")
    return Briefed(run, html, (run / run_report.MD_FILE).read_text(encoding="utf-8"), Page(html), "")


def _summary(run: Path) -> dict[str, Any]:
    return json.loads((run / "summary.json").read_text(encoding="utf-8"))


def test_the_report_holds_each_section_and_figure(port: Briefed) -> None:
    assert port.page.sections == SECTIONS
    assert set(port.page.figures) == FIGURE_KEYS
    for key in FIGURE_KEYS:
        assert (port.run / "figures" / f"{key}.png").read_bytes().startswith(b"\x89PNG")
        assert f"](figures/{key}.png)" in port.markdown
    titles = re.findall(r"^## \d+\. (.+)$", port.markdown, flags=re.M)
    assert len(titles) == len(SECTIONS)


def test_it_leads_with_the_answer_in_at_most_three_sentences(port: Briefed) -> None:
    bottom = re.search(r'data-claim="bottom-line"><strong>Bottom line.</strong> (.*?)</p>', port.html).group(1)
    assert 2 <= len(re.findall(r"[.;] [A-Z]|\.$", bottom)) <= 3
    summary = _summary(port.run)
    for key in ("attempts", "crossings", "detections", "interdictions", "false_alarms"):
        assert f"{summary[key]:,}" in bottom, key
    assert "simulated truth" in bottom and "days 3–14" in bottom


def test_it_uses_the_worlds_words_and_no_hard_coded_ones(port: Briefed) -> None:
    assert "missed their booked sailing" in port.html and "Time in port" in port.html
    for module in (run_report, run_sections, run_figures, run_view):
        source = "\n".join(line for line in inspect.getsource(module).splitlines()
                           if not line.startswith(("from ", "import ")))  # abm.port is a package, not a word
        assert "sailing" not in source.lower(), module.__name__
        assert not re.search(r"\bport\b", source), module.__name__


def test_every_figure_states_its_record_set_and_truth_as_truth(port: Briefed) -> None:
    for key, caption in port.page.figures.items():
        assert "observed records" in caption or "simulated truth" in caption, key
        assert "One run" in caption or "one run" in caption.lower(), key  # no interval, and it says so
    assert TRUTH_TITLE == "Simulated truth — an agency never sees this"
    assert "which an agency never sees" in port.page.figures["run-boarding"]
    assert "simulated truth, an agency never sees this" in port.html  # the truth table's caption
    totals = {c["data-figure"]: c for c in port.page.cells if "data-value" in c}
    summary = _summary(port.run)
    for key in ("vehicles", "attempts", "crossings", "detections"):
        assert float(totals[key]["data-value"]) == summary[key]


def test_it_carries_the_briefings_caution_and_calls_no_estimator_reliable(port: Briefed) -> None:
    text = re.sub(r"\s+", " ", port.markdown)
    assert re.sub(r"\s+", " ", SAFETY) in text
    assert "coverage is unmeasured here" in text
    assert not re.search(r"\b(is|are) (reliable|trusted)\b|Trusted:", text)
    assert (port.run / "estimates_summary.json").is_file()  # the batch's own per-run estimates, reused


def test_queue_figures_agree_with_the_run_files(port: Briefed) -> None:
    hours = pd.read_parquet(port.run / QUEUE_HOURS_FILE)
    for cell in (c for c in port.page.cells if "data-wait-mean" in c):
        rows = hours[hours["station"] == cell["data-station"]]
        mean = (rows["wait_mean_min"].fillna(0) * rows["checks"]).sum() / rows["checks"].sum()
        assert float(cell["data-wait-mean"]) == pytest.approx(mean)
    departures = pd.read_parquet(port.run / DEPARTURES_FILE)
    missed = {c["data-service"]: float(c["data-missed"]) for c in port.page.cells if "data-missed" in c}
    window = departures[departures["day"].between(3, 14)]
    assert missed == window.groupby("time")["missed"].sum().astype(float).to_dict()


def test_a_headless_browser_shows_every_image(port: Briefed, tmp_path: Path) -> None:
    require_chromium()
    result = probe(probed_copy(port.html, tmp_path / "probed.html"), tmp_path / "profile")
    assert result["images"] == len(FIGURE_KEYS)
    assert result["undecoded"] == [] and result["errors"] == [] and result["fetched"] == []


def test_a_border_without_departures_says_so_in_its_own_words(tmp_path: Path,
                                                              capsys: pytest.CaptureFixture[str]) -> None:
    run = tmp_path / "border"
    assert main(["run", str(BORDER), "--days", "5", "--seed", "1", "--out", str(run)]) == 0
    briefed = _brief(capsys, run)
    assert briefed.page.sections == SECTIONS
    assert "run-departures" not in briefed.page.figures
    assert "time at the border" in briefed.html and "there is no timetable" in briefed.html
    assert not re.search(r"sailing|\bport\b|time in port", briefed.markdown, flags=re.I)
    assert "Bottom line" in briefed.out


def test_a_run_from_before_the_queue_tables_is_still_briefed(port: Briefed, tmp_path: Path,
                                                             capsys: pytest.CaptureFixture[str]) -> None:
    old = tmp_path / "old"
    shutil.copytree(port.run, old, ignore=shutil.ignore_patterns("run_report.*", "figures", "estimates_summary.json"))
    for name in (QUEUES_FILE, QUEUE_HOURS_FILE, DEPARTURES_FILE):
        (old / name).unlink()
    record_files(old)  # as such a run recorded its files
    briefed = _brief(capsys, old)
    assert briefed.page.sections == SECTIONS
    assert "made before runs wrote their queue figures" in briefed.html
    assert set(briefed.page.figures) == {"run-daily", "run-boarding"}


def test_brief_refuses_what_it_cannot_read_in_one_line(port: Briefed, tmp_path: Path,
                                                       capsys: pytest.CaptureFixture[str]) -> None:
    def refused(*argv: str) -> str:
        capsys.readouterr()
        assert main(["brief", *argv]) == 2
        err = capsys.readouterr().err
        assert err.count("\n") == 1 and "Traceback" not in err
        return err

    (tmp_path / "notes").mkdir()
    assert f"{tmp_path / 'notes'}: neither a run directory" in refused(str(tmp_path / "notes"))
    assert "no such folder" in refused(str(tmp_path / "missing"))
    assert "--baseline" in refused(str(port.run), "--baseline", "x")
    assert "--max-delay-increase" in refused(str(port.run), "--max-delay-increase", "5")
    damaged = tmp_path / "damaged"
    shutil.copytree(port.run, damaged)
    path = damaged / "observed" / "encounters.parquet"
    path.write_bytes(path.read_bytes()[:-10])
    err = refused(str(damaged))
    assert "encounters.parquet" in err and "damaged" in err


def test_departures_are_listed_by_clock_time() -> None:
    """A timetable that changes on a later day (a weekend's hourly trains) adds its times in clock order, not
    after the first day's (minutes count from the run's start)."""
    from types import SimpleNamespace

    rows = [(0, "00:00", 0), (0, "02:30", 150), (0, "23:15", 1395), (5, "01:00", 5 * 1440 + 60),
            (5, "02:00", 5 * 1440 + 120), (6, "00:00", 6 * 1440)]
    departures = pd.DataFrame([{"day": d, "time": t, "minute": float(m), "booked": 1, "left": 1, "missed": 0,
                                "full": False} for d, t, m in rows])
    by = run_sections._departures_by_time(SimpleNamespace(departures=departures))  # type: ignore[arg-type]
    assert list(by.index) == ["00:00", "01:00", "02:00", "02:30", "23:15"]
    assert by.loc["00:00", "days"] == 2
