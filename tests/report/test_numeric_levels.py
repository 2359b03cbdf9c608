"""A factor whose levels are whole numbers (lanes) briefs: levels read back from Parquet as numpy integers."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import yaml

ROOT = Path(__file__).resolve().parents[2]
UNDERTOW = Path(sys.executable).parent / "undertow"


def test_whole_number_levels_brief(tmp_path: Path) -> None:
    experiment = {
        "kind": "experiment", "name": "Lanes at the scan hall (illustrative)",
        "world": str(ROOT / "worlds/corran_ridge/world.yaml"), "days": 3, "warmup_days": 1, "replications": 2,
        "seed": 5, "design": "full_factorial",
        "factors": [{"name": "scan_lanes", "path": "stations.scan_hall.lanes", "levels": [3, 4], "baseline": 3}],
    }
    (tmp_path / "e.yaml").write_text(yaml.safe_dump(experiment), encoding="utf-8")
    for args in (["batch", "e.yaml", "--out", "b"], ["brief", "b"]):
        result = subprocess.run([str(UNDERTOW), *args], capture_output=True, text=True, timeout=300, cwd=tmp_path)
        assert result.returncode == 0, result.stderr
    assert "scan_lanes" in (tmp_path / "b" / "briefing.md").read_text(encoding="utf-8").replace("\\", "")
