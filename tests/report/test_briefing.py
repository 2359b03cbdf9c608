"""Briefings from a small batch: sections, figures, numbers traced to the tables, escaping, offline, a browser.

One batch (2 policies x 2 behaviour models x 3 replications x 2 + 10 days, serial executor) is built once
for the module, on a copy of the demo world whose name carries markup and whose intervention falls inside
the runs (so the daily-series figure is drawn), and briefed through the command line.

Independent checks: every comparison-table number is recomputed here with pandas and scipy's Student t
from summary.parquet and briefing_runs.parquet; the derived per-run figures are recomputed from the run
directories' truth records and world.json; the HTML is read with the standard library's html.parser; a
headless Chromium (Debian's ``chromium`` package) opens the page and reports whether every image decoded.
"""

from __future__ import annotations

import base64
import json
import math
import re
import subprocess
from dataclasses import dataclass
from html.parser import HTMLParser
from pathlib import Path
from typing import Any

import pandas as pd
import pytest
import yaml
from scipy import stats

from abm.analysis.estimator_check.cache import cached_estimates
from abm.analysis.estimator_check.estimates import sensitivities_from_world
from abm.analysis.estimator_check.runs import read_world
from abm.cli import main
from abm.demo import _clear_previous_demo
from abm.errors import InputError
from abm.estimate import expansion
from abm.estimate.inputs import read_tables
from abm.experiment.batch import run_batch
from abm.experiment.design import load_plan
from abm.report.store_view import load_batch

from .browser import PROBE, require_chromium
from .browser import chromium_args as _chromium_args
from .browser import probe as _probe

ROOT = Path(__file__).resolve().parents[2]
DEMO_WORLD = ROOT / "worlds" / "kestrel_quay" / "world.yaml"
DEMO_EXPERIMENT = ROOT / "worlds" / "kestrel_quay" / "demo_experiment.yaml"
MARKUP_NAME = "<script>alert(1)</script> Quay & <b>Sons</b>"
MARKUP_NOTE = "image <em>twice</em> as many [see](javascript:alert(1)) ![x](https://example.invalid/t.png) *now*"
SECTIONS = {"question", "answer", "headline", "comparison", "assumptions", "figures", "estimators", "limitations", "method"}
FIGURES = {"frontier", "displacement", "daily", "estimators"}
PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"


@dataclass(frozen=True)
class Briefed:
    out: Path
    html: str
    markdown: str
    page: "Page"


class Page(HTMLParser):
    """The parts of the briefing the tests read: sections, figures, images, links, table cells, claims."""

    def __init__(self, text: str) -> None:
        super().__init__(convert_charrefs=True)
        self.sections: list[str] = []
        self.figures: list[str] = []
        self.images: list[dict[str, str]] = []
        self.links: list[tuple[str, str, str]] = []  # (tag, attribute, value)
        self.cells: list[dict[str, Any]] = []  # data-* of td/th plus their text
        self.claims: list[dict[str, Any]] = []
        self.tags: list[str] = []
        self._cell: dict[str, Any] | None = None
        self._claim: dict[str, Any] | None = None
        self.feed(text)

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        a = {k: v or "" for k, v in attrs}
        self.tags.append(tag)
        for key in ("src", "href", "action", "poster", "data"):
            if key in a:
                self.links.append((tag, key, a[key]))
        if tag == "section":
            self.sections.append(a.get("data-section", ""))
        elif tag == "figure":
            self.figures.append(a.get("data-figure", ""))
        elif tag == "img":
            self.images.append(a)
        elif tag in ("td", "th") and "data-figure" in a:
            self._cell = {**a, "text": ""}
        elif tag == "li" and "data-claim" in a:
            self._claim = {**a, "text": ""}

    def handle_data(self, data: str) -> None:
        if self._cell is not None:
            self._cell["text"] += data + "\n"
        if self._claim is not None:
            self._claim["text"] += data

    def handle_endtag(self, tag: str) -> None:
        if tag in ("td", "th") and self._cell is not None:
            self.cells.append(self._cell)
            self._cell = None
        elif tag == "li" and self._claim is not None:
            self.claims.append(self._claim)
            self._claim = None


def _write_yaml(path: Path, data: Any) -> Path:
    path.write_text(yaml.safe_dump(data, sort_keys=False), encoding="utf-8")
    return path


@pytest.fixture(scope="module")
def briefed(tmp_path_factory: pytest.TempPathFactory) -> Briefed:
    root = tmp_path_factory.mktemp("briefing")
    world = yaml.safe_load(DEMO_WORLD.read_text(encoding="utf-8"))
    world["name"] = MARKUP_NAME
    world["interventions"][0]["day"] = 6  # inside the 2 + 10 days, so the daily series is drawn
    _write_yaml(root / "world.yaml", world)
    experiment = {
        "kind": "experiment",
        "name": "Small briefing test <i>(illustrative)</i>",
        "world": "world.yaml",
        "days": 10,
        "warmup_days": 2,
        "replications": 3,
        "seed": 31,
        "factors": [
            {
                "name": "policy",
                "baseline": "current",
                "levels": [
                    {"name": "current", "set": {}},
                    {"name": "double_imaging", "label": "Image twice as many", "note": MARKUP_NOTE,
                     "set": {"stations.gate_imaging.selection.fraction": 0.4}},
                ],
            },
            {"name": "behaviour", "path": "adversary.behaviour", "levels": ["static", "adaptive"]},
        ],
    }
    path = _write_yaml(root / "experiment.yaml", experiment)
    out = root / "batch"
    run_batch(path, out, "serial", command=["undertow", "batch", str(path)], extensions=(cached_estimates,))
    assert main(["brief", str(out)]) == 0
    text = (out / "briefing.html").read_text(encoding="utf-8")
    return Briefed(out, text, (out / "briefing.md").read_text(encoding="utf-8"), Page(text))


def _runs(out: Path) -> pd.DataFrame:
    summary = pd.read_parquet(out / "summary.parquet")
    derived = pd.read_parquet(out / "briefing_runs.parquet")
    extra = [c for c in derived.columns if c not in summary.columns]
    return summary.merge(derived[["run_id", *extra]], on="run_id")


def _t_interval(values: pd.Series) -> tuple[float, float, float]:
    """Mean and 95% Student-t interval, written out here rather than taken from abm."""
    x = values.astype(float).dropna().to_numpy()
    half = stats.t.ppf(0.975, len(x) - 1) * x.std(ddof=1) / math.sqrt(len(x))
    return float(x.mean()), float(x.mean() - half), float(x.mean() + half)


def _bounded_interval(values: pd.Series, figure: str) -> tuple[float, float, float]:
    """Mean and 95% interval as the briefing should show it, written out here rather than taken from abm:
    log-normal (Burnham et al. 1987, from memory) for counts and times, logit delta method for shares; with
    fewer than 5 replications a zero spread gives no interval, except for staff-hours (set by the roster)."""
    x = values.astype(float).dropna().to_numpy()
    mean, se = float(x.mean()), x.std(ddof=1) / math.sqrt(len(x))
    t = stats.t.ppf(0.975, len(x) - 1)
    if se == 0 or mean <= 0 or mean >= 1 and figure.endswith("_share"):
        return (mean, mean, mean) if figure == "staff_hours" or len(x) >= 5 else (mean, math.nan, math.nan)
    if figure.endswith("_share"):
        logit, spread = math.log(mean / (1 - mean)), t * se / (mean * (1 - mean))
        return mean, 1 / (1 + math.exp(-(logit - spread))), 1 / (1 + math.exp(-(logit + spread)))
    c = math.exp(t * math.sqrt(math.log(1 + (se / mean) ** 2)))
    return mean, mean / c, mean * c


def _close(a: Any, b: float) -> bool:
    if a in ("nan", "", None):
        return not math.isfinite(b)
    return math.isclose(float(a), b, rel_tol=1e-9, abs_tol=1e-9)


def _parse_number(line: str) -> tuple[float, int]:
    """A printed number back to a float, with its count of decimals."""
    text = line.strip().replace("\u2212", "-").replace(",", "").rstrip("%").strip()
    digits = len(text.split(".")[1]) if "." in text else 0
    return float(text), digits


# -- structure ------------------------------------------------------------------------------------


def test_every_section_and_figure_is_there(briefed: Briefed) -> None:
    page = briefed.page
    assert set(page.sections) == SECTIONS
    assert set(page.figures) == FIGURES
    assert len(page.images) == len(FIGURES)
    for image in page.images:
        prefix = "data:image/png;base64,"
        assert image["src"].startswith(prefix)
        png = base64.b64decode(image["src"][len(prefix):], validate=True)
        assert png.startswith(PNG_SIGNATURE)
        assert image.get("alt")
    for key in FIGURES:  # the Markdown version has the same figures as files beside it
        assert f"(figures/{key}.png)" in briefed.markdown
        assert (briefed.out / "figures" / f"{key}.png").read_bytes().startswith(PNG_SIGNATURE)


def test_scenario_section_says_where_the_baseline_is_overloaded(briefed: Briefed) -> None:
    # The demo world's dog teams in the evening: 2.7 lanes resting a third of the time for ~26 dog checks an hour
    # (abm.port.load; tests/port/test_load_report.py checks the figures); double imaging overloads the gate too.
    md = briefed.markdown.replace("\\", "")  # as rendered: the backslash escapes shown as the characters
    scenario = md[md.index("The scenario"):md.index("How many are trying")]
    assert "The baseline is overloaded at" in scenario
    assert "station 'yard_dogs', evening (18-24 h): offered load 1.21" in scenario
    assert "miss their booked sailing for want of places alone" in scenario  # the world's own word
    assert "Image twice as many: station 'gate_imaging', evening" in scenario


def test_every_figure_states_its_source_and_replications(briefed: Briefed) -> None:
    captions = re.findall(r"<figcaption>(.*?)</figcaption>", briefed.html, flags=re.S)
    assert len(captions) == len(FIGURES)
    for caption in captions:
        assert re.search(r"\b(truth|observed)\b", caption)
        assert re.search(r"\b(3 replications|3 paired replications|12 runs)\b", caption), caption


def test_safety_cautions_are_stated(briefed: Briefed) -> None:
    text = briefed.html
    for word in ("suffocation", "heat", "cold", "crushing", "more dangerous boarding", "not a count",
                 "safeguarding duties", "licensed practice"):
        assert word in text


# -- numbers ----------------------------------------------------------------------------------------


def test_comparison_table_equals_a_pandas_computation(briefed: Briefed) -> None:
    runs = _runs(briefed.out)
    point_of = runs.groupby("point")[["policy", "behaviour"]].first()
    cells = [c for c in briefed.page.cells if "data-point" in c and "data-mean" in c]
    figures = {c["data-figure"] for c in cells}
    assert {"detections", "interdictions", "crossings", "displaced_out", "hazard_weighted_share",
            "time_in_port_p95_min", "missed_departure_share", "staff_hours", "est_crossings"} <= figures
    assert len(cells) == len(figures) * len(point_of)
    for cell in cells:
        point, figure = int(cell["data-point"]), cell["data-figure"]
        values = runs.loc[runs["point"] == point].set_index("replication")[figure]
        mean, low, high = _bounded_interval(values, figure)
        assert _close(cell["data-mean"], mean), (figure, point)
        assert not float(cell["data-low"]) < 0, (figure, point)  # no count or share below what it can take
        assert _close(cell["data-low"], low) and _close(cell["data-high"], high), (figure, point)
        printed, digits = _parse_number(cell["text"].split("\n")[0])  # the cell's first line is the mean
        scale = 100 if figure == "missed_departure_share" else 1  # printed as a percentage
        assert abs(printed - scale * mean) <= 0.5 * 10.0**-digits + 1e-9, (figure, point, cell["text"])
        behaviour = point_of.loc[point, "behaviour"]
        base = point_of[(point_of["policy"] == "current") & (point_of["behaviour"] == behaviour)].index[0]
        if base == point:
            assert cell["data-difference"] in ("nan", "")
            continue
        other = runs.loc[runs["point"] == base].set_index("replication")[figure]
        diff, dlow, dhigh = _t_interval(values - other)
        if dlow == dhigh and figure != "staff_hours":  # the same in 3 replications is not exact
            dlow = dhigh = math.nan
        assert _close(cell["data-difference"], diff), (figure, point)
        assert _close(cell["data-difference-low"], dlow) and _close(cell["data-difference-high"], dhigh)


def test_the_briefing_opens_with_a_bottom_line_of_at_most_three_sentences(briefed: Briefed) -> None:
    md = briefed.markdown.replace("\\", "")
    line = md[md.index("**Bottom line.**"):].split("\n")[0].removeprefix("**Bottom line.** ")
    assert md.index("**Bottom line.**") < md.index("## 1.")
    sentences = [s for s in re.split(r"(?<=[.])\s+(?=[A-Z])", line) if s]
    assert 1 <= len(sentences) <= 3, sentences
    assert "Under adaptive behaviour" in sentences[0]  # the headline scenario
    assert "_" not in line  # display labels, no identifiers
    if "is the policy to prefer" in line:  # which policy, its gain with an interval, cost and people
        assert "95% interval" in sentences[0] and "staff-hours" in sentences[1] and "people who try" in line
        assert "time in port" in sentences[1]
    elif "no policy is shown to detect more than" in sentences[0]:  # named only as a gain chance could give
        assert "the largest (not distinguishable from chance) gain" in sentences[0] and "95% interval" in sentences[0]
    assert "0 staff-hours" not in line and "takes" not in line
    assert 'data-claim="bottom-line"' in briefed.html


def test_three_replications_carry_a_plain_warning(briefed: Briefed) -> None:
    md = briefed.markdown.replace("\\", "")
    comparison = md[md.index("Policy comparison"):]
    assert "Only 3 replications per policy: these intervals are unreliable" in comparison


def test_derived_figures_are_recomputed_from_the_runs(briefed: Briefed) -> None:
    derived = pd.read_parquet(briefed.out / "briefing_runs.parquet")
    for _, row in derived.iterrows():
        run = briefed.out / "runs" / row["run_id"]
        world = json.loads((run / "world.json").read_text(encoding="utf-8"))
        attempts = pd.read_parquet(run / "truth" / "attempts.parquet")
        attempts = attempts[attempts["day"] >= 2]  # after the warm-up
        # an attempt's hazard: its boarding point's plus its concealment depth's, at most 1
        hazard = attempts["point"].map({p["name"]: p["hazard"] for p in world["boarding_points"]})
        hazard = (hazard + attempts["depth"].map({d["name"]: d["hazard"] for d in world["depths"]})).clip(upper=1.0)
        expected = (attempts["persons"] * hazard).sum() / attempts["persons"].sum()
        assert math.isclose(row["hazard_weighted_share"], expected)
        crossed = attempts[(attempts["outcome"] == "crossed") & (attempts["point"] == "holding_yard")]
        assert row["crossings_after_checks"] == crossed["persons"].sum()  # the one point after every check
    # The estimate row is the expansion's undetected count at the last primary station over the summarised days.
    first = derived.iloc[0]
    run = briefed.out / "runs" / first["run_id"]
    result = expansion(read_tables(run), (2, 11), 0.9, sensitivities=sensitivities_from_world(read_world(run)),
                       station="checkin_probe")
    assert math.isclose(first["est_crossings"], result.undetected)


def test_headline_names_the_best_policy_within_the_delay_limits(briefed: Briefed) -> None:
    runs = _runs(briefed.out)
    means = runs.groupby(["behaviour", "policy"])[["detections", "time_in_port_p95_min",
                                                   "missed_departure_share"]].mean()
    claims = [c for c in briefed.page.claims if c["data-claim"] == "best-within-limits"]
    assert {c["data-scenario"] for c in claims} == {"static behaviour", "adaptive behaviour"}
    for claim in claims:
        group = means.loc[claim["data-scenario"].split()[0]]
        base = group.loc["current"]
        within = group[(group["time_in_port_p95_min"] <= 1.10 * base["time_in_port_p95_min"])
                       & (group["missed_departure_share"] <= base["missed_departure_share"] + 0.01)]
        assert claim["data-policy"] == within["detections"].idxmax()
        # display labels in headlines: the file's label, else the identifier in words; never the identifier
        shown = {"current": "Current", "double_imaging": "Image twice as many"}[claim["data-policy"]]
        assert shown in claim["text"] and "_" not in claim["text"].split(":")[0]
    crossings = next(c for c in briefed.page.claims if c["data-claim"] == "crossings")
    point = int(crossings["data-point"])
    assert _close(crossings["data-crossings"], runs.loc[runs["point"] == point, "crossings"].mean())


# -- safety of the page ----------------------------------------------------------------------------------


def test_markup_from_world_and_experiment_files_is_escaped(briefed: Briefed) -> None:
    assert "<script" not in briefed.html.lower()
    assert "&lt;script&gt;alert(1)&lt;/script&gt; Quay &amp; &lt;b&gt;Sons&lt;/b&gt;" in briefed.html
    assert "&lt;i&gt;(illustrative)&lt;/i&gt;" in briefed.html and "&lt;em&gt;twice&lt;/em&gt;" in briefed.html
    assert {"script", "b", "i", "em"}.isdisjoint(briefed.page.tags)

def test_markdown_shows_text_from_files_as_text(briefed: Briefed) -> None:
    # CommonMark (spec 0.31, "Backslash escapes"): any escaped ASCII punctuation is shown as itself, so a
    # bracket, angle bracket, ampersand or emphasis mark preceded by a backslash opens no link, image, tag,
    # entity or emphasis; a bare address with its colon escaped is no autolink (GitHub-flavoured extension).
    md = briefed.markdown
    assert "\\<script\\>alert(1)\\</script\\> Quay \\& \\<b\\>Sons\\</b\\>" in md
    assert "\\[see\\](javascript:alert(1)) \\!\\[x\\](https\\://example.invalid/t.png) \\*now\\*" in md
    assert "&amp;" not in md and "&lt;" not in md  # no entity for a reader to see
    body = re.sub(r"!\[[^\]]*\]\(figures/[\w-]+\.png\)", "", md).replace("<br>", " ")  # own figures, line breaks
    for mark in ("[", "]", "<", ">", "&", "`"):
        unescaped = [m.start() for m in re.finditer(re.escape(mark), body) if body[m.start() - 1] != "\\"]
        assert not unescaped, (mark, body[unescaped[0] - 40:unescaped[0] + 40])
    assert not re.search(r"(?<!\\)://", body)


def test_the_page_needs_no_network(briefed: Briefed) -> None:
    for tag, attribute, value in briefed.page.links:
        if attribute == "src":
            assert tag == "img" and value.startswith("data:image/png;base64,")
        else:
            assert attribute == "href" and value.startswith("#"), (tag, attribute, value)
    styles = "".join(re.findall(r"<style>(.*?)</style>", briefed.html, flags=re.S))
    assert "url(" not in styles and "@import" not in styles
    assert 'http-equiv="Content-Security-Policy"' in briefed.html


# -- the command line ---------------------------------------------------------------------------------------


def test_brief_refuses_bad_requests(briefed: Briefed, tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["brief", str(briefed.out), "--baseline", "no_such_policy"]) == 2
    assert "--baseline no_such_policy: no factor has that level" in capsys.readouterr().err
    assert main(["brief", str(briefed.out), "--format", "pdf"]) == 2
    assert "--format" in capsys.readouterr().err
    assert main(["brief", str(tmp_path)]) == 2
    assert "no experiment.json" in capsys.readouterr().err


def test_baseline_option_rebuilds_the_pairs(briefed: Briefed) -> None:
    batch = load_batch(briefed.out, baseline="double_imaging")
    points = batch.points
    for point, base in batch.compare_to.items():
        if points.loc[point, "policy"] == "double_imaging":
            assert base is None
        else:
            assert points.loc[base, "policy"] == "double_imaging"
            assert points.loc[base, "behaviour"] == points.loc[point, "behaviour"]


def test_demo_replaces_only_an_earlier_demo(tmp_path: Path) -> None:
    other = tmp_path / "someone_elses"
    other.mkdir()
    (other / "notes.txt").write_text("keep me", encoding="utf-8")
    with pytest.raises(InputError, match="not an earlier demo"):
        _clear_previous_demo(other)
    assert (other / "notes.txt").is_file()
    batch_demo, run_demo = tmp_path / "demo", tmp_path / "old_demo"
    for folder, record in ((batch_demo, "experiment.json"), (run_demo, "manifest.json")):
        folder.mkdir()
        (folder / record).write_text(json.dumps({"command": ["undertow", "demo"]}), encoding="utf-8")
        _clear_previous_demo(folder)
        assert not folder.exists()


def test_demo_experiment_supports_a_briefing() -> None:
    plan = load_plan(DEMO_EXPERIMENT)
    labels = {f.label: f for f in plan.factors}
    assert labels["policy"].baseline is not None and len(labels["policy"].levels) >= 3
    assert [level.label for level in labels["behaviour"].levels] == ["static", "adaptive"]
    assert plan.spec.replications >= 5
    day = min(iv["day"] for iv in plan.world_data["interventions"])
    assert day < plan.spec.warmup_days + plan.spec.days  # the daily series around it can be drawn


# -- a real browser ----------------------------------------------------------------------------------------------

def test_a_headless_browser_shows_every_image(briefed: Briefed, tmp_path: Path) -> None:
    require_chromium()
    probed = tmp_path / "probed.html"
    probed.write_text(briefed.html.replace("<head>", "<head>\n" + PROBE, 1), encoding="utf-8")
    result = _probe(probed, tmp_path / "profile-probe")
    assert result["images"] == len(FIGURES)
    assert result["undecoded"] == []
    assert result["errors"] == []
    assert result["fetched"] == []
    # The probe itself must see a broken image: the same page with one figure's bytes damaged.
    broken = tmp_path / "broken.html"
    damaged = re.sub(r"(data:image/png;base64,)[A-Za-z0-9+/]{40}", r"\1" + "A" * 40, probed.read_text(), count=1)
    broken.write_text(damaged, encoding="utf-8")
    assert len(_probe(broken, tmp_path / "profile-broken")["undecoded"]) == 1
    shot = tmp_path / "briefing.png"
    subprocess.run([*_chromium_args(tmp_path / "profile-shot"), "--hide-scrollbars", f"--screenshot={shot}",
                    "--window-size=1280,4000", (briefed.out / "briefing.html").as_uri()],
                   capture_output=True, timeout=120, check=True)
    assert shot.read_bytes().startswith(PNG_SIGNATURE)
    print(f"screenshot: {shot}")


def test_a_sampled_design_briefs_with_what_it_supports(tmp_path: Path) -> None:
    """A Latin hypercube has no policies or baseline: no frontier or heat map, a points table and a drivers
    section instead (partial rank correlation and PRIM over the sampled ranges)."""
    experiment = {
        "kind": "experiment", "name": "sampled", "world": str(DEMO_WORLD), "days": 4, "warmup_days": 1,
        "replications": 1, "seed": 3, "design": "latin_hypercube", "samples": 8,
        "factors": [
            {"name": "imaging_fraction", "path": "stations.gate_imaging.selection.fraction", "range": [0.1, 0.5]},
            {"name": "yard_interdiction", "path": "boarding_points.holding_yard.interdiction.default",
             "range": [0.02, 0.12]},
        ],
    }
    path = _write_yaml(tmp_path / "sampled.yaml", experiment)
    out = tmp_path / "batch"
    run_batch(path, out, "serial", command=["undertow", "batch", str(path)])
    assert main(["brief", str(out), "--format", "html"]) == 0
    assert not (out / "briefing.md").exists()
    page = Page((out / "briefing.html").read_text(encoding="utf-8"))
    assert {"question", "headline", "comparison", "figures", "estimators", "drivers", "method"} <= set(page.sections)
    assert "frontier" not in page.figures and "displacement" not in page.figures
    assert 'data-table="points"' in (out / "briefing.html").read_text(encoding="utf-8")


def test_stakeholder_ties_and_costs_follow_one_convention(briefed: Briefed) -> None:
    from abm.report.briefing import build
    from abm.report.tables import MEASURE, STAKEHOLDERS, stakeholder_view

    built = build(briefed.out)
    runs = built.runs
    for scenario in {tuple(v) for v in built.batch.points[built.batch.scenario_labels].itertuples(index=False)}:
        view = stakeholder_view(built.batch, built.comparison, runs, scenario).set_index("stakeholder")
        for s in STAKEHOLDERS:
            pick = int(view.loc[s.name, "point"])
            points = [p for p in built.batch.points.index if built.batch.scenario_of(p) == scenario]
            mean = runs.groupby("point")[s.figure].mean()
            best = max(points, key=lambda p: MEASURE[s.figure].better * mean[p])
            if pick != best:  # a tie: the paired t-interval (scipy) of pick - best holds zero
                diff = (runs[runs["point"] == pick].set_index("replication")[s.figure]
                        - runs[runs["point"] == best].set_index("replication")[s.figure])
                low, high = stats.t.interval(0.95, len(diff) - 1, loc=diff.mean(), scale=stats.sem(diff))
                assert low <= 0 <= high and view.loc[s.name, "tied_with"]
            for other in STAKEHOLDERS:
                if other.name == s.name:
                    continue
                theirs = int(view.loc[s.name, f"pick:{other.name}"])
                worse = MEASURE[other.figure].better * (mean[theirs] - mean[pick])  # positive: a cost to them
                assert view.loc[s.name, f"cost:{other.name}"] == pytest.approx(worse, abs=1e-9)
