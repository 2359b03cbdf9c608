"""A land border has no departures: its batch output and briefing say nothing of missing them.

Corran Ridge (fictional) lets a lorry leave as soon as it clears the last station, so there is
no missed-departure figure to compare, no delay limit on it and no "departure" to speak of.
"""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import yaml

ROOT = Path(__file__).resolve().parents[2]
UNDERTOW = Path(sys.executable).parent / "undertow"


def test_land_border_batch_and_briefing_leave_departures_out(tmp_path: Path) -> None:
    def undertow(*args: str) -> str:
        result = subprocess.run([str(UNDERTOW), *args], capture_output=True, text=True, timeout=300, cwd=tmp_path)
        assert result.returncode == 0, result.stderr
        return result.stdout + result.stderr

    undertow("new", "experiment", str(ROOT / "worlds/corran_ridge/world.yaml"), "e.yaml")
    experiment = yaml.safe_load((tmp_path / "e.yaml").read_text(encoding="utf-8"))
    experiment.update(days=4, warmup_days=1, replications=2)
    (tmp_path / "e.yaml").write_text(yaml.safe_dump(experiment), encoding="utf-8")
    printed = undertow("batch", "e.yaml", "--out", "b")
    assert "only 2 replications" in printed and "only 0" not in printed
    assert "issed" not in printed and "Time at the border, 95th percentile" in printed
    undertow("brief", "b")
    text = (tmp_path / "b" / "briefing.md").read_text(encoding="utf-8")
    assert "time at the border" in text
    for foreign in ("departure", "issed", "n/a", "sailing", "in port"):
        assert foreign not in text, foreign
