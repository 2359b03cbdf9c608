"""The briefing's first section: how many are trying and getting through.

A small calibration of the small reference world (rejection ABC with its leave-one-out self-check) and a
batch under its posterior; then the same batch without the calibration. The section must answer from the
calibration with each figure's interval and measured coverage, put the closed-form estimators beside it
with their measured bias and coverage, call none of them reliable unless its coverage is near nominal, and
without a calibration say that the inflow is an assumption of the world file. Every number checked here is
read back from the calibration's own tables (no outside source applies: these are properties of the report).
"""

from __future__ import annotations

import re
import shutil
from html.parser import HTMLParser
from pathlib import Path
from typing import Any

import pandas as pd
import pytest
import yaml

from abm.analysis.estimator_check.cache import cached_estimates
from abm.calibration import calibrate
from abm.calibration.config import LATENT
from abm.calibration.self_check import within_nominal
from abm.cli import main
from abm.experiment.batch import run_batch
from abm.experiment.single import run_to_directory
from abm.world import file_hash, load_world

ROOT = Path(__file__).resolve().parents[2]
SMALL_WORLD = ROOT / "worlds" / "reference" / "small_inflow" / "world.yaml"


def _yaml(path: Path, data: Any) -> Path:
    path.write_text(yaml.safe_dump(data, sort_keys=False), encoding="utf-8")
    return path


class Cells(HTMLParser):
    """Every table cell's data-* attributes and text, by table, and the claims of list items."""

    def __init__(self, text: str) -> None:
        super().__init__(convert_charrefs=True)
        self.cells: list[dict[str, str]] = []
        self.claims: list[str] = []
        self.section_order: list[str] = []
        self._cell: dict[str, str] | None = None
        self.feed(text)

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        a = {k: v or "" for k, v in attrs}
        if tag == "section":
            self.section_order.append(a.get("data-section", ""))
        if tag in ("td", "th"):
            self._cell = {**a, "text": ""}
        if tag == "li" and "data-claim" in a:
            self.claims.append(a["data-claim"])

    def handle_data(self, data: str) -> None:
        if self._cell is not None:
            self._cell["text"] += data + "\n"

    def handle_endtag(self, tag: str) -> None:
        if tag in ("td", "th") and self._cell is not None:
            self.cells.append(self._cell)
            self._cell = None


@pytest.fixture(scope="module")
def batches(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Path]:
    root = tmp_path_factory.mktemp("answer")
    world = root / "world.yaml"
    shutil.copy(SMALL_WORLD, world)
    target = root / "records"
    run_to_directory(load_world(world), file_hash(world), 21, 77, target, warmup=7)
    for entry in target.iterdir():  # an agency's records: observed tables only
        if entry.name != "observed":
            shutil.rmtree(entry) if entry.is_dir() else entry.unlink()
    calibration = _yaml(root / "calibration.yaml", {
        "name": "small inflow (briefing test)", "world": "world.yaml",
        "observed": {"path": "records", "first_day": 7}, "days": 21, "warmup_days": 7, "seed": 3,
        "summaries": ["detections_by_station", "repeat_frequencies"],
        "priors": [{"path": "adversary.arrivals_per_day", "dist": "uniform", "low": 1, "high": 20}],
        "method": {"name": "rejection", "draws": 80, "accept": 0.5}, "predictive_runs": 0, "self_check": 50,
    })
    calibrate(calibration, root / "calibration", figures=False)
    experiment = {
        "name": "answer test", "world": "world.yaml", "days": 8, "warmup_days": 2, "replications": 3, "seed": 9,
        "factors": [{"name": "policy", "baseline": "current", "levels": [
            {"name": "current", "set": {}},
            {"name": "more_gate", "set": {"stations.gate.selection.fraction": 0.6}}]}],
    }
    out = {}
    for name, extra in (("calibrated", {"calibration": "calibration"}), ("assumed", {})):
        path = _yaml(root / f"{name}.yaml", experiment | extra)
        run_batch(path, root / name, "serial", command=["undertow", "batch"], extensions=(cached_estimates,))
        assert main(["brief", str(root / name)]) == 0
        out[name] = root / name
    out["calibration"] = root / "calibration"
    return out


def test_the_answer_comes_first_from_the_calibration_with_its_measured_coverage(batches: dict[str, Path]) -> None:
    html = (batches["calibrated"] / "briefing.html").read_text(encoding="utf-8")
    page = Cells(html)
    assert page.section_order[:3] == ["question", "answer", "headline"]
    assert "How many are trying and getting through" in html
    posterior = pd.read_parquet(batches["calibration"] / "posterior_summary.parquet").set_index("quantity")
    check = pd.read_parquet(batches["calibration"] / "self_check.parquet").set_index("quantity")
    answer = {c["data-quantity"]: c for c in page.cells if "data-mean" in c and "data-quantity" in c}
    coverage = {c["data-quantity"]: c for c in page.cells if "data-coverage" in c and "data-quantity" in c}
    for quantity in (*LATENT, "adversary.arrivals_per_day"):
        assert float(answer[quantity]["data-mean"]) == pytest.approx(posterior.loc[quantity, "mean"])
        assert float(answer[quantity]["data-low"]) == pytest.approx(posterior.loc[quantity, "low"])
        assert float(coverage[quantity]["data-coverage"]) == pytest.approx(check.loc[quantity, "coverage"])
    assert "parameter uncertainty as well as simulation noise" in html


def test_closed_form_estimators_stand_beside_it_and_none_is_called_reliable_without_the_coverage(
    batches: dict[str, Path],
) -> None:
    html = (batches["calibrated"] / "briefing.html").read_text(encoding="utf-8")
    page = Cells(html)
    rows = [c for c in page.cells if "data-reliable" in c]
    assert rows, "the closed-form estimators are shown with what this batch measured"
    reliability = pd.read_parquet(batches["calibrated"] / "estimator_check.parquet")
    assert len(reliability)
    for cell in rows:
        assert (cell["data-reliable"] == "true") == within_nominal(float(cell["data-coverage"]), 0.9)
        assert ("not reliable here" in cell["text"]) == (cell["data-reliable"] == "false")
    if not any(c["data-reliable"] == "true" for c in rows):
        assert "No closed-form estimator is reliable for this crossing" in html
        assert "trusted-estimator" not in page.claims and "Most trusted" not in html


def test_without_a_calibration_the_inflow_is_said_to_be_an_assumption(batches: dict[str, Path]) -> None:
    html = (batches["assumed"] / "briefing.html").read_text(encoding="utf-8")
    markdown = (batches["assumed"] / "briefing.md").read_text(encoding="utf-8").replace("\\", "")  # as rendered
    assert Cells(html).section_order[:3] == ["question", "answer", "headline"]
    for text in (html, markdown):
        assert "How many are trying and getting through" in text
        assert re.search(r"assumption of the world file, adversary\.arrivals_per_day = 6\.0 new groups a day", text)
        assert "simulation noise only" in text
