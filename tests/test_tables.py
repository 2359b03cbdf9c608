"""The data contract (abm.tables): declared once, carried by every file, and the page generated from it.

The Parquet field metadata are read back with pyarrow (an outside reader), so a
file's own description is checked as any other tool would see it.
"""

from __future__ import annotations

from pathlib import Path

import pyarrow.parquet as pq
import pytest

from abm.experiment.single import run_to_directory
from abm.reference import REGENERATE, TABLES_PAGE
from abm.tables import KINDS, RECORD_SETS, table, tables
from abm.tables.page import tables_page
from abm.world import load_world

ROOT = Path(__file__).resolve().parents[1]


def test_every_column_is_described_with_a_kind_and_a_record_set() -> None:
    problems = []
    for name, t in tables().items():
        if not t.description.strip():
            problems.append(f"{name}: no description")
        for c in t.columns:
            if not c.description.strip() or c.kind not in KINDS or t.record_set_of(c) not in RECORD_SETS:
                problems.append(f"{name}.{c.name}")
            # numbers have units; identifiers (ids, a place on the route, keys) are numbers without one
            identifier = c.name.endswith(("_id", "seed", "_draw")) or c.name == "position"
            if c.kind in ("int", "float") and not c.unit and not identifier and t.record_set_of(c) != "key":
                problems.append(f"{name}.{c.name}: a number without a unit")
        names = [c.name for c in t.columns]
        if len(names) != len(set(names)):
            problems.append(f"{name}: a column declared twice")
    assert not problems, "\n".join(problems)


def test_the_page_is_generated_from_the_contract() -> None:
    current = TABLES_PAGE.read_text(encoding="utf-8") if TABLES_PAGE.exists() else ""
    assert current == tables_page(), f"{TABLES_PAGE} differs from abm/tables; regenerate it with {REGENERATE}"


@pytest.fixture(scope="module")
def run_dir(tmp_path_factory: pytest.TempPathFactory) -> Path:
    out = tmp_path_factory.mktemp("contract") / "run"
    run_to_directory(load_world(ROOT / "worlds/stonechat_rail/world.yaml"), "hash", 3, 1, out, warmup=1)
    return out


def test_every_file_of_a_run_carries_its_declarations(run_dir: Path) -> None:
    files = sorted(run_dir.rglob("*.parquet"))
    assert len(files) == 12
    for path in files:
        schema = pq.read_schema(path)
        declared = table(schema.metadata[b"undertow.table"].decode())
        assert path.relative_to(run_dir).as_posix() == declared.file
        for field in schema:
            column = declared.column(field.name)
            assert column is not None, f"{path.name}: {field.name}"
            meta = {k.decode(): v.decode() for k, v in field.metadata.items()}
            assert meta == {"description": column.description, "unit": column.unit,
                            "record_set": declared.record_set_of(column)}, f"{path.name}: {field.name}"
        assert [f.name for f in schema] == [c.name for c in declared.columns if "<" not in c.name]


def test_truth_columns_are_marked_truth(run_dir: Path) -> None:
    daily = pq.read_schema(run_dir / "daily.parquet")
    for field in daily:
        assert (field.metadata[b"record_set"] == b"truth") == field.name.startswith("truth_"), field.name
    for path in (run_dir / "truth").glob("*.parquet"):
        assert {f.metadata[b"record_set"] for f in pq.read_schema(path)} == {b"truth"}
