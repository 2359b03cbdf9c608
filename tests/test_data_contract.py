"""Every Parquet file the tool writes says what it holds, as the data contract (abm.tables) declares it.

A tiny batch (briefed), a tiny calibration (rejection with the regression
adjustment, a predictive check and the self-check) and a tiny policy search
are run once each. Every Parquet file in their folders, run directories
included, must name a declared table whose file it is, and every field must
carry that table's declaration of it (description, unit, record set). Between
them the three folders write every declared table. A column that only a bare
placeholder (``<factor>``, ``<parameter>``, ``<path>``) declares must be one
the experiment, calibration or search file names, so that no undeclared
figure can pass for one. Batch tables carry run_id, point and replication.
"""

from __future__ import annotations

import json
import re
import shutil
from pathlib import Path

import pyarrow.parquet as pq
import pytest
import yaml

from abm.analysis.estimator_check.cache import cached_estimates
from abm.analysis.policy_search import FIGURE_SOURCES, load_optimisation, run_optimisation
from abm.calibration import load_calibration, run_calibration
from abm.experiment.batch import run_batch
from abm.experiment.executors import SerialExecutor
from abm.experiment.single import METHOD_SUMMARY_SOURCES, SUMMARY_SOURCES, run_to_directory
from abm.observed import OBSERVED_DIR
from abm.report.evidence import gather
from abm.report.store_view import load_batch
from abm.tables import Table, tables
from abm.world import file_hash, load_world

ROOT = Path(__file__).resolve().parents[1]
DEMO_WORLD = ROOT / "worlds" / "kestrel_quay" / "world.yaml"
SMALL_WORLD = ROOT / "worlds" / "reference" / "small_inflow" / "world.yaml"
BUDGET_WORLD = ROOT / "worlds" / "reference" / "two_station_budget" / "world.yaml"
BATCH_TABLES = ("batch/summary", "batch/failures", "batch/briefing_runs", "batch/estimator_check")


def _write(path: Path, data: object) -> Path:
    path.write_text(yaml.safe_dump(data, sort_keys=False), encoding="utf-8")
    return path


def _batch(root: Path) -> set[str]:
    """Two policies x two replications of the demo world, 1 + 2 days, briefed; returns the factor labels."""
    experiment = {
        "kind": "experiment", "name": "contract batch (test)", "world": str(DEMO_WORLD), "days": 2,
        "warmup_days": 1, "replications": 2, "seed": 3,
        "factors": [{"name": "policy", "baseline": "current", "levels": [
            {"name": "current", "set": {}},
            {"name": "double_imaging", "set": {"stations.gate_imaging.selection.fraction": 0.4}}]}],
    }
    out = root / "batch"
    run_batch(_write(root / "experiment.yaml", experiment), out, "serial", command=["test"],
              extensions=(cached_estimates,))
    gather(load_batch(out))
    return {"policy"}


def _calibration(root: Path) -> set[str]:
    """The small world at 100 lorries a day, three days, 51 prior draws (the self-check needs 50 trials)."""
    world_data = yaml.safe_load(SMALL_WORLD.read_text(encoding="utf-8"))
    world_data["traffic"]["vehicles_per_day"] = 100
    world = _write(root / "world.yaml", world_data)
    target = root / "target"
    run_to_directory(load_world(world), file_hash(world), 3, 101, target)
    for entry in target.iterdir():  # as an agency extract: observed records only
        if entry.name != OBSERVED_DIR:
            shutil.rmtree(entry) if entry.is_dir() else entry.unlink()
    calibration = {
        "kind": "calibration", "name": "contract calibration (test)", "world": str(world),
        "observed": {"path": str(target), "first_day": 0}, "days": 3, "warmup_days": 0, "seed": 5,
        "summaries": ["detections_by_station"],
        "priors": [{"path": "adversary.arrivals_per_day", "dist": "uniform", "low": 1, "high": 20}],
        "method": {"name": "rejection", "draws": 51, "accept": 0.2, "regression": True},
        "predictive_runs": 2, "self_check": 50,
    }
    out = root / "calibration"
    run_calibration(load_calibration(_write(root / "calibration.yaml", calibration)), out, SerialExecutor(),
                    figures=False)
    return {"adversary.arrivals_per_day", "unadjusted:adversary.arrivals_per_day"}


def _search(root: Path) -> set[str]:
    """The two-station budget world, 2 days, one generation of two candidates, an integer variable, named policies."""
    shares = ["stations.brief_lane.selection.fraction", "stations.thorough_bay.selection.fraction"]
    search = {
        "kind": "optimisation", "name": "contract search (test)", "world": str(BUDGET_WORLD), "days": 2,
        "warmup_days": 0, "replications": 1, "seed": 7,
        "objective": {"figure": "crossings", "sense": "minimise"},
        "variables": [{"path": "roster.teams.always.lanes.thorough_bay", "bounds": [1, 2], "integer": True}],
        "allocations": [{"name": "minutes", "total": 1.5, "paths": [{"path": shares[0], "weight": 1.0, "max": 1.0},
                                                                   {"path": shares[1], "weight": 6.0, "max": 1.0}]}],
        "constraints": [{"figure": "time_in_port_p95_min", "max": 60}],
        "policies": [{"name": "brief_only", "set": {shares[0]: 1.0, shares[1]: 0.0}},
                     {"name": "static_people", "set": {"adversary.behaviour": "static"}}],
        "search": {"popsize": 1, "maxiter": 1},
        "selection": {"top": 1, "replications": 2},
    }
    out = root / "search"
    run_optimisation(load_optimisation(_write(root / "search.yaml", search)), out, SerialExecutor(), figure=False)
    paths = {"roster.teams.always.lanes.thorough_bay", *shares, "adversary.behaviour"}
    return paths | {f"set:{p}" for p in paths}


FOLDERS = {"batch": _batch, "calibration": _calibration, "search": _search}


@pytest.fixture(scope="module")
def written(tmp_path_factory: pytest.TempPathFactory) -> dict[str, tuple[Path, set[str]]]:
    """Each folder kind: its folder and the column names its file gives (factors, unknowns, decision paths)."""
    out = {}
    for kind, make in FOLDERS.items():
        root = tmp_path_factory.mktemp(kind)
        named = make(root)
        out[kind] = (root / kind, named)
    return out


def _file_pattern(table: Table) -> re.Pattern[str]:
    """The table's file inside any folder: placeholders stand for one path part."""
    parts = re.split(r"(<[^>]+>)", table.file)
    return re.compile("(^|.*/)" + "".join("[^/]+" if p.startswith("<") else re.escape(p) for p in parts if p) + "$")


def _files(folder: Path) -> list[tuple[Path, pq.ParquetSchema]]:
    return [(path, pq.read_schema(path)) for path in sorted(folder.rglob("*.parquet"))]


@pytest.mark.parametrize("kind", list(FOLDERS))
def test_every_parquet_file_carries_its_tables_declarations(written, kind: str) -> None:
    folder, named = written[kind]
    files = _files(folder)
    assert files
    declared = tables()
    for path, schema in files:
        where = path.relative_to(folder).as_posix()
        name = (schema.metadata or {}).get(b"undertow.table", b"").decode()
        assert name in declared, f"{where}: names no declared table ({name!r})"
        table = declared[name]
        assert _file_pattern(table).match(where), f"{where}: is not {table.file} ({name})"
        for field in schema:
            column = table.column(field.name)
            assert column is not None, f"{where}: {field.name}"
            meta = {k.decode(): v.decode() for k, v in (field.metadata or {}).items()}
            assert meta == {"description": column.description, "unit": column.unit,
                            "record_set": table.record_set_of(column)}, f"{where}: {field.name}"
            if re.fullmatch(r"(set:)?<[^>]+>", column.name) or column.name == "unadjusted:<parameter>":
                assert field.name in named, f"{where}: {field.name} passes for {column.name}"


def test_the_three_folders_write_every_declared_table(written) -> None:
    seen = set()
    for folder, _ in written.values():
        seen |= {schema.metadata[b"undertow.table"].decode() for _, schema in _files(folder)}
    assert seen == set(tables())


def test_batch_tables_carry_the_run_its_point_and_replication(written) -> None:
    folder, _ = written["batch"]
    record = json.loads((folder / "experiment.json").read_text(encoding="utf-8"))
    for name in BATCH_TABLES:
        table = pq.read_table(folder / tables()[name].file)
        assert table.column_names[:3] == ["run_id", "point", "replication"], name
        for run_id, point, replication in zip(*(table.column(c).to_pylist() for c in ("run_id", "point", "replication")),
                                               strict=True):
            assert run_id == f"p{point:03d}-r{replication:02d}" and (folder / "runs" / run_id).is_dir(), name
            assert point < len(record["design"]) and replication < record["experiment"]["replications"], name
    assert pq.read_table(folder / "estimator_check.parquet").num_rows > 0


def test_figure_record_sets_agree_with_the_summary_sources() -> None:
    summary, history, selection = (tables()[name] for name in ("batch/summary", "search/history", "search/selection"))
    for figure, source in SUMMARY_SOURCES.items():
        assert summary.record_set_of(summary.column(figure)) == source, figure
    for figure, source in METHOD_SUMMARY_SOURCES.items():
        column = summary.column(f"method_some_method_{figure}")
        assert column.name == f"method_<method>_{figure}" and summary.record_set_of(column) == source, figure
    for figure, source in FIGURE_SOURCES.items():
        for name in (figure, f"{figure}_mean", f"{figure}_low", f"{figure}_high", f"status:{figure}"):
            table = history if name == figure else selection
            assert table.record_set_of(table.column(name)) == source, name
