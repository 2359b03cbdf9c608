"""Files are written whole: two processes writing the same file at once never leave it partial or fail.

That happens for real when a straggler of an interrupted batch and the resumed
batch both derive a run's estimates cache.
"""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pandas as pd

WRITER = """
import sys
from pathlib import Path
import pandas as pd
from abm.records import write_json, write_parquet
path = Path(sys.argv[1])
for _ in range(60):
    write_json({"values": list(range(5000))}, path)
    write_parquet(pd.DataFrame({"day": range(5000)}), path.with_suffix(".parquet"), "daily")
"""


def test_concurrent_writers_of_one_file_all_succeed_and_readers_see_whole_files(tmp_path: Path) -> None:
    path = tmp_path / "derived.json"
    writers = [subprocess.Popen([sys.executable, "-c", WRITER, str(path)]) for _ in range(3)]
    while any(writer.poll() is None for writer in writers):
        if path.is_file():
            assert json.loads(path.read_text(encoding="utf-8"))["values"][-1] == 4999
    assert [writer.wait() for writer in writers] == [0, 0, 0]
    assert len(pd.read_parquet(path.with_suffix(".parquet"))) == 5000
    assert not list(tmp_path.glob(".*.tmp"))  # every temporary file was renamed into place
